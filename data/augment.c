/* data/augment.c — colour jitter, horizontal flip and turn (see augment.h).
 * YIQ: the NTSC luma/chroma transform (FCC 1953 coefficients). */
#include "data/augment.h"
#include "data/image.h"
#include "nn/geom/lens.h"
#include <math.h>
#include <stddef.h>

static float clamp01(float v) { return v < 0 ? 0 : v > 1 ? 1 : v; }

static float uniform(nj_rng *r, float lo, float hi) { return lo + (hi - lo) * (float)nj_rng_uniform(r); }

nj_jitter nj_jitter_draw(nj_rng *r, float B, float C, float S, float H)
{
    nj_jitter j;
    j.brightness = uniform(r, 1 - B, 1 + B);
    j.contrast = uniform(r, 1 - C, 1 + C);
    j.saturation = uniform(r, 1 - S, 1 + S);
    j.hue = uniform(r, -H, H);
    return j;
}

static float grey(float r, float g, float b) { return 0.299f * r + 0.587f * g + 0.114f * b; }

float nj_jitter_pivot(const nj_jitter *j, const float *rgb, int w, int h)
{
    size_t n = (size_t)w * h;
    double s = 0;
    for (size_t i = 0; i < n; i++)
        s += grey(clamp01(rgb[i] * j->brightness), clamp01(rgb[n + i] * j->brightness),
                  clamp01(rgb[2 * n + i] * j->brightness));
    return (float)(s / (double)n);
}

/* Hue rotation in YIQ. */
static void rotate_hue(float *r, float *g, float *b, float cs, float sn)
{
    float y = 0.299f * *r + 0.587f * *g + 0.114f * *b;
    float i = 0.596f * *r - 0.274f * *g - 0.322f * *b;
    float q = 0.211f * *r - 0.523f * *g + 0.312f * *b;
    float i2 = cs * i - sn * q, q2 = sn * i + cs * q;
    *r = clamp01(y + 0.956f * i2 + 0.621f * q2);
    *g = clamp01(y - 0.272f * i2 - 0.647f * q2);
    *b = clamp01(y - 1.106f * i2 + 1.703f * q2);
}

void nj_jitter_apply(const nj_jitter *j, float pivot, const float *in, float *out, int w, int h)
{
    size_t n = (size_t)w * h;
    float cs = cosf(6.2831853f * j->hue), sn = sinf(6.2831853f * j->hue);
    for (size_t p = 0; p < n; p++) {
        float c[3];
        for (int k = 0; k < 3; k++) {
            float v = clamp01(in[k * n + p] * j->brightness);
            c[k] = clamp01((v - pivot) * j->contrast + pivot);
        }
        float gr = grey(c[0], c[1], c[2]);
        for (int k = 0; k < 3; k++) c[k] = clamp01(gr + j->saturation * (c[k] - gr));
        if (j->hue != 0) rotate_hue(&c[0], &c[1], &c[2], cs, sn);
        for (int k = 0; k < 3; k++) out[k * n + p] = c[k];
    }
}

void nj_flip_planes(float *data, int planes, int w, int h)
{
    for (long row = 0; row < (long)planes * h; row++) {
        float *r = data + row * w;
        for (int a = 0, b = w - 1; a < b; a++, b--) {
            float t = r[a];
            r[a] = r[b];
            r[b] = t;
        }
    }
}

void nj_turn_planes(const float *in, float *out, int planes, int w, int h, nj_camera cam, const float rot[3])
{
    /* ray d' = K⁻¹p of the turned view; the recorded ray is Rᵀd' */
    double v3[3] = {rot[0], rot[1], rot[2]}, R[9];
    nj_rot_from_vec(v3, R);
    size_t n = (size_t)w * h;
    for (int v = 0; v < h; v++)
        for (int u = 0; u < w; u++) {
            double x = (u - cam.cx) / cam.fx, y = (v - cam.cy) / cam.fy;
            double dx = R[0] * x + R[3] * y + R[6], dy = R[1] * x + R[4] * y + R[7], dz = R[2] * x + R[5] * y + R[8];
            float us = (float)(cam.fx * dx / dz + cam.cx), vs = (float)(cam.fy * dy / dz + cam.cy);
            for (int k = 0; k < planes; k++)
                out[k * n + (size_t)v * w + u] = nj_plane_bilinear(in + k * n, w, h, us, vs);
        }
}

float nj_draw_angle(nj_rng *r, float max_deg)
{
    return max_deg > 0 ? (float)((2 * nj_rng_uniform(r) - 1) * max_deg * M_PI / 180.0) : 0.0f;
}

void nj_rotated_copy(nj_rng *r, const float *in, float *out, int w, int h, nj_camera cam, float max_deg,
                     float rot[3])
{
    for (int a = 0; a < 3; a++) rot[a] = nj_draw_angle(r, max_deg);
    float gain = (float)(1 + (2 * nj_rng_uniform(r) - 1) * NJ_ROTATED_GAIN);
    float sigma = (float)(nj_rng_uniform(r) * NJ_ROTATED_NOISE);
    nj_turn_planes(in, out, 3, w, h, cam, rot);
    for (size_t i = 0; i < (size_t)3 * w * h; i++) {
        float v = out[i] * gain + sigma * (float)nj_rng_normal(r);
        out[i] = v < 0 ? 0 : v > 1 ? 1 : v;
    }
}

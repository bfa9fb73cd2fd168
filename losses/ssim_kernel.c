/* losses/ssim_kernel.c — vectorisable SSIM forward/backward on one plane (see
 * ssim_kernel.h; formulas in ssim.c's header). */
#include "losses/ssim_kernel.h"
#include "losses/photometric.h"
#include <string.h>

int nj_ssim_pair_ok(nj_graph *g, const nj_tensor *a, const nj_tensor *b, const char *op)
{
    if (!nj_same_shape(a, b))
        nj_graph_fail(g, "%s: shapes differ (%dx%dx%dx%d vs %dx%dx%dx%d)", op,
                      a->n, a->c, a->h, a->w, b->n, b->c, b->h, b->w);
    else if (a->h < 2 || a->w < 2)
        nj_graph_fail(g, "%s: images must be at least 2x2 for SSIM's reflection padding, got %dx%d",
                      op, a->h, a->w);
    else
        return 1;
    return 0;
}

static inline int reflect(int i, int n) { return i < 0 ? -i : (i >= n ? 2 * n - 2 - i : i); }

size_t nj_ssim_scratch_floats(int H, int W)
{
    size_t pad = (size_t)(H + 2) * (W + 2), ext = (size_t)(H + 4) * (W + 4), hw = (size_t)H * W;
    /* padded a, b; means; four coefficient maps (zero-extended); one row temp */
    return 2 * pad + 2 * hw + 4 * ext + (size_t)(W + 4) * 4 + 64;
}

/* p ((H+2)×(W+2)) = x reflection-padded by one. */
static void pad_plane(const float *x, int H, int W, float *p)
{
    int P = W + 2;
    for (int y = -1; y <= H; y++) {
        const float *src = x + (size_t)reflect(y, H) * W;
        float *dst = p + (size_t)(y + 1) * P;
        dst[0] = src[1];
        memcpy(dst + 1, src, sizeof(float) * (size_t)W);
        dst[W + 1] = src[W - 2];
    }
}

/* m (H×W) = 3×3 mean of the padded plane p. */
static void box_mean(const float *restrict p, int H, int W, float *restrict m)
{
    int P = W + 2;
    for (int y = 0; y < H; y++) {
        const float *r0 = p + (size_t)y * P, *r1 = r0 + P, *r2 = r1 + P;
        float *o = m + (size_t)y * W;
        #pragma omp simd
        for (int x = 0; x < W; x++)
            o[x] = (r0[x] + r0[x + 1] + r0[x + 2] + r1[x] + r1[x + 1] + r1[x + 2] +
                    r2[x] + r2[x + 1] + r2[x + 2]) * (1.0f / 9.0f);
    }
}

/* Centred window moments of row y into sx, sy, sxy (length W). */
static void row_moments(const float *restrict pa, const float *restrict pb, const float *restrict ma,
                        const float *restrict mb, int y, int W, float *restrict sx, float *restrict sy,
                        float *restrict sxy)
{
    int P = W + 2;
    const float *a0 = pa + (size_t)y * P, *a1 = a0 + P, *a2 = a1 + P;
    const float *b0 = pb + (size_t)y * P, *b1 = b0 + P, *b2 = b1 + P;
    #pragma omp simd
    for (int x = 0; x < W; x++) {
        float mx = ma[x], my = mb[x], s1 = 0, s2 = 0, s3 = 0, da, db;
#define TAP(ra, rb, d) da = ra[x + d] - mx; db = rb[x + d] - my; s1 += da * da; s2 += db * db; s3 += da * db;
        TAP(a0, b0, 0) TAP(a0, b0, 1) TAP(a0, b0, 2)
        TAP(a1, b1, 0) TAP(a1, b1, 1) TAP(a1, b1, 2)
        TAP(a2, b2, 0) TAP(a2, b2, 1) TAP(a2, b2, 2)
#undef TAP
        sx[x] = s1 * (1.0f / 9.0f);
        sy[x] = s2 * (1.0f / 9.0f);
        sxy[x] = s3 * (1.0f / 9.0f);
    }
}

typedef struct { float *pa, *pb, *ma, *mb, *c[4], *row; } ssim_scratch;

static ssim_scratch carve(float *s, int H, int W)
{
    size_t pad = (size_t)(H + 2) * (W + 2), ext = (size_t)(H + 4) * (W + 4), hw = (size_t)H * W;
    ssim_scratch k;
    k.pa = s; k.pb = s + pad; k.ma = k.pb + pad; k.mb = k.ma + hw;
    for (int i = 0; i < 4; i++) k.c[i] = k.mb + hw + i * ext;
    k.row = k.c[3] + ext;
    return k;
}

static void prepare(const float *a, const float *b, int H, int W, ssim_scratch *k)
{
    pad_plane(a, H, W, k->pa);
    pad_plane(b, H, W, k->pb);
    box_mean(k->pa, H, W, k->ma);
    box_mean(k->pb, H, W, k->mb);
}

void nj_ssim_plane_forward(const float *a, const float *b, int H, int W, float *s, float *scratch)
{
    ssim_scratch k = carve(scratch, H, W);
    prepare(a, b, H, W, &k);
    float *sx = k.row, *sy = sx + W + 4, *sxy = sy + W + 4;
    for (int y = 0; y < H; y++) {
        const float *ma = k.ma + (size_t)y * W, *mb = k.mb + (size_t)y * W;
        row_moments(k.pa, k.pb, ma, mb, y, W, sx, sy, sxy);
        float *o = s + (size_t)y * W;
        #pragma omp simd
        for (int x = 0; x < W; x++) {
            float A1 = 2 * ma[x] * mb[x] + NJ_SSIM_C1, A2 = 2 * sxy[x] + NJ_SSIM_C2;
            float B1 = ma[x] * ma[x] + mb[x] * mb[x] + NJ_SSIM_C1, B2 = sx[x] + sy[x] + NJ_SSIM_C2;
            o[x] = (A1 * A2) / (B1 * B2);
        }
    }
}

/* Coefficient maps of row y into the zero-extended maps (offset 2, 2). */
static void row_coefficients(const ssim_scratch *k, const float *gs, int y, int W,
                             const float *sx, const float *sy, const float *sxy)
{
    const float *ma = k->ma + (size_t)y * W, *mb = k->mb + (size_t)y * W, *g = gs + (size_t)y * W;
    size_t off = (size_t)(y + 2) * (W + 4) + 2;
    float *restrict c0a = k->c[0] + off, *restrict c0b = k->c[1] + off;
    float *restrict c1 = k->c[2] + off, *restrict c2 = k->c[3] + off;
    #pragma omp simd
    for (int x = 0; x < W; x++) {
        float mx = ma[x], my = mb[x];
        float A1 = 2 * mx * my + NJ_SSIM_C1, A2 = 2 * sxy[x] + NJ_SSIM_C2;
        float B1 = mx * mx + my * my + NJ_SSIM_C1, B2 = sx[x] + sy[x] + NJ_SSIM_C2;
        float D = B1 * B2, iD = 1.0f / D, S = A1 * A2 * iD;
        float dmx = (2 * my * A2 - 2 * mx * S * B2) * iD, dmy = (2 * mx * A2 - 2 * my * S * B2) * iD;
        float dvar = -S / B2, dcov = 2 * A1 * iD, kk = g[x] * (1.0f / 9.0f);
        c0a[x] = kk * (dmx - 2 * dvar * mx - dcov * my);
        c0b[x] = kk * (dmy - 2 * dvar * my - dcov * mx);
        c1[x] = kk * 2 * dvar;
        c2[x] = kk * dcov;
    }
}

/* out (length W+2) = 3×3 box sum of the extended map c at padded row Y. */
static void box_sum_row(const float *restrict c, int Y, int W, float *restrict out)
{
    int E = W + 4;
    const float *r0 = c + (size_t)Y * E, *r1 = r0 + E, *r2 = r1 + E;
    #pragma omp simd
    for (int X = 0; X < W + 2; X++)
        out[X] = r0[X] + r0[X + 1] + r0[X + 2] + r1[X] + r1[X + 1] + r1[X + 2] +
                 r2[X] + r2[X + 1] + r2[X + 2];
}

/* g += fold(gpad) for one padded row Y: the adjoint of the reflection padding. */
static void fold_row(const float *gp, int Y, int H, int W, float *g)
{
    float *dst = g + (size_t)reflect(Y - 1, H) * W;
    dst[1] += gp[0];
    #pragma omp simd
    for (int x = 0; x < W; x++) dst[x] += gp[x + 1];
    dst[W - 2] += gp[W + 1];
}

void nj_ssim_plane_backward(const float *a, const float *b, const float *gs, int H, int W,
                            float *ga, float *gb, float *scratch)
{
    ssim_scratch k = carve(scratch, H, W);
    prepare(a, b, H, W, &k);
    size_t ext = (size_t)(H + 4) * (W + 4);
    for (int i = 0; i < 4; i++) memset(k.c[i], 0, sizeof(float) * ext);
    float *sx = k.row, *sy = sx + W + 4, *sxy = sy + W + 4;
    for (int y = 0; y < H; y++) {
        row_moments(k.pa, k.pb, k.ma + (size_t)y * W, k.mb + (size_t)y * W, y, W, sx, sy, sxy);
        row_coefficients(&k, gs, y, W, sx, sy, sxy);
    }
    /* the row temps are free again: four box-summed rows */
    float *s0a = k.row, *s0b = s0a + W + 4, *s1 = s0b + W + 4, *s2 = s1 + W + 4;
    for (int Y = 0; Y < H + 2; Y++) {
        box_sum_row(k.c[2], Y, W, s1);
        box_sum_row(k.c[3], Y, W, s2);
        const float *pa = k.pa + (size_t)Y * (W + 2), *pb = k.pb + (size_t)Y * (W + 2);
        if (ga) {
            box_sum_row(k.c[0], Y, W, s0a);
            #pragma omp simd
            for (int X = 0; X < W + 2; X++) s0a[X] += pa[X] * s1[X] + pb[X] * s2[X];
            fold_row(s0a, Y, H, W, ga);
        }
        if (gb) {
            box_sum_row(k.c[1], Y, W, s0b);
            #pragma omp simd
            for (int X = 0; X < W + 2; X++) s0b[X] += pb[X] * s1[X] + pa[X] * s2[X];
            fold_row(s0b, Y, H, W, gb);
        }
    }
}

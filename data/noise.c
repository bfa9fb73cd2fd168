/* data/noise.c — lattice value noise, fractal sums, cellular noise and a
 * box-filtered pulse train (see noise.h). */
#include "data/noise.h"
#include <math.h>

uint32_t nj_hash3(int x, int y, int z, uint32_t seed)
{
    uint32_t h = seed * 0x9E3779B1u;
    h ^= (uint32_t)x * 0x85EBCA77u;
    h = (h << 13) | (h >> 19);
    h ^= (uint32_t)y * 0xC2B2AE3Du;
    h = (h << 17) | (h >> 15);
    h ^= (uint32_t)z * 0x27D4EB2Fu;
    h ^= h >> 15;
    h *= 0x2C1B3C6Du;
    h ^= h >> 12;
    h *= 0x297A2D39u;
    h ^= h >> 15;
    return h;
}

float nj_hashf(int x, int y, int z, uint32_t seed) { return (float)(nj_hash3(x, y, z, seed) >> 8) * (1.0f / 16777216.0f); }

static float fade(float t) { return t * t * t * (t * (t * 6 - 15) + 10); }

float nj_vnoise2(float x, float y, uint32_t seed)
{
    float fx = floorf(x), fy = floorf(y);
    int ix = (int)fx, iy = (int)fy;
    float tx = fade(x - fx), ty = fade(y - fy);
    float a = nj_hashf(ix, iy, 0, seed), b = nj_hashf(ix + 1, iy, 0, seed);
    float c = nj_hashf(ix, iy + 1, 0, seed), d = nj_hashf(ix + 1, iy + 1, 0, seed);
    float top = a + (b - a) * tx, bot = c + (d - c) * tx;
    return 2.0f * (top + (bot - top) * ty) - 1.0f;
}

float nj_smoothstep(float a, float b, float x)
{
    float t = (x - a) / (b - a);
    t = t < 0 ? 0 : t > 1 ? 1 : t;
    return t * t * (3 - 2 * t);
}

float nj_fbm2(float x, float y, int octaves, float fw, uint32_t seed)
{
    float sum = 0, amp = 0.5f, freq = 1.0f;
    for (int o = 0; o < octaves; o++) {
        /* wavelength 1/freq: full weight above 4 pixels, none below 2 */
        float keep = 1.0f - nj_smoothstep(0.25f, 0.5f, fw * freq);
        if (keep <= 0) break;
        sum += keep * amp * nj_vnoise2(x * freq, y * freq, seed + 101u * (uint32_t)o);
        freq *= 2.0f;
        amp *= 0.5f;
    }
    return sum * 1.6f;
}

void nj_cells2(float x, float y, uint32_t seed, float *f1, float *f2, float *id)
{
    int ix = (int)floorf(x), iy = (int)floorf(y);
    float d1 = 1e9f, d2 = 1e9f, best = 0;
    for (int j = -1; j <= 1; j++)
        for (int i = -1; i <= 1; i++) {
            int cx = ix + i, cy = iy + j;
            float px = cx + nj_hashf(cx, cy, 1, seed), py = cy + nj_hashf(cx, cy, 2, seed);
            float d = sqrtf((px - x) * (px - x) + (py - y) * (py - y));
            if (d < d1) {
                d2 = d1;
                d1 = d;
                best = nj_hashf(cx, cy, 3, seed);
            } else if (d < d2) {
                d2 = d;
            }
        }
    *f1 = d1;
    *f2 = d2;
    *id = best;
}

/* ∫ of the unit pulse train (1 on [0, edge) of each period) from 0 to x. */
static float pulse_integral(float x, float edge)
{
    float n = floorf(x), r = x - n;
    return n * edge + (r < edge ? r : edge);
}

float nj_filtered_pulse(float x, float edge, float fw)
{
    if (fw >= 1.0f) return edge;                       /* many periods per pixel: the mean */
    if (fw < 1e-4f) return (x - floorf(x)) < edge ? 1.0f : 0.0f;
    return (pulse_integral(x + 0.5f * fw, edge) - pulse_integral(x - 0.5f * fw, edge)) / fw;
}

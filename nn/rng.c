/* nn/rng.c — xoroshiro128+ (Blackman & Vigna 2018) with splitmix64 seeding. */
#include "nn/rng.h"
#include <math.h>

static uint64_t splitmix64(uint64_t *x)
{
    uint64_t z = (*x += 0x9E3779B97F4A7C15ull);
    z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ull;
    z = (z ^ (z >> 27)) * 0x94D049BB133111EBull;
    return z ^ (z >> 31);
}

void nj_rng_seed(nj_rng *r, uint64_t seed)
{
    r->s[0] = splitmix64(&seed);
    r->s[1] = splitmix64(&seed);
    if (!r->s[0] && !r->s[1]) r->s[1] = 1;
}

static inline uint64_t rotl(uint64_t x, int k) { return (x << k) | (x >> (64 - k)); }

uint64_t nj_rng_next(nj_rng *r)
{
    uint64_t s0 = r->s[0], s1 = r->s[1], out = s0 + s1;
    s1 ^= s0;
    r->s[0] = rotl(s0, 24) ^ s1 ^ (s1 << 16);
    r->s[1] = rotl(s1, 37);
    return out;
}

double nj_rng_uniform(nj_rng *r) { return (double)(nj_rng_next(r) >> 11) * (1.0 / 9007199254740992.0); }

uint32_t nj_rng_below(nj_rng *r, uint32_t n)
{
    return n ? (uint32_t)(((nj_rng_next(r) >> 32) * (uint64_t)n) >> 32) : 0;
}

double nj_rng_normal(nj_rng *r)
{
    double u1 = nj_rng_uniform(r), u2 = nj_rng_uniform(r);
    if (u1 < 1e-300) u1 = 1e-300;
    return sqrt(-2.0 * log(u1)) * cos(6.283185307179586 * u2);
}

/* Standard normal number `c` of the stream keyed by `key`: splitmix64 (Steele,
 * Lea & Flood 2014) of key + c·golden gamma gives two 24-bit uniforms, turned
 * into a normal by the Box–Muller transform (Box & Muller 1958). */
static float keyed_normal(uint64_t key, uint64_t c)
{
    uint64_t x = key + c * 0x9E3779B97F4A7C15ull, z = splitmix64(&x);
    float u1 = (float)((z >> 40) + 1) * (1.0f / 16777216.0f);   /* (0, 1] */
    float u2 = (float)((z >> 8) & 0xFFFFFF) * (1.0f / 16777216.0f);
    return sqrtf(-2.0f * logf(u1)) * cosf(6.2831853f * u2);
}

void nj_rng_add_normals(nj_rng *r, float *dst, size_t n, uint64_t first, float scale)
{
    uint64_t key = nj_rng_next(r);
    #pragma omp parallel for schedule(static) if (n > 16384)
    for (size_t i = 0; i < n; i++) dst[i] += scale * keyed_normal(key, first + i);
}

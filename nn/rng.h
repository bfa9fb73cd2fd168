/* nn/rng.h — small seeded random number generator (xoroshiro128+,
 * Blackman & Vigna 2018, seeded through splitmix64).  State is two 64-bit words so it
 * can be saved in checkpoints and restored exactly. */
#ifndef NJ_RNG_H
#define NJ_RNG_H
#include <stddef.h>
#include <stdint.h>

typedef struct nj_rng { uint64_t s[2]; } nj_rng;

void nj_rng_seed(nj_rng *r, uint64_t seed);
uint64_t nj_rng_next(nj_rng *r);
/* Uniform in [0, 1). */
double nj_rng_uniform(nj_rng *r);
/* Uniform integer in [0, n). */
uint32_t nj_rng_below(nj_rng *r, uint32_t n);
/* Standard normal (Box–Muller). */
double nj_rng_normal(nj_rng *r);
/* dst[i] += scale · z_i for i < n, z_i standard normal: one draw from r keys a
 * counter-based generator (splitmix64 of key + counter, Box–Muller in float)
 * and element i takes counter first + i.  r advances by one draw whatever n
 * is, the values do not depend on the thread count, and a caller holding
 * elements [first, first + n) of a larger array gets exactly the values a
 * caller holding all of it gets there.  Parallel over OpenMP threads. */
void nj_rng_add_normals(nj_rng *r, float *dst, size_t n, uint64_t first, float scale);

#endif

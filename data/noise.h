/* data/noise.h — procedural noise for the synthetic textures.
 *
 * Value noise on an integer lattice with quintic interpolation (Perlin 2002's
 * fade curve), fractal sums of octaves, and cellular noise (Worley 1996).
 * All take a filter width `fw` — the size of one pixel's footprint in the
 * noise's own units — and fade out the octaves finer than the pixel, so
 * textures do not alias (frequency clamping, Norton, Rockwood & Skolmoski 1982).
 */
#ifndef NJ_NOISE_H
#define NJ_NOISE_H
#include <stdint.h>

/* A 32-bit hash of integer coordinates and a seed. */
uint32_t nj_hash3(int x, int y, int z, uint32_t seed);
/* Hash → [0, 1). */
float nj_hashf(int x, int y, int z, uint32_t seed);
/* Smooth value noise in [−1, 1]. */
float nj_vnoise2(float x, float y, uint32_t seed);
/* Fractal sum of `octaves` value noises (lacunarity 2, gain 0.5), roughly in
 * [−1, 1]; octaves with wavelength below 2·fw fade out to 0. */
float nj_fbm2(float x, float y, int octaves, float fw, uint32_t seed);
/* Cellular noise: distance to the nearest and second nearest jittered
 * feature point (f1, f2), and the nearest cell's id hash in [0, 1). */
void nj_cells2(float x, float y, uint32_t seed, float *f1, float *f2, float *id);
/* 1 inside [0, edge) of every period-1 cell, 0 in the remaining gap, with
 * its edges box-filtered over width fw (a filtered pulse train). */
float nj_filtered_pulse(float x, float edge, float fw);
/* Smooth step 0 → 1 on [a, b]. */
float nj_smoothstep(float a, float b, float x);

#endif

/* train/eval/colormap.h — "mothwing", nightjar's own perceptually uniform colour map
 * for disparity pictures, built in OKLab (Ottosson 2020).
 *
 * Construction: along t ∈ [0, 1] the OKLab lightness rises linearly from 0.25
 * to 0.95 while the hue turns from 290° (dark violet) through magenta, red
 * and orange to 100° (pale yellow), with chroma 0.08 + 0.02·t + 0.08·sin(πt).
 * Colours outside the sRGB gamut are brought inside by lowering only their
 * chroma (bisection), which keeps lightness and hue.  The curve is then
 * re-parametrised by arc length in OKLab, so equal steps of the input are
 * equal perceived colour differences, and sampled into a 256-entry table.
 * Lightness is monotone: near (large disparity) is bright.
 */
#ifndef NJ_COLORMAP_H
#define NJ_COLORMAP_H
#include "data/image.h"
#include <stddef.h>

#define NJ_COLORMAP_NAME "mothwing"
#define NJ_COLORMAP_SIZE 256

/* Gamma-encoded sRGB in [0, 1] → OKLab (L, a, b). */
void nj_srgb_to_oklab(const float rgb[3], float lab[3]);
/* OKLab → linear-light sRGB (may fall outside [0, 1] for out-of-gamut colours). */
void nj_oklab_to_linear_srgb(const float lab[3], float lin[3]);
/* Linear-light → gamma-encoded sRGB (IEC 61966-2-1 transfer function), clamped to [0, 1]. */
float nj_srgb_encode(float linear);

/* The map's table: NJ_COLORMAP_SIZE gamma-encoded sRGB colours in [0, 1]. */
void nj_colormap_table(float lut[NJ_COLORMAP_SIZE][3]);
/* Colours w×h values into *out (allocated here): (v − vmin)/(vmax − vmin)
 * clamped to [0, 1] picks the table entry; non-finite values are black.
 * Returns 0, or -1 when out of memory. */
int nj_colormap_image(const float *v, int w, int h, float vmin, float vmax, nj_image *out);

#endif

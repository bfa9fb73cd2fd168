/* train/eval/colormap.h — "bracken", nightjar's own colour map for depth
 * pictures, and the one depth → colour scaling used by every depth picture
 * (`nightjar predict` previews and the report gallery).
 *
 * The map: dark moss green → olive brown → tawny bronze → pale straw (the
 * colours of bracken from summer to dry winter), built in OKLab
 * (Ottosson 2020).  A cubic Bézier curve in OKLab (L, a, b) runs through
 * these control points, given as (L, chroma C, hue h):
 *     B0 (0.22, 0.040, 135°)   dark moss        (first entry)
 *     B1 (0.45, 0.090, 100°)   olive            (pulls the curve; not on it)
 *     B2 (0.66, 0.150,  55°)   bronze           (pulls the curve; not on it)
 *     B3 (0.96, 0.040,  85°)   pale straw       (last entry)
 * Since the control lightnesses rise, the curve's lightness rises strictly
 * (the derivative of a Bézier is a Bézier of the control differences, all
 * positive), and since the curve stays in the convex hull of the control
 * points, its hue stays between 55° and 135°: warm earth and olive, never
 * violet, magenta or red.  Colours outside the sRGB gamut would be brought
 * inside by lowering only their chroma (none are with these points).  The
 * curve is re-parametrised by OKLab arc length, so neighbouring entries of
 * the 256-entry table are equal perceived steps apart.
 *
 * The scaling: log depth between robust percentiles of the picture's valid
 * depths (NJ_DEPTH_SCALE_NEAR_Q = 2nd → first, darkest entry; NJ_DEPTH_SCALE_FAR_Q
 * = 98th → last, lightest entry), clamped outside.  NEAR IS DARK, FAR IS
 * LIGHT, as distance pales a landscape in haze.  Log depth gives equal colour
 * steps to equal depth ratios, so a wall at 2 m and one at 4 m differ as much
 * as 20 m and 40 m.  Pixels without a valid depth (NaN, ±inf, ≤ 0) get
 * NJ_NO_DEPTH_RGB, a slate blue that lies outside the map's hues.
 */
#ifndef NJ_COLORMAP_H
#define NJ_COLORMAP_H
#include "data/image.h"
#include <stddef.h>

#define NJ_COLORMAP_NAME "bracken"
#define NJ_COLORMAP_SIZE 256
#define NJ_DEPTH_SCALE_NEAR_Q 0.02   /* depth quantile at the dark (near) end */
#define NJ_DEPTH_SCALE_FAR_Q 0.98    /* depth quantile at the light (far) end */
/* Colour of a pixel without a valid depth: gamma-encoded sRGB. */
#define NJ_NO_DEPTH_R 0.33f
#define NJ_NO_DEPTH_G 0.42f
#define NJ_NO_DEPTH_B 0.58f

/* Gamma-encoded sRGB in [0, 1] → OKLab (L, a, b). */
void nj_srgb_to_oklab(const float rgb[3], float lab[3]);
/* OKLab → linear-light sRGB (may fall outside [0, 1] for out-of-gamut colours). */
void nj_oklab_to_linear_srgb(const float lab[3], float lin[3]);
/* Linear-light → gamma-encoded sRGB (IEC 61966-2-1 transfer function), clamped to [0, 1]. */
float nj_srgb_encode(float linear);

/* The map's table: NJ_COLORMAP_SIZE gamma-encoded sRGB colours in [0, 1],
 * dark (entry 0, near) to light (last entry, far). */
void nj_colormap_table(float lut[NJ_COLORMAP_SIZE][3]);

/* Depths at the two ends of a picture's scale. */
typedef struct nj_depth_scale {
    float near;                  /* depth shown with the first (darkest) entry */
    float far;                   /* depth shown with the last (lightest) entry */
} nj_depth_scale;

/* Fits the scale to the valid depths (finite, > 0) among depth[0..n-1]:
 * near = their NJ_DEPTH_SCALE_NEAR_Q quantile, far = their NJ_DEPTH_SCALE_FAR_Q
 * quantile (numpy's linear interpolation).  With no valid depth the scale is
 * {1, 1}.  Returns the count of valid depths, or -1 when out of memory. */
long nj_depth_scale_fit(const float *depth, size_t n, nj_depth_scale *s);
/* Position of a depth on the scale: 0 at near (dark), 1 at far (light),
 * (ln d − ln near)/(ln far − ln near) clamped to [0, 1]; 0.5 when far ≤ near;
 * NaN for a depth that is not finite and > 0. */
float nj_depth_scale_pos(nj_depth_scale s, float depth);
/* The depth at position t ∈ [0, 1] (inverse of nj_depth_scale_pos), for the
 * ticks of a colour bar. */
float nj_depth_scale_depth(nj_depth_scale s, float t);
/* Colour of one depth: the table entry round(pos·(SIZE − 1)), or the
 * no-depth colour. */
void nj_depth_colour(const float lut[NJ_COLORMAP_SIZE][3], nj_depth_scale s, float depth, float rgb[3]);
/* Colours w×h depths into *out (allocated here) with nj_depth_colour.
 * Returns 0, or -1 when out of memory. */
int nj_depth_image(const float *depth, int w, int h, nj_depth_scale s, nj_image *out);

#endif

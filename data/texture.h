/* data/texture.h — procedural materials and lighting of the synthetic yard.
 *
 * Every material is a function of the surface point only (never of the
 * viewing direction), so a point looks the same from every frame — what the
 * photometric losses assume.  `fw` is the pixel footprint on the surface in
 * metres; detail finer than a pixel fades to its mean (no aliasing).
 * Lighting: ambient plus Lambertian sun, slow cloud shadows over the ground,
 * and darkening near the ground on object faces — all view-independent.
 */
#ifndef NJ_TEXTURE_H
#define NJ_TEXTURE_H
#include "data/scene.h"

/* Colour (RGB in [0,1]) of the surface hit. */
void nj_shade(const nj_scene *s, const nj_hit *h, float fw, float rgb[3]);
/* Colour of the sky in unit direction d (infinitely far: no depth). */
void nj_sky(const nj_scene *s, const float d[3], float rgb[3]);

#endif

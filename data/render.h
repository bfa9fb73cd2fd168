/* data/render.h — ray-casting one view of the yard: colour and exact depth.
 *
 * One ray per pixel through the pixel centre (pixel (u, v) centred at
 * integer coordinates, no lens distortion): in camera coordinates the ray is
 * ((u − cx)/fx, (v − cy)/fy, 1), so the hit's ray parameter is its depth
 * along the optical axis.  Depth 0 marks the sky.  Objects are binned into
 * 16×16 pixel tiles by their projected bounding spheres, so each pixel
 * tests only the few objects that can cover it.
 */
#ifndef NJ_RENDER_H
#define NJ_RENDER_H
#include "data/scene.h"

typedef struct nj_view {
    double R[9];             /* camera-to-world rotation */
    double c[3];             /* camera centre */
    float fx, fy, cx, cy;
    int w, h;
} nj_view;

/* rgb: planar 3×h×w; depth: h×w metres (0 = sky).  `time` places the mover.
 * OpenMP over rows.  Returns 0, or -1 when out of memory. */
int nj_render(const nj_scene *s, const nj_view *v, float time, float *rgb, float *depth);
/* The same with `nextra` more objects (the lead cart placed for this frame);
 * `lead_mask` (h×w, may be NULL) gets 255 where the pixel's first hit is
 * the lead cart's material, else 0. */
int nj_render_with(const nj_scene *s, const nj_view *v, float time, const nj_object *extra, int nextra,
                   float *rgb, float *depth, unsigned char *lead_mask);

#endif

/* nn/geom/camera.h — pinhole intrinsics.
 *
 * Convention: pixel (u, v) has its centre at integer coordinates, u to the
 * right, v down; the camera looks along +z with x right, y down.  A pixel at
 * depth d (along z) back-projects to d·K⁻¹[u v 1]ᵀ.
 */
#ifndef NJ_CAMERA_H
#define NJ_CAMERA_H

typedef struct nj_camera { float fx, fy, cx, cy; } nj_camera;

/* Intrinsics for the image resized from w×h to new_w×new_h.  With pixel
 * centres at integers, x maps to (x + 0.5)·new_w/w − 0.5, so
 * fx' = fx·sx and cx' = (cx + 0.5)·sx − 0.5 (same for y). */
nj_camera nj_camera_resize(nj_camera c, int w, int h, int new_w, int new_h);
/* Intrinsics for the crop whose top-left pixel is (x0, y0). */
nj_camera nj_camera_crop(nj_camera c, int x0, int y0);
/* Intrinsics after mirroring an image of width w left-right: x ↦ w − 1 − x,
 * so cx' = w − 1 − cx (fx keeps its sign; the flipped scene is a valid view). */
nj_camera nj_camera_flip(nj_camera c, int w);
/* Row-major 3×3 K and K⁻¹. */
void nj_camera_matrix(nj_camera c, double K[9]);
void nj_camera_inverse(nj_camera c, double Kinv[9]);
/* The ray direction of every pixel of a w×h image, K⁻¹[u v 1]ᵀ = (x, y, 1):
 * x[v·w + u] = (u − cx)/fx and y[v·w + u] = (v − cy)/fy (normalised image
 * coordinates). */
void nj_camera_rays(nj_camera c, int w, int h, float *x, float *y);
/* Non-zero when fx, fy are finite and positive and cx, cy finite. */
int nj_camera_valid(nj_camera c);

#endif

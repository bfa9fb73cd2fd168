/* data/undistort.h — frames of a distorted camera, or of one camera of a raw
 * (unrectified) stereo rig, resampled at load time to the pinhole view the
 * rest of nightjar works in (nn/geom/lens.h: the view's geometry and its
 * intrinsics policy).  The map is computed once per camera; each frame is
 * then sampled bilinearly at full size, before any resize to the training
 * size. */
#ifndef NJ_UNDISTORT_H
#define NJ_UNDISTORT_H
#include "data/image.h"
#include "nn/geom/lens.h"
#include <stdint.h>

typedef struct nj_undistort {
    nj_lens_view view;      /* source camera, lens, rotation and the output pinhole (view.out) */
    float *map;        /* 2·w·h source coordinates (x, y) per output pixel */
    uint64_t key;      /* nj_lens_view_key(&view): a cache of prepared frames must include it */
    int borrowed;      /* map belongs to another nj_undistort of the same view (not freed here) */
} nj_undistort;

/* Fits the output intrinsics of n views together (nj_lens_view_fit: 1 camera, or
 * the 2 of a rig) and builds their maps into u[0..n).  Returns 0, or -1 with
 * the reason in why (the lens folds the image, ...). */
int nj_undistort_init(nj_undistort *u, const nj_lens_view *v, int n, char *why, size_t whylen);
void nj_undistort_free(nj_undistort *u);
/* 1 when a and b resample the same way (same sizes, cameras, lens, rotation). */
int nj_undistort_same(const nj_undistort *a, const nj_undistort *b);

/* Replaces *im (the view's w×h) by its resampled view (bilinear; source
 * coordinates clamped to the image, which the view's policy keeps them in).
 * Returns 0, or -1 with "why" in err (wrong size, out of memory). */
int nj_undistort_image(const nj_undistort *u, nj_image *im, char *err, size_t errlen);
/* A depth map (w×h, metres along the source camera's z; 0 = no depth) into
 * the view: nearest source pixel (depth must not be blended across edges),
 * converted to depth along the view's z (differs when rectification rotates
 * the camera).  dst gets w×h values. */
void nj_undistort_depth(const nj_undistort *u, const float *src, float *dst);
/* A 0/1 mask plane into the view (nearest source pixel). */
void nj_undistort_mask(const nj_undistort *u, const float *src, float *dst);

#endif

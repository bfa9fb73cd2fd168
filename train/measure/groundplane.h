/* train/measure/groundplane.h — metric scale from the camera's known height above
 * flat ground.
 *
 * Depth learned from monocular video is right only up to one unknown factor.
 * If the camera is mounted at a known height above flat ground, the ground
 * seen in the lower part of the image fixes it: back-project those pixels
 * with the predicted depth, fit a plane robustly — RANSAC (Fischler & Bolles
 * 1981) over 3-point hypotheses, then least squares on the inliers — and
 * scale = known height / fitted distance from the camera centre to the plane.
 *
 * The least-squares step works in inverse depth: on the plane n·X = dist a
 * pixel with ray d = X/z has 1/z = (n/dist)·d, linear in the exactly known d,
 * so m = n/dist is fitted to the observed 1/z.  Depth errors move points
 * along their rays, which this models; a perpendicular (total) least-squares
 * fit is biased by them (on the synthetic yard with 5% depth noise it
 * misjudged the height by 3.5%).  Inliers are the points within 2.5 robust
 * standard deviations (1.4826 · median absolute residual) of the current
 * plane; fit and selection repeat until the plane settles.  Points must lie
 * in front of the camera (z > 0).
 *
 * Camera convention of nn/geom/camera.h: x right, y down, z forward, so a
 * level camera sees the ground as a plane with normal ≈ (0, 1, 0).  Only
 * planes whose normal lies within max_tilt_deg of the camera's down axis are
 * accepted (walls in the lower region are not ground).  A relative depth
 * error ε moves a ground point off the plane by about ε·dist, so a candidate
 * plane's inlier tolerance is inlier_tol · its distance: the fit does not
 * depend on the unknown scale of the input.
 */
#ifndef NJ_GROUNDPLANE_H
#define NJ_GROUNDPLANE_H
#include "nn/geom/camera.h"
#include <stddef.h>
#include <stdint.h>

/* The plane {X : n·X = dist}, |n| = 1, n pointing from the camera to the
 * plane (dist ≥ 0 is the camera centre's distance to it). */
typedef struct nj_plane {
    double n[3], dist;
    int inliers, points;     /* inliers of the final fit, points considered */
} nj_plane;

typedef struct nj_plane_options {
    int iterations;          /* RANSAC hypotheses (200) */
    double inlier_tol;       /* inlier distance / plane distance: relative depth error (0.05) */
    double max_tilt_deg;     /* max angle between the normal and the down axis (40) */
    double min_inlier_share; /* fewer inliers than this share of the points: no plane (0.2) */
    float lower_frac;        /* share of the image rows, from the bottom, used (0.35) */
    int max_points;          /* the region is subsampled on a regular grid to about this many (20000) */
    uint64_t seed;           /* RANSAC sampling (1) */
} nj_plane_options;

void nj_plane_options_default(nj_plane_options *o);

/* Robust plane fit to n points (xyz triplets).  Returns 0, or -1 with a
 * one-line reason in err (too few points, no acceptable plane). */
int nj_plane_fit(const float *xyz, int n, const nj_plane_options *o, nj_plane *out,
                 char *err, size_t errlen);
/* Back-projects the lower region of a w×h depth map (z-depth; pixels with
 * non-finite or non-positive depth are skipped) with intrinsics `cam`.
 * *xyz is malloc'd (3 floats per point).  Returns the count, or -1 when out
 * of memory. */
int nj_ground_points(const float *depth, int w, int h, nj_camera cam,
                     const nj_plane_options *o, float **xyz);
/* Fits the ground to a depth map and returns scale = height / plane.dist in
 * *scale (the plane in *plane, may be NULL).  Returns 0 or -1 with err. */
int nj_ground_scale(const float *depth, int w, int h, nj_camera cam, double height,
                    const nj_plane_options *o, double *scale, nj_plane *plane,
                    char *err, size_t errlen);

#endif

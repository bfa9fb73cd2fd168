/* nn/geom/lens.h — lens distortion models, the pinhole view a distorted
 * camera is undistorted (and, for a stereo rig, rectified) to, and the
 * rectifying rotations of a calibrated stereo pair.
 *
 * Coordinates: a ray (X, Y, Z) of the camera (x right, y down, z forward, as
 * in camera.h) has the normalised point (x, y) = (X/Z, Y/Z).  A lens model maps
 * it to the distorted normalised point (xd, yd); the pixel is
 * (fx·xd + cx, fy·yd + cy) with the camera's intrinsics.
 *
 *   radial-tangential (Brown 1966, "Decentering distortion of lenses"), with
 *   r² = x² + y²:
 *     xd = x·(1 + k1 r² + k2 r⁴ + k3 r⁶) + 2 p1 x y + p2 (r² + 2x²)
 *     yd = y·(1 + k1 r² + k2 r⁴ + k3 r⁶) + p1 (r² + 2y²) + 2 p2 x y
 *   equidistant fisheye (Kannala & Brandt 2006, "A generic camera model and
 *   calibration method for conventional, wide-angle, and fish-eye lenses"),
 *   with θ the angle between the ray and the optical axis:
 *     θd = θ (1 + k1 θ² + k2 θ⁴ + k3 θ⁶ + k4 θ⁸),  (xd, yd) = θd · (X, Y)/|(X, Y)|
 * The coefficients keep their published names; both are the models OpenCV
 * implements (calib3d and its fisheye module), which the tests compare with.
 */
#ifndef NJ_LENS_H
#define NJ_LENS_H
#include "nn/geom/camera.h"
#include <stddef.h>
#include <stdint.h>

typedef enum { NJ_LENS_NONE = 0, NJ_LENS_RADTAN = 1, NJ_LENS_FISHEYE = 2 } nj_lens_kind;

typedef struct nj_lens {
    nj_lens_kind kind;
    double c[5];      /* radial-tangential: k1, k2, p1, p2, k3; fisheye: k1, k2, k3, k4 (c[4] unused) */
} nj_lens;

/* "radial-tangential", "fisheye" or "none". */
const char *nj_lens_kind_name(nj_lens_kind k);
/* Coefficient names of a kind, in c[] order (count into *n). */
const char *const *nj_lens_coeff_names(nj_lens_kind k, int *n);

/* The distorted normalised point of the ray (X, Y, Z).  Radial-tangential
 * needs Z > 0; fisheye takes any ray but the optical axis' opposite.
 * Returns 0, or -1 when the model cannot image the ray. */
int nj_lens_distort(const nj_lens *L, const double ray[3], double *xd, double *yd);
/* The inverse: the unit-free ray (x, y, 1)·s whose image is (xd, yd), as the
 * normalised point (x, y) (Newton's method to 1e-13).  Returns 0, or -1 when
 * it does not converge or, for fisheye, the ray is 90° or more off the axis
 * (no pinhole point). */
int nj_lens_undistort(const nj_lens *L, double xd, double yd, double *x, double *y);

/* The folding check: the radial distortion function — r ↦ r·(1 + k1 r² +
 * k2 r⁴ + k3 r⁶), or θ ↦ θd(θ) — must increase from the centre until it
 * reaches rd_max, the largest distorted radius (normalised) inside the image.
 * Where it turns back, two radii land on the same pixel circle: the image
 * folds and cannot be undistorted.  Returns 0, or -1 with the radius (in the
 * normalised units of rd_max) at which it stops increasing in *fold_at. */
int nj_lens_monotone(const nj_lens *L, double rd_max, double *fold_at);
/* det of the radial-tangential map's Jacobian at (x, y) (1 for the other
 * kinds, which are radial and covered by nj_lens_monotone): ≤ 0 where the
 * tangential terms fold the image. */
double nj_lens_jacobian_det(const nj_lens *L, double x, double y);

/* 3×3 row-major helpers (double). */
void nj_rot_from_vec(const double v[3], double R[9]);        /* Rodrigues' formula */
void nj_rot_to_vec(const double R[9], double v[3]);
void nj_mat3_mul(const double A[9], const double B[9], double C[9]);
void nj_mat3_transpose(const double A[9], double T[9]);
/* Largest |RᵀR − I| entry and det(R): for checking a given rotation. */
double nj_rot_error(const double R[9], double *det);

/* Stereo rectification of a calibrated rig (the semantics of OpenCV's
 * cv2.stereoRectify, whose rotation split is Bouguet's).  The second camera's
 * pose is given the way the dataset states it: rot takes directions in the
 * second camera's frame into the first's, pos is the second camera's optical
 * centre in the first camera's frame (metres).  R1, R2 rotate the first and
 * second camera's coordinates into the common rectified frame, whose x axis
 * runs along the baseline; *baseline = |pos|.  Returns 0, or -1 when the
 * baseline is zero or not mainly horizontal, or the second camera is not on
 * the first one's right (x > 0 after rectification). */
int nj_rectify_rotations(const double rot[9], const double pos[3], double R1[9], double R2[9],
                         double *baseline, char *why, size_t whylen);

/* One source camera seen through a pinhole output view of the same size:
 * the output's pixel (u, v) looks along the ray Rᵀ·K_out⁻¹(u, v, 1) of the
 * source camera, which its lens images at a source pixel. */
typedef struct nj_lens_view {
    int w, h;             /* source and output size */
    nj_camera src;        /* source intrinsics (at w×h) */
    nj_lens lens;
    double R[9];          /* source camera → output frame (identity without rectification) */
    nj_camera out;        /* the output pinhole camera */
} nj_lens_view;

/* Chooses the output intrinsics of n views (1: one camera; 2: a rectified
 * pair, which share them) — the policy: the largest pinhole view whose every
 * output pixel sees the inside of its source image (no invalid border, like
 * OpenCV's alpha = 0), with the source's pixel aspect fy/fx and the valid
 * area centred.  The valid rectangle comes from the undistorted source border
 * (every border pixel); the finished map is verified, and the focal length is
 * raised by 0.2 % at a time while any output pixel falls outside (rare: a
 * border that bends inward between its extremes).  Returns 0, or -1 with the
 * reason (the lens folds, or sees 180° across the image). */
int nj_lens_view_fit(nj_lens_view *v, int n, char *why, size_t whylen);

/* The source pixel of output pixel (u, v) (-1 when the lens cannot image
 * the ray); *zscale gets the source ray's z for the output ray of unit z (a
 * point at output depth z' has source depth z'·zscale). */
int nj_lens_view_source(const nj_lens_view *v, double u, double v_, double *su, double *sv, double *zscale);
/* The whole map: map[2·(y·w + x)] = source x, [.. + 1] = source y
 * (malloc'd; NULL when out of memory or a ray cannot be imaged). */
float *nj_lens_view_map(const nj_lens_view *v);
/* FNV-1a hash of everything the map depends on (sizes, both cameras, lens,
 * rotation): a key for caches of undistorted frames. */
uint64_t nj_lens_view_key(const nj_lens_view *v);

#endif

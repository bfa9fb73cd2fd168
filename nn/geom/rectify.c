/* nn/geom/rectify.c — 3×3 rotations and the rectifying rotations of a
 * calibrated stereo rig.
 *
 * Rectification (the rotation split of Bouguet's calibration toolbox, which
 * OpenCV's cv2.stereoRectify implements; described in Bradski & Kaehler 2008,
 * "Learning OpenCV", ch. 12).  With X₂ = R X₁ + T the map from the first
 * camera's coordinates to the second's:
 *   1. each camera turns half-way towards the other: r = rot(−½·vec(R)), so
 *      r·X₂-frame and r⁻¹·X₁-frame coincide in orientation (Rᵀ = r·r);
 *   2. in that common orientation the baseline is t = r·T; the smallest
 *      rotation W turning t onto the −x axis (the second camera to the right)
 *      has axis t × (−e₁) and angle acos(|t_x| / |t|);
 *   3. R1 = W·rᵀ, R2 = W·r, and R2·T = (−|T|, 0, 0).
 * Fusiello, Trucco & Verri 2000 ("A compact algorithm for rectification of
 * stereo pairs") build the rectified frame directly from the baseline and the
 * old z axis; the result differs from this one by a roll about the baseline,
 * which keeps rows aligned as well.  This split is used so the rectified
 * images can be compared with OpenCV's pixel for pixel. */
#include "nn/geom/lens.h"
#include <math.h>
#include <stdio.h>

#define MIN_BASELINE 1e-4       /* metres: 0.1 mm — below it the two cameras are one */
#define MAX_BASELINE 1e3        /* metres: beyond it the positions are not metres of a rig */

void nj_mat3_mul(const double A[9], const double B[9], double C[9])
{
    double t[9];
    for (int i = 0; i < 3; i++)
        for (int j = 0; j < 3; j++) t[3 * i + j] = A[3 * i] * B[j] + A[3 * i + 1] * B[3 + j] + A[3 * i + 2] * B[6 + j];
    for (int i = 0; i < 9; i++) C[i] = t[i];
}

void nj_mat3_transpose(const double A[9], double T[9])
{
    double t[9];
    for (int i = 0; i < 3; i++)
        for (int j = 0; j < 3; j++) t[3 * j + i] = A[3 * i + j];
    for (int i = 0; i < 9; i++) T[i] = t[i];
}

/* Rodrigues: R = I + sin θ [k]× + (1 − cos θ) [k]×², k = v/θ. */
void nj_rot_from_vec(const double v[3], double R[9])
{
    double th = sqrt(v[0] * v[0] + v[1] * v[1] + v[2] * v[2]);
    double a = th < 1e-8 ? 1 - th * th / 6 : sin(th) / th;
    double b = th < 1e-8 ? 0.5 - th * th / 24 : (1 - cos(th)) / (th * th);
    double x = v[0], y = v[1], z = v[2];
    R[0] = 1 - b * (y * y + z * z); R[1] = -a * z + b * x * y;     R[2] = a * y + b * x * z;
    R[3] = a * z + b * x * y;       R[4] = 1 - b * (x * x + z * z); R[5] = -a * x + b * y * z;
    R[6] = -a * y + b * x * z;      R[7] = a * x + b * y * z;      R[8] = 1 - b * (x * x + y * y);
}

void nj_rot_to_vec(const double R[9], double v[3])
{
    double c = (R[0] + R[4] + R[8] - 1) / 2;
    c = c > 1 ? 1 : c < -1 ? -1 : c;
    double th = acos(c), w[3] = {R[7] - R[5], R[2] - R[6], R[3] - R[1]};
    double s = sqrt(w[0] * w[0] + w[1] * w[1] + w[2] * w[2]) / 2;   /* sin θ */
    if (s > 1e-7) {
        for (int i = 0; i < 3; i++) v[i] = w[i] / (2 * s) * th;
    } else if (c > 0) {                                 /* θ ≈ 0: vec ≈ w/2 */
        for (int i = 0; i < 3; i++) v[i] = w[i] / 2;
    } else {                                            /* θ ≈ π: R + I = 2kkᵀ, axis from its largest column */
        int j = 0;
        double best = -1;
        for (int q = 0; q < 3; q++) {
            double n = 0;
            for (int i = 0; i < 3; i++) n += (R[3 * i + q] + (i == q)) * (R[3 * i + q] + (i == q));
            if (n > best) { best = n; j = q; }
        }
        for (int i = 0; i < 3; i++) v[i] = (R[3 * i + j] + (i == j)) / sqrt(best) * th;
    }
}

double nj_rot_error(const double R[9], double *det)
{
    double Rt[9], P[9], m = 0;
    nj_mat3_transpose(R, Rt);
    nj_mat3_mul(Rt, R, P);
    for (int i = 0; i < 9; i++) m = fmax(m, fabs(P[i] - (i % 4 == 0)));
    *det = R[0] * (R[4] * R[8] - R[5] * R[7]) - R[1] * (R[3] * R[8] - R[5] * R[6]) + R[2] * (R[3] * R[7] - R[4] * R[6]);
    return m;
}

int nj_rectify_rotations(const double rot[9], const double pos[3], double R1[9], double R2[9],
                         double *baseline, char *why, size_t whylen)
{
    double R[9], T[3], om[3], r[9], rt[9], t[3];
    nj_mat3_transpose(rot, R);                       /* X₂ = R X₁ + T */
    for (int i = 0; i < 3; i++) T[i] = -(R[3 * i] * pos[0] + R[3 * i + 1] * pos[1] + R[3 * i + 2] * pos[2]);
    double nt = sqrt(T[0] * T[0] + T[1] * T[1] + T[2] * T[2]);
    if (!(nt >= MIN_BASELINE)) {
        snprintf(why, whylen, "zero baseline: the second camera sits %.3g m from the first (at least %g m needed)", nt,
                 MIN_BASELINE);
        return -1;
    }
    if (!(nt <= MAX_BASELINE)) {
        snprintf(why, whylen, "the second camera sits %.3g m from the first: not a stereo rig (at most %g m)", nt,
                 MAX_BASELINE);
        return -1;
    }
    nj_rot_to_vec(R, om);
    for (int i = 0; i < 3; i++) om[i] *= -0.5;
    nj_rot_from_vec(om, r);
    for (int i = 0; i < 3; i++) t[i] = r[3 * i] * T[0] + r[3 * i + 1] * T[1] + r[3 * i + 2] * T[2];
    if (fabs(t[0]) < nt / sqrt(2.0)) {
        snprintf(why, whylen, "the baseline (%.3g, %.3g, %.3g) m is not mainly sideways: only side-by-side rigs "
                 "are rectified", pos[0], pos[1], pos[2]);
        return -1;
    }
    if (t[0] > 0) {
        snprintf(why, whylen, "the second camera sits on the first one's left (position x %.3g m): give the left "
                 "camera as \"camera\" and the right one as \"right_camera\"", pos[0]);
        return -1;
    }
    double w[3] = {0, -t[2], t[1]}, nw = hypot(t[1], t[2]), W[9];   /* t × (−e₁) */
    if (nw > 0) {
        double ang = acos(fmin(1.0, fabs(t[0]) / nt));
        for (int i = 0; i < 3; i++) w[i] *= ang / nw;
    }
    nj_rot_from_vec(w, W);
    nj_mat3_transpose(r, rt);
    nj_mat3_mul(W, rt, R1);
    nj_mat3_mul(W, r, R2);
    *baseline = nt;
    return 0;
}

/* train/measure/rpe.c — rotation part of the relative pose error between consecutive
 * frames (see metrics.h). */
#include "train/measure/metrics.h"
#include <math.h>

void nj_motion_from_c2w(const double *ci, const double *cj, double rel[12])
{
    for (int r = 0; r < 3; r++) {           /* R_jᵀ R_i and R_jᵀ (t_i − t_j) */
        for (int c = 0; c < 3; c++) {
            double s = 0;
            for (int k = 0; k < 3; k++) s += cj[4 * k + r] * ci[4 * k + c];
            rel[4 * r + c] = s;
        }
        double s = 0;
        for (int k = 0; k < 3; k++) s += cj[4 * k + r] * (ci[4 * k + 3] - cj[4 * k + 3]);
        rel[4 * r + 3] = s;
    }
}

/* Angle of a 3×3 rotation M (row-major, stride `st`): atan2(|v|, (tr − 1)/2)
 * with v = (M32 − M23, M13 − M31, M21 − M12)/2 = sin θ · axis (written to v,
 * which nj_rotation_vector reuses).  Unlike acos
 * of the trace alone it keeps full precision for small angles. */
static double angle_of(const double *M, int st, double v[3])
{
    double c = 0.5 * (M[0] + M[st + 1] + M[2 * st + 2] - 1.0);
    v[0] = 0.5 * (M[2 * st + 1] - M[st + 2]);
    v[1] = 0.5 * (M[2] - M[2 * st]);
    v[2] = 0.5 * (M[st] - M[1]);
    return atan2(sqrt(v[0] * v[0] + v[1] * v[1] + v[2] * v[2]), c);
}

double nj_rotation_angle(const double *a)
{
    double v[3];
    return angle_of(a, 4, v);
}

double nj_rotation_error(const double *a, const double *b)
{
    double M[9];                             /* R_aᵀ R_b */
    for (int r = 0; r < 3; r++)
        for (int c = 0; c < 3; c++) M[3 * r + c] = a[r] * b[c] + a[4 + r] * b[4 + c] + a[8 + r] * b[8 + c];
    double v[3];
    return angle_of(M, 3, v);
}

void nj_rotation_vector(const double *a, double v[3])
{
    double w[3];                                /* sin θ · axis */
    double th = angle_of(a, 4, w), s = sin(th);
    if (th < 3.0) {
        double f = s > 1e-300 ? th / s : 1.0;    /* θ / sin θ → 1 as θ → 0 */
        for (int k = 0; k < 3; k++) v[k] = f * w[k];
        return;
    }
    /* near π sin θ loses the axis: take it from R + Rᵀ = 2 cos θ I + 2 (1 − cos θ) n nᵀ,
     * its largest diagonal element's column, the sign from w */
    double c = cos(th), d[3] = {a[0], a[5], a[10]};
    int i = d[0] >= d[1] && d[0] >= d[2] ? 0 : d[1] >= d[2] ? 1 : 2;
    double n[3];
    for (int k = 0; k < 3; k++) n[k] = 0.5 * (a[4 * k + i] + a[4 * i + k]) - (k == i ? c : 0.0);
    double len = sqrt(n[0] * n[0] + n[1] * n[1] + n[2] * n[2]);
    double sg = n[0] * w[0] + n[1] * w[1] + n[2] * w[2] < 0 ? -1.0 : 1.0;
    for (int k = 0; k < 3; k++) v[k] = len > 0 ? sg * th * n[k] / len : 0.0;
}

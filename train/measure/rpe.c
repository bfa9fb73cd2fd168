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
 * with v = (M32 − M23, M13 − M31, M21 − M12)/2 = sin θ · axis.  Unlike acos
 * of the trace alone it keeps full precision for small angles. */
static double angle_of(const double *M, int st)
{
    double c = 0.5 * (M[0] + M[st + 1] + M[2 * st + 2] - 1.0);
    double v[3] = {0.5 * (M[2 * st + 1] - M[st + 2]), 0.5 * (M[2] - M[2 * st]), 0.5 * (M[st] - M[1])};
    return atan2(sqrt(v[0] * v[0] + v[1] * v[1] + v[2] * v[2]), c);
}

double nj_rotation_angle(const double *a)
{
    return angle_of(a, 4);
}

double nj_rotation_error(const double *a, const double *b)
{
    double M[9];                             /* R_aᵀ R_b */
    for (int r = 0; r < 3; r++)
        for (int c = 0; c < 3; c++) M[3 * r + c] = a[r] * b[c] + a[4 + r] * b[4 + c] + a[8 + r] * b[8 + c];
    return angle_of(M, 3);
}

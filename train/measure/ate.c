/* train/measure/ate.c — absolute trajectory error on short snippets with
 * least-squares scale alignment (Zhou et al. 2017 protocol; see metrics.h). */
#include "train/measure/metrics.h"
#include <math.h>
#include <string.h>

void nj_positions_from_c2w(const double *c2w, int n, double *xyz)
{
    const double *P0 = c2w;
    for (int i = 0; i < n; i++) {
        const double *P = c2w + 12 * i;
        double d[3] = {P[3] - P0[3], P[7] - P0[7], P[11] - P0[11]};
        for (int r = 0; r < 3; r++)      /* R_0ᵀ d: column r of R_0 dotted with d */
            xyz[3 * i + r] = P0[r] * d[0] + P0[4 + r] * d[1] + P0[8 + r] * d[2];
    }
}

/* C ← C · T⁻¹ for 3×4 poses, with T⁻¹ = [Rᵀ | −Rᵀ t]. */
static void compose_inverse(double C[12], const double T[12])
{
    double Ri[9], ti[3], out[12];
    for (int r = 0; r < 3; r++)
        for (int c = 0; c < 3; c++) Ri[3 * r + c] = T[4 * c + r];
    for (int r = 0; r < 3; r++)
        ti[r] = -(Ri[3 * r] * T[3] + Ri[3 * r + 1] * T[7] + Ri[3 * r + 2] * T[11]);
    for (int r = 0; r < 3; r++) {
        for (int c = 0; c < 3; c++)
            out[4 * r + c] = C[4 * r] * Ri[c] + C[4 * r + 1] * Ri[3 + c] + C[4 * r + 2] * Ri[6 + c];
        out[4 * r + 3] = C[4 * r] * ti[0] + C[4 * r + 1] * ti[1] + C[4 * r + 2] * ti[2] + C[4 * r + 3];
    }
    memcpy(C, out, sizeof out);
}

void nj_positions_from_motions(const double *rel, int n, double *xyz)
{
    double C[12] = {1, 0, 0, 0, 0, 1, 0, 0, 0, 0, 1, 0};
    for (int i = 0; i < n; i++) {
        if (i > 0) compose_inverse(C, rel + 12 * (i - 1));
        xyz[3 * i] = C[3];
        xyz[3 * i + 1] = C[7];
        xyz[3 * i + 2] = C[11];
    }
}

double nj_ate(const double *gt, const double *pred, int n, double *scale, double *rmse)
{
    double off[3], num = 0, den = 0, sq = 0;
    for (int k = 0; k < 3; k++) off[k] = gt[k] - pred[k];     /* align the first frames */
    for (int i = 0; i < n; i++)
        for (int k = 0; k < 3; k++) {
            double p = pred[3 * i + k] + off[k];
            num += gt[3 * i + k] * p;
            den += p * p;
        }
    double s = den > 0 ? num / den : 0;
    for (int i = 0; i < n; i++)
        for (int k = 0; k < 3; k++) {
            double e = s * (pred[3 * i + k] + off[k]) - gt[3 * i + k];
            sq += e * e;
        }
    if (scale) *scale = s;
    if (rmse) *rmse = n > 0 ? sqrt(sq / n) : 0;
    return n > 0 ? sqrt(sq) / n : 0;
}

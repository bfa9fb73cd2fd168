/* train/measure/metrics.c — depth metrics (Eigen et al. 2014) with per-image median
 * scaling, and their accumulation over images (definitions in metrics.h). */
#include "train/measure/metrics.h"
#include <math.h>
#include <string.h>

size_t nj_depth_select(const float *gt, const float *pred, size_t n, float depth_floor,
                       float depth_cap, float *gt_out, float *pred_out)
{
    size_t k = 0;
    for (size_t i = 0; i < n; i++) {
        float g = gt[i];
        if (!isfinite(g) || !(g > depth_floor) || !(g < depth_cap)) continue;
        gt_out[k] = g;
        pred_out[k] = pred[i];
        k++;
    }
    return k;
}

/* Selection (Wirth 1976): afterwards x[k] is the k-th smallest, everything
 * before it is <= x[k] and everything after is >= x[k]. */
static void select_kth(float *x, long n, long k)
{
    long lo = 0, hi = n - 1;
    while (lo < hi) {
        float pivot = x[k];
        long i = lo, j = hi;
        do {
            while (x[i] < pivot) i++;
            while (pivot < x[j]) j--;
            if (i <= j) {
                float t = x[i];
                x[i] = x[j];
                x[j] = t;
                i++;
                j--;
            }
        } while (i <= j);
        if (j < k) lo = i;
        if (k < i) hi = j;
    }
}

double nj_quantile(float *x, size_t n, double q)
{
    if (n == 0) return NAN;
    q = q < 0 ? 0 : q > 1 ? 1 : q;
    double pos = q * (double)(n - 1);
    size_t lo = (size_t)floor(pos);
    if (lo > n - 1) lo = n - 1;
    select_kth(x, (long)n, (long)lo);
    double a = x[lo], frac = pos - (double)lo;
    if (frac <= 0 || lo + 1 >= n) return a;
    float b = x[lo + 1];             /* the next order statistic: the minimum above lo */
    for (size_t i = lo + 2; i < n; i++)
        if (x[i] < b) b = x[i];
    return a + frac * ((double)b - a);
}

double nj_median(float *x, size_t n)
{
    return nj_quantile(x, n, 0.5);
}

double nj_median_scale(const float *gt, const float *pred, size_t n, float *scratch)
{
    if (n == 0) return NAN;
    memcpy(scratch, gt, n * sizeof *scratch);
    double mg = nj_median(scratch, n);
    memcpy(scratch, pred, n * sizeof *scratch);
    double mp = nj_median(scratch, n);
    return mp > 0 ? mg / mp : NAN;
}

static double clamp_pred(double p, float depth_floor, float depth_cap)
{
    if (!(p >= depth_floor)) return depth_floor;      /* also NaN */
    return p > depth_cap ? depth_cap : p;
}

int nj_depth_metrics_compute(const float *gt, const float *pred, size_t n, double scale,
                             float depth_floor, float depth_cap, nj_depth_metrics *out)
{
    memset(out, 0, sizeof *out);
    if (n == 0) return -1;
    double absrel = 0, sqrel = 0, sq = 0, sqlog = 0;
    long d1 = 0, d2 = 0, d3 = 0;
    for (size_t i = 0; i < n; i++) {
        double g = gt[i], p = clamp_pred(pred[i] * scale, depth_floor, depth_cap);
        double diff = g - p, ratio = g > p ? g / p : p / g, dl = log(g) - log(p);
        absrel += fabs(diff) / g;
        sqrel += diff * diff / g;
        sq += diff * diff;
        sqlog += dl * dl;
        d1 += ratio < 1.25;
        d2 += ratio < 1.25 * 1.25;
        d3 += ratio < 1.25 * 1.25 * 1.25;
    }
    double inv = 1.0 / (double)n;
    out->absrel = absrel * inv;
    out->sqrel = sqrel * inv;
    out->rmse = sqrt(sq * inv);
    out->rmse_log = sqrt(sqlog * inv);
    out->delta1 = (double)d1 * inv;
    out->delta2 = (double)d2 * inv;
    out->delta3 = (double)d3 * inv;
    out->pixels = (long)n;
    return 0;
}

void nj_metrics_acc_init(nj_metrics_acc *a)
{
    memset(a, 0, sizeof *a);
}

void nj_metrics_acc_add(nj_metrics_acc *a, const nj_depth_metrics *m, double scale)
{
    const double v[7] = {m->absrel, m->sqrel, m->rmse, m->rmse_log, m->delta1, m->delta2, m->delta3};
    for (int i = 0; i < 7; i++) a->sum[i] += v[i];
    a->pixels += m->pixels;
    a->images++;
    /* Welford's running mean and sum of squared deviations */
    double d = scale - a->scale_mean;
    a->scale_mean += d / a->images;
    a->scale_m2 += d * (scale - a->scale_mean);
}

void nj_metrics_acc_result(const nj_metrics_acc *a, nj_depth_metrics *mean,
                           double *scale_mean, double *scale_std)
{
    memset(mean, 0, sizeof *mean);
    *scale_mean = *scale_std = 0;
    if (a->images == 0) return;
    double inv = 1.0 / a->images;
    mean->absrel = a->sum[0] * inv;
    mean->sqrel = a->sum[1] * inv;
    mean->rmse = a->sum[2] * inv;
    mean->rmse_log = a->sum[3] * inv;
    mean->delta1 = a->sum[4] * inv;
    mean->delta2 = a->sum[5] * inv;
    mean->delta3 = a->sum[6] * inv;
    mean->pixels = a->pixels;
    *scale_mean = a->scale_mean;
    *scale_std = a->scale_m2 > 0 ? sqrt(a->scale_m2 * inv) : 0;
}

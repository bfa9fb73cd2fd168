/* train/measure/metrics_regions.c — depth metrics over parts of an image: the
 * row-layout oracle, obstacle pixels, bands of true depth, and their
 * accumulation over images (definitions in metrics.h). */
#include "train/measure/metrics.h"
#include <math.h>
#include <string.h>

static const float BAND_FROM[NJ_DEPTH_BANDS] = {0, 3, 6, 10, 20};

int nj_depth_bands(float depth_cap, float *from, float *to)
{
    int n = 0;
    for (int b = 0; b < NJ_DEPTH_BANDS && BAND_FROM[b] < depth_cap; b++, n++) {
        float hi = b + 1 < NJ_DEPTH_BANDS ? BAND_FROM[b + 1] : depth_cap;
        from[b] = BAND_FROM[b];
        to[b] = hi < depth_cap ? hi : depth_cap;
    }
    return n;
}

static int valid(float g, float depth_floor, float depth_cap)
{
    return isfinite(g) && g > depth_floor && g < depth_cap;
}

/* Valid values of gt[0..n-1] into dst; returns their count. */
static size_t gather_valid(const float *gt, size_t n, float depth_floor, float depth_cap, float *dst)
{
    size_t k = 0;
    for (size_t i = 0; i < n; i++)
        if (valid(gt[i], depth_floor, depth_cap)) dst[k++] = gt[i];
    return k;
}

size_t nj_row_layout(const float *gt, int w, int h, float depth_floor, float depth_cap, float *out,
                     float *scratch)
{
    size_t n = (size_t)w * h, k = gather_valid(gt, n, depth_floor, depth_cap, scratch);
    float image_median = (float)nj_median(scratch, k);      /* NaN when k = 0 */
    for (int y = 0; y < h; y++) {
        const float *row = gt + (size_t)y * w;
        size_t m = gather_valid(row, (size_t)w, depth_floor, depth_cap, scratch);
        float v = m ? (float)nj_median(scratch, m) : image_median;
        for (int x = 0; x < w; x++) out[(size_t)y * w + x] = v;
    }
    return k;
}

size_t nj_obstacle_flags(const float *gt, const float *row, size_t n, float depth_floor, float depth_cap,
                         float *flag)
{
    size_t k = 0;
    for (size_t i = 0; i < n; i++) {
        double g = gt[i], m = row[i];
        int is = valid(gt[i], depth_floor, depth_cap) && fabs(g - m) > NJ_OBSTACLE_REL * m;
        flag[i] = (float)is;
        k += (size_t)is;
    }
    return k;
}

/* As nj_depth_metrics_compute clamps: NaN to the near bound. */
static double clamp_pred(double p, float depth_floor, float depth_cap)
{
    if (!(p >= depth_floor)) return depth_floor;
    return p > depth_cap ? depth_cap : p;
}

int nj_region_metrics_compute(const float *gt, const float *pred, const float *flag, size_t n, float lo,
                              float hi, double scale, float depth_floor, float depth_cap, float *scratch,
                              nj_region_metrics *out)
{
    memset(out, 0, sizeof *out);
    double absrel = 0;
    long d1 = 0;
    size_t k = 0;
    for (size_t i = 0; i < n; i++) {
        double g = gt[i];
        if (!(g >= lo && g < hi) || (flag && flag[i] == 0)) continue;
        double p = clamp_pred(pred[i] * scale, depth_floor, depth_cap), ratio = g > p ? g / p : p / g;
        absrel += fabs(g - p) / g;
        d1 += ratio < 1.25;
        scratch[k++] = (float)(p / g);
    }
    if (k == 0) return -1;
    out->absrel = absrel / (double)k;
    out->delta1 = (double)d1 / (double)k;
    out->ratio = nj_median(scratch, k);
    out->pixels = (long)k;
    return 0;
}

void nj_region_acc_init(nj_region_acc *a)
{
    memset(a, 0, sizeof *a);
}

void nj_region_acc_add(nj_region_acc *a, const nj_region_metrics *m)
{
    a->sum[0] += m->absrel;
    a->sum[1] += m->delta1;
    a->sum[2] += m->ratio;
    a->pixels += m->pixels;
    a->images++;
}

void nj_region_acc_result(const nj_region_acc *a, nj_region_metrics *mean)
{
    memset(mean, 0, sizeof *mean);
    if (a->images == 0) return;
    mean->absrel = a->sum[0] / a->images;
    mean->delta1 = a->sum[1] / a->images;
    mean->ratio = a->sum[2] / a->images;
    mean->pixels = a->pixels;
}

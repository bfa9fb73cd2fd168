/* train/measure/metrics.h — depth and camera-motion accuracy against ground truth.
 *
 * Depth (Eigen et al. 2014), over the valid ground-truth pixels of an image —
 * finite gt with depth_floor < gt < depth_cap (the scored interval, written
 * to metrics.json as "scored_depth"):
 *   absrel   = mean |gt − p| / gt          sqrel    = mean (gt − p)² / gt
 *   rmse     = sqrt(mean (gt − p)²)        rmse_log = sqrt(mean (ln gt − ln p)²)
 *   delta_k  = share of pixels with max(gt/p, p/gt) < 1.25^k, k = 1, 2, 3
 * where p is the prediction times a scale factor, then clamped to
 * [depth_floor, depth_cap].  Monocular models are scaled per image by
 * median(gt)/median(p) (Zhou et al. 2017; medians as numpy: the mean of the two
 * middle values for an even count); metric models use scale 1.  Images are
 * accumulated the usual way: the metrics of each image, then their mean over
 * images; `pixels` is the total count of pixels evaluated.  The spread of the
 * per-image scale factors (mean and population standard deviation) shows how
 * consistent a model's scale is.
 *
 * Camera motion (Zhou et al. 2017 protocol): snippets of 5 consecutive frames;
 * ground-truth and predicted camera positions are expressed relative to the
 * snippet's first frame (so the first positions coincide), the prediction is
 * scaled by the least-squares factor s = Σ gt·pred / Σ pred·pred, and the
 * error is e_i = s·pred_i − gt_i.  The protocol's reported number is
 * ate = sqrt(Σ_i |e_i|²) / n (as in the published evaluation code); the plain
 * root-mean-square sqrt(Σ_i |e_i|² / n) is given alongside.
 */
#ifndef NJ_METRICS_H
#define NJ_METRICS_H
#include <stddef.h>

#define NJ_EVAL_DEPTH_FLOOR 1e-3    /* ground truth at or below this is "no data" */
#define NJ_EVAL_DEPTH_CAP 80.0f     /* default depth cap (eval --max-depth) */
#define NJ_ATE_SNIPPET 5

typedef struct nj_depth_metrics {
    double absrel, sqrel, rmse, rmse_log, delta1, delta2, delta3;
    long pixels;
} nj_depth_metrics;

/* Copies the pairs (gt[i], pred[i]) with a valid gt (finite, depth_floor < gt <
 * depth_cap) into gt_out/pred_out (room for n each).  Returns their count. */
size_t nj_depth_select(const float *gt, const float *pred, size_t n, float depth_floor,
                       float depth_cap, float *gt_out, float *pred_out);
/* Quantile q ∈ [0, 1] of x[0..n-1] with numpy's default (linear)
 * interpolation between order statistics; x is reordered.  NaN when n = 0. */
double nj_quantile(float *x, size_t n, double q);
/* Median of x[0..n-1] (numpy's definition: the mean of the two middle
 * values for an even count); x is reordered.  NaN when n = 0. */
double nj_median(float *x, size_t n);
/* median(gt)/median(pred) over n selected pairs (the arrays are not changed;
 * `scratch` needs room for n floats).  NaN when n = 0 or median(pred) ≤ 0. */
double nj_median_scale(const float *gt, const float *pred, size_t n, float *scratch);
/* Metrics of n selected pairs with pred multiplied by `scale` and clamped to
 * [depth_floor, depth_cap].  Returns 0, or -1 when n = 0. */
int nj_depth_metrics_compute(const float *gt, const float *pred, size_t n, double scale,
                             float depth_floor, float depth_cap, nj_depth_metrics *out);

/* Mean of per-image metrics and of the per-image scale factors. */
typedef struct nj_metrics_acc {
    double sum[7];
    long pixels;
    int images;
    double scale_mean, scale_m2;     /* Welford accumulators */
} nj_metrics_acc;

void nj_metrics_acc_init(nj_metrics_acc *a);
void nj_metrics_acc_add(nj_metrics_acc *a, const nj_depth_metrics *m, double scale);
/* Mean metrics (pixels = total); scale mean and population std.  All zero
 * when no image was added. */
void nj_metrics_acc_result(const nj_metrics_acc *a, nj_depth_metrics *mean,
                           double *scale_mean, double *scale_std);

/* ---- regions: the row-layout oracle, depth bands, obstacles, masks --------- */
/*
 * Row-layout oracle: every pixel of row y predicted as the median of the
 * valid ground truth of row y (validity as nj_depth_select); rows without a
 * valid pixel take the median of all valid pixels of the image.  A model
 * that only learned "lower in the image is nearer" cannot beat it.
 *
 * Obstacle pixels: valid ground truth more than NJ_OBSTACLE_REL (20 %) off
 * its row's median, |gt − m_row| > 0.2·m_row: what stands out of the layout.
 *
 * Depth bands of the TRUE depth: [0, 3), [3, 6), [6, 10), [10, 20) and
 * [20, cap) metres; bands at or beyond the cap are dropped and the last band
 * kept ends at the cap.
 *
 * Region metrics (over a subset of an image's selected pixels, the
 * prediction scaled by the image's own factor and clamped as in
 * nj_depth_metrics_compute): AbsRel, δ<1.25 and the median of
 * p/gt (below 1: too near, above: too far; a range compressed towards the
 * middle shows as > 1 in near bands and < 1 in far ones).  Accumulated like
 * the all-pixel metrics: per image, then the mean over the images that have
 * pixels in the region; pixels and images are counted.
 */
#define NJ_OBSTACLE_REL 0.2
#define NJ_DEPTH_BANDS 5

/* The bands below depth_cap: from[b], to[b] (metres, room for
 * NJ_DEPTH_BANDS each).  Returns their count. */
int nj_depth_bands(float depth_cap, float *from, float *to);
/* Fills out (w·h) with the row-layout oracle of gt (w·h); `scratch` needs
 * room for w·h floats.  Returns the number of valid pixels; when 0, out is
 * NaN everywhere. */
size_t nj_row_layout(const float *gt, int w, int h, float depth_floor, float depth_cap, float *out,
                     float *scratch);
/* flag[i] = 1 where gt[i] is valid and |gt[i] − row[i]| > NJ_OBSTACLE_REL·row[i]
 * (row: nj_row_layout's output for the same gt), else 0.  Returns the count. */
size_t nj_obstacle_flags(const float *gt, const float *row, size_t n, float depth_floor, float depth_cap,
                         float *flag);

typedef struct nj_region_metrics {
    double absrel, delta1, ratio;    /* ratio: median of scaled prediction / truth */
    long pixels;
} nj_region_metrics;

/* Region metrics over those of n selected pairs with lo <= gt[i] < hi and
 * (flag NULL or flag[i] != 0); pred is multiplied by `scale` and clamped to
 * [depth_floor, depth_cap].  `scratch` needs room for n floats.  Returns 0, or
 * -1 (out zeroed) when no pair is in the region. */
int nj_region_metrics_compute(const float *gt, const float *pred, const float *flag, size_t n, float lo,
                              float hi, double scale, float depth_floor, float depth_cap, float *scratch,
                              nj_region_metrics *out);

typedef struct nj_region_acc {
    double sum[3];
    long pixels;
    int images;
} nj_region_acc;

void nj_region_acc_init(nj_region_acc *a);
void nj_region_acc_add(nj_region_acc *a, const nj_region_metrics *m);
/* Mean over the images added (pixels = total); all zero when none. */
void nj_region_acc_result(const nj_region_acc *a, nj_region_metrics *mean);

/* ---- camera motion --------------------------------------------------------- */

/* Positions of n frames relative to the first, from camera-to-world poses
 * (12 doubles each, row-major [R | t]): p_i = R_0ᵀ (t_i − t_0). */
void nj_positions_from_c2w(const double *c2w, int n, double *xyz);
/* Positions of n frames relative to the first from the n − 1 predicted
 * motions between consecutive frames: rel[i] (12 doubles, [R | t]) maps
 * points of camera i into camera i + 1, so camera i + 1's pose in the first
 * camera's frame is C_{i+1} = C_i · rel[i]⁻¹ with C_0 = I; p_i = translation of C_i. */
void nj_positions_from_motions(const double *rel, int n, double *xyz);
/* The protocol above on n positions (xyz triplets).  Returns ate; *scale and
 * *rmse (may be NULL) receive the alignment factor and the plain RMS.  When
 * the prediction does not move at all the scale is 0. */
double nj_ate(const double *gt, const double *pred, int n, double *scale, double *rmse);

/* Rotation part of the relative pose error between consecutive frames (the
 * translation part needs the unknown monocular scale; ATE above covers it).
 * An unlearned rotation shows as an error as large as the true rotation.
 *
 * The motion that maps points of camera i into camera j, from their
 * camera-to-world poses: [R_jᵀ R_i | R_jᵀ (t_i − t_j)]. */
void nj_motion_from_c2w(const double *ci, const double *cj, double rel[12]);
/* Rotation angle (radians, 0..π) of a 3×4 [R | t]. */
double nj_rotation_angle(const double *a);
/* Angle (radians) of R_aᵀ R_b: how far the rotations of two motions differ. */
double nj_rotation_error(const double *a, const double *b);
/* Rotation vector (axis × angle, radians, angle 0..π) of a 3×4 [R | t], in
 * the camera frame (x right, y down, z forward): its x component is pitch,
 * y yaw, z roll.  Per axis, the predicted minus the true component over
 * consecutive pairs shows a bias that the angle of R_aᵀ R_b hides (a pose net
 * that trades pitch for the vertical share of its translation). */
void nj_rotation_vector(const double *a, double v[3]);

#endif

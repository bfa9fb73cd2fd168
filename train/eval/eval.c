/* train/eval/eval.c — `nightjar eval`: depth metrics (Eigen et al. 2014) of a
 * trained model on a dataset split, beside three baselines on the same pixels —
 * a constant depth (median-scaled), the untrained network (same architecture
 * and seed) and the row-layout oracle (each row at its median true depth) —
 * also per band of true depth, on obstacle pixels and on lead-vehicle masks
 * (regions.c), plus the 5-frame-snippet trajectory error (Zhou et al.
 * 2017) where ground-truth poses exist.  Prints a table and writes
 * metrics.json atomically. */
#include "train/eval/eval.h"
#include "data/atomic.h"
#include "data/dataset.h"
#include "data/image.h"
#include "data/poses.h"
#include "train/loop/loop.h"
#include "train/measure/measure.h"
#include "train/model/model.h"
#include <cjson/cJSON.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

typedef enum { SCALE_MEDIAN, SCALE_METRIC, SCALE_CAMERA } scaling;
enum { M_MODEL, M_CONSTANT, M_UNTRAINED, M_ORACLE, NMETHODS };
static const char *const METHOD_NAMES[NMETHODS] = {"model", "constant depth", "untrained network",
                                                   "row-layout oracle"};
/* the methods' keys in metrics.json (the model's metrics are at the top level) */
static const char *const METHOD_KEYS[NMETHODS] = {"model", "baseline_constant", "baseline_untrained",
                                                  "baseline_row_layout_oracle"};
_Static_assert(NMETHODS == NJ_EVAL_METHODS, "regions.h counts the same methods");

typedef struct eval_run {
    nj_eval_options a;
    nj_train_config cfg;
    nj_model trained, untrained;
    int have_trained, have_untrained;
    nj_infer inf[2];           /* trained, untrained */
    scaling mode;
    nj_plane_options plane;
    nj_metrics_acc acc[NMETHODS];
    nj_eval_regions regions;
    int frames, no_ground, untrained_no_ground, empty;
    /* pose */
    int frame_step;            /* the pose net is driven on frames this far apart
                                  (nj_train_config_frame_step) */
    int snippets, pose_sequences;
    double ate_mean, ate_m2, rmse_sum, scale_sum;
    int pairs;                 /* frame pairs (frame_step apart) with a rotation error */
    double rot_err_sum, rot_true_sum;   /* radians */
    /* per camera axis (pitch, yaw, roll), radians: sums of squares of the error and
     * of the true component; running means and co-moments (Welford) of the true
     * and predicted components — the mean error is their difference, and the fit
     * of predicted on true stays stable where a component barely varies */
    double axis_err2[3], axis_true2[3];
    double axis_true[3], axis_pred[3], axis_m2t[3], axis_m2p[3], axis_cpt[3];
    /* pairs of a stopped camera (true translation below STILL_SHARE of its
     * sequence's mean) and the rest: what the pose net says while standing still */
    int still_pairs, moving_pairs;
    double still_rot_sum, still_t_sum, moving_t_sum, moving_err_sum;
    /* heading of the moving pairs: the direction the camera centre moved, in
     * the first camera's frame (x right, y down, z forward) */
    double head_err_sum, head_elev_err_sum, head_azim_err_sum, head_elev_true_sum;
    /* frames 2·frame_step apart against their two frame_step halves (moving
     * triples): the pose net's translation length over the halves' summed
     * length, and the truth's (near 1 on a straight route).  A pose net that
     * recalls a place's motion instead of measuring it gives any gap the same
     * motion: about 0.5 (DEVELOPERS.md, "Training recipe") */
    int gap_triples;
    double gap_sum, gap_true_sum;
} eval_run;

#define STILL_SHARE 0.02

#define RAD2DEG(x) ((x) * 57.29577951308232)
/* components of nj_rotation_vector in the camera frame (x right, y down, z forward) */
static const char *const AXIS_NAMES[3] = {"pitch", "yaw", "roll"};

/* ---- setup ------------------------------------------------------------------ */

static int load_models(eval_run *r, char *err, size_t errlen)
{
    if (nj_checkpoint_load(r->a.model, &r->trained, &r->cfg, NULL, err, errlen)) return -1;
    r->frame_step = nj_train_config_frame_step(&r->cfg);
    r->have_trained = 1;
    char e[512];
    if (nj_model_init(&r->untrained, &r->trained.cfg, e, sizeof e)) {
        snprintf(err, errlen, "untrained baseline: %s", e);
        return -1;
    }
    r->have_untrained = 1;
    nj_model *models[2] = {&r->trained, &r->untrained};
    for (int k = 0; k < 2; k++)
        if (nj_infer_init(&r->inf[k], models[k], r->cfg.width, r->cfg.height, e, sizeof e)) {
            snprintf(err, errlen, "%s: %s", r->a.model, e);
            return -1;
        }
    return 0;
}

static void free_run(eval_run *r)
{
    for (int k = 0; k < 2; k++) nj_infer_free(&r->inf[k]);
    if (r->have_trained) nj_model_free(&r->trained);
    if (r->have_untrained) nj_model_free(&r->untrained);
}

/* Parses the description and validates only the sequences of the split. */
static int open_split(const nj_eval_options *a, nj_dataset *ds, char *err, size_t errlen)
{
    nj_problems pr;
    nj_problems_init(&pr);
    nj_data_options o;
    nj_data_options_default(&o);
    o.noffsets = 0;
    o.stereo = 0;
    o.dup_threshold = 0;
    int n = nj_dataset_parse(a->data, ds, &pr), used = 0;
    for (int i = 0; !n && i < ds->nseq; i++)
        if (ds->seq[i].split == a->split) {
            n += nj_sequence_validate(&ds->seq[i], &o, &pr);
            used++;
        }
    if (n == 1 && pr.n == 1) {
        snprintf(err, errlen, "%s", pr.msg[0]);
    } else if (n) {
        nj_problems_print(&pr, stderr);
        snprintf(err, errlen, "%s: %d problems in the dataset (run 'nightjar check-data %s')", a->data, n,
                 a->data);
    } else if (!used) {
        snprintf(err, errlen, "%s: no sequence in split \"%s\"", a->data, nj_split_name(a->split));
        n = 1;
    }
    nj_problems_free(&pr);
    return n ? -1 : 0;
}

/* ---- depth ------------------------------------------------------------------ */

/* Full-size maps and their selected (valid ground truth) pixels: pred[0]
 * the model, pred[1] the untrained network, pred[2] the row-layout oracle;
 * flag[0] obstacle pixels, flag[1] the lead-vehicle mask (when the sequence
 * has one: has_lead). */
typedef struct frame_buf {
    float *gt, *pred[3], *gsel, *psel[3], *flag[2], *fsel[2], *ones, *scratch;
    int has_lead;
} frame_buf;

static void frame_buf_free(frame_buf *b)
{
    free(b->gt);
    for (int k = 0; k < 3; k++) {
        free(b->pred[k]);
        free(b->psel[k]);
    }
    for (int k = 0; k < 2; k++) {
        free(b->flag[k]);
        free(b->fsel[k]);
    }
    free(b->gsel);
    free(b->ones);
    free(b->scratch);
    memset(b, 0, sizeof *b);
}

static int frame_buf_alloc(frame_buf *b, size_t n)
{
    b->gsel = malloc(n * sizeof(float));
    b->ones = malloc(n * sizeof(float));
    b->scratch = malloc(n * sizeof(float));
    int ok = b->gsel && b->ones && b->scratch;
    for (int k = 0; k < 3; k++) {
        b->pred[k] = malloc(n * sizeof(float));
        b->psel[k] = malloc(n * sizeof(float));
        ok = ok && b->pred[k] && b->psel[k];
    }
    for (int k = 0; k < 2; k++) {
        b->flag[k] = malloc(n * sizeof(float));
        b->fsel[k] = malloc(n * sizeof(float));
        ok = ok && b->flag[k] && b->fsel[k];
    }
    for (size_t i = 0; ok && i < n; i++) b->ones[i] = 1.0f;
    return ok ? 0 : -1;
}

/* Scale factor of one prediction under the run's mode; NAN when the ground
 * plane cannot be found. */
static double prediction_scale(eval_run *r, const float *pred_full, int w, int h, nj_camera cam,
                               const float *gsel, const float *psel, size_t k, float *scratch)
{
    if (r->mode == SCALE_METRIC) return 1.0;
    if (r->mode == SCALE_MEDIAN) return nj_median_scale(gsel, psel, k, scratch);
    double s;
    char e[256];
    if (nj_ground_scale(pred_full, w, h, cam, r->a.camera_height, &r->plane, &s, NULL, e, sizeof e))
        return NAN;
    return s;
}

static void add_metrics(eval_run *r, int method, const float *gsel, const float *psel, size_t k,
                        double scale)
{
    nj_depth_metrics m;
    if (nj_depth_metrics_compute(gsel, psel, k, scale, NJ_EVAL_DEPTH_FLOOR, r->a.depth_cap, &m) == 0)
        nj_metrics_acc_add(&r->acc[method], &m, scale);
}

/* The row-layout oracle and the obstacle flags of b->gt, then every map's
 * valid pixels (the same selection for all).  Returns their count. */
static size_t select_frame(const eval_run *r, frame_buf *b, int w, int h)
{
    size_t n = (size_t)w * h;
    float lo = NJ_EVAL_DEPTH_FLOOR, hi = r->a.depth_cap;
    nj_row_layout(b->gt, w, h, lo, hi, b->pred[2], b->scratch);
    nj_obstacle_flags(b->gt, b->pred[2], n, lo, hi, b->flag[0]);
    size_t k = 0;
    for (int m = 0; m < 3; m++) k = nj_depth_select(b->gt, b->pred[m], n, lo, hi, b->gsel, b->psel[m]);
    for (int f = 0; f < 1 + b->has_lead; f++) nj_depth_select(b->gt, b->flag[f], n, lo, hi, b->gsel, b->fsel[f]);
    return k;
}

/* The sequence's intrinsics for its frames as loaded at w×h. */
static nj_camera camera_at(const nj_sequence *s, int w, int h)
{
    return w == s->width && h == s->height ? s->camera : nj_camera_resize(s->camera, s->width, s->height, w, h);
}

/* Scores the four methods on the valid pixels of one ground-truth map, on
 * all of them and per region. */
static void score_frame(eval_run *r, frame_buf *b, int w, int h, nj_camera cam)
{
    size_t k = select_frame(r, b, w, h);
    if (k == 0) {
        r->empty++;
        return;
    }
    double s0 = prediction_scale(r, b->pred[0], w, h, cam, b->gsel, b->psel[0], k, b->scratch);
    if (!isfinite(s0)) {      /* no ground plane for the model: the image is left out for all */
        r->no_ground++;
        return;
    }
    double s1 = prediction_scale(r, b->pred[1], w, h, cam, b->gsel, b->psel[1], k, b->scratch);
    if (!isfinite(s1)) {
        r->untrained_no_ground += r->mode == SCALE_CAMERA;
        s1 = 1.0;
    }
    /* the oracle is metric by construction: median-scaled only when the model is */
    double so = r->mode == SCALE_MEDIAN ? nj_median_scale(b->gsel, b->psel[2], k, b->scratch) : 1.0;
    const float *psel[NMETHODS] = {b->psel[0], b->ones, b->psel[1], b->psel[2]};
    const double scale[NMETHODS] = {s0, nj_median_scale(b->gsel, b->ones, k, b->scratch), s1, so};
    for (int m = 0; m < NMETHODS; m++) add_metrics(r, m, b->gsel, psel[m], k, scale[m]);
    nj_eval_regions_add(&r->regions, b->gsel, psel, scale, k, b->fsel[0], b->has_lead ? b->fsel[1] : NULL,
                        b->scratch);
    r->frames++;
}

/* The lead-vehicle mask of frame i into flag (w×h, 1 = the vehicle): the
 * mask's pixel (x, y) is the depth map's pixel (x, y); a mask of another
 * size is resampled to the depth map's (data/image.h) and thresholded at 0.5. */
static int load_lead_mask(const nj_sequence *s, int i, int w, int h, float *flag, char *err, size_t errlen)
{
    char *path = nj_lead_mask_path(s, i);
    nj_image m = {0, 0, NULL};
    int rc = -1;
    if (!path) {
        snprintf(err, errlen, "out of memory");
        return -1;
    }
    if (nj_image_load(path, &m, err, errlen)) goto done;
    if (m.w == w && m.h == h) {
        for (size_t j = 0; j < (size_t)w * h; j++) flag[j] = m.data[j] > 0;
    } else {
        if (nj_resize_plane(m.data, m.w, m.h, flag, w, h)) {
            snprintf(err, errlen, "%s: out of memory resizing the mask", path);
            goto done;
        }
        for (size_t j = 0; j < (size_t)w * h; j++) flag[j] = flag[j] >= 0.5f;
    }
    rc = 0;
done:
    free(path);
    nj_image_free(&m);
    return rc;
}

/* A frame of a sequence with a lens or a raw rig, resampled to the pinhole
 * view training used (data/undistort.h); others are left as they are. */
static int undistort_frame(const nj_sequence *s, const char *path, nj_image *im, char *err, size_t errlen)
{
    char why[256];
    const nj_undistort *u = nj_sequence_undistort(s, 0);
    if (!u || !nj_undistort_image(u, im, why, sizeof why)) return 0;
    snprintf(err, errlen, "%s: %s", path, why);
    return -1;
}

/* Ground truth is given on the raw frame's pixels: with a lens it must have
 * the frame's size, and is carried into the view (nearest pixel; depth along
 * the rectified z for a rig). */
static int undistort_truth(const nj_sequence *s, const char *path, frame_buf *b, int w, int h, char *err,
                           size_t errlen)
{
    const nj_undistort *u = nj_sequence_undistort(s, 0);
    if (!u) return 0;
    if (w != u->view.w || h != u->view.h) {
        snprintf(err, errlen, "%s: depth is %dx%d; with a lens it must have the frames' size %dx%d", path, w, h,
                 u->view.w, u->view.h);
        return -1;
    }
    memcpy(b->scratch, b->gt, sizeof(float) * w * h);
    nj_undistort_depth(u, b->scratch, b->gt);
    return 0;
}

static int eval_frame(eval_run *r, const nj_sequence *s, int i, char *err, size_t errlen)
{
    char *img_path = nj_path_join(s->images, s->frames[i]), *gt_path = nj_depth_path(s, i);
    nj_image im = {0, 0, NULL};
    frame_buf b;
    memset(&b, 0, sizeof b);
    int w = 0, h = 0, rc = -1;
    if (!img_path || !gt_path) {
        snprintf(err, errlen, "out of memory");
        goto done;
    }
    if (nj_image_load(img_path, &im, err, errlen) || undistort_frame(s, img_path, &im, err, errlen) ||
        nj_depth_read(gt_path, s->depth_format, s->depth_scale, &b.gt, &w, &h, err, errlen))
        goto done;
    if (frame_buf_alloc(&b, (size_t)w * h)) {
        snprintf(err, errlen, "out of memory for a %dx%d depth map", w, h);
        goto done;
    }
    if (undistort_truth(s, gt_path, &b, w, h, err, errlen)) goto done;
    for (int k = 0; k < 2; k++)
        if (nj_infer_depth(&r->inf[k], &im, w, h, b.pred[k], NULL, err, errlen)) goto done;
    b.has_lead = s->lead_mask_dir != NULL;
    if (b.has_lead && load_lead_mask(s, i, w, h, b.flag[1], err, errlen)) goto done;
    if (b.has_lead && nj_sequence_undistort(s, 0)) {     /* the mask is drawn on the raw frame */
        memcpy(b.scratch, b.flag[1], sizeof(float) * w * h);
        nj_undistort_mask(nj_sequence_undistort(s, 0), b.scratch, b.flag[1]);
    }
    score_frame(r, &b, w, h, camera_at(s, w, h));
    rc = 0;
done:
    free(img_path);
    free(gt_path);
    nj_image_free(&im);
    frame_buf_free(&b);
    return rc;
}

/* ---- camera motion ----------------------------------------------------------- */

static int load_frame(const nj_sequence *s, int i, nj_image *im, char *err, size_t errlen)
{
    char *p = nj_path_join(s->images, s->frames[i]);
    if (!p) {
        snprintf(err, errlen, "out of memory");
        return -1;
    }
    int rc = nj_image_load(p, im, err, errlen) || undistort_frame(s, p, im, err, errlen) ? -1 : 0;
    free(p);
    return rc;
}

static void add_snippets(eval_run *r, const double *c2w, const double *rel, int n)
{
    for (int st = 0; st + NJ_ATE_SNIPPET <= n; st++) {
        double gt[3 * NJ_ATE_SNIPPET], pred[3 * NJ_ATE_SNIPPET], scale, rmse;
        nj_positions_from_c2w(c2w + 12 * st, NJ_ATE_SNIPPET, gt);
        nj_positions_from_motions(rel + 12 * st, NJ_ATE_SNIPPET, pred);
        double ate = nj_ate(gt, pred, NJ_ATE_SNIPPET, &scale, &rmse);
        r->snippets++;
        double d = ate - r->ate_mean;       /* Welford */
        r->ate_mean += d / r->snippets;
        r->ate_m2 += d * (ate - r->ate_mean);
        r->rmse_sum += rmse;
        r->scale_sum += scale;
    }
}

static double translation_length(const double *T)
{
    return sqrt(T[3] * T[3] + T[7] * T[7] + T[11] * T[11]);
}

/* Where the camera centre of camera i + 1 lies in camera i's frame for the
 * motion T (X_{i+1} = R·X_i + t): c = −Rᵀ·t, the trajectory's second position
 * (train/measure/ate.c chains the motions). */
static void centre_shift(const double *T, double c[3])
{
    double xyz[6];
    nj_positions_from_motions(T, 2, xyz);
    for (int k = 0; k < 3; k++) c[k] = xyz[3 + k];
}

/* Elevation (up positive: y points down) and azimuth (right positive) of a
 * direction, radians. */
static double elevation(const double c[3]) { return atan2(-c[1], hypot(c[0], c[2])); }
static double azimuth(const double c[3]) { return atan2(c[0], c[2]); }

/* The angle between two directions, atan2(|a×b|, a·b) (stable near 0). */
static double direction_angle(const double a[3], const double b[3])
{
    double x = a[1] * b[2] - a[2] * b[1], y = a[2] * b[0] - a[0] * b[2], z = a[0] * b[1] - a[1] * b[0];
    return atan2(sqrt(x * x + y * y + z * z), a[0] * b[0] + a[1] * b[1] + a[2] * b[2]);
}

static void add_heading(eval_run *r, const double *pred, const double *gt)
{
    double cp[3], ct[3];
    centre_shift(pred, cp);
    centre_shift(gt, ct);
    r->head_err_sum += direction_angle(cp, ct);
    r->head_elev_err_sum += elevation(cp) - elevation(ct);
    r->head_azim_err_sum += azimuth(cp) - azimuth(ct);
    r->head_elev_true_sum += elevation(ct);
}

/* Rotation error of every pair of neighbours (the pose net's motion against the
 * true one), with the true rotation alongside for scale; the pairs of a
 * stopped camera and of a moving one apart. */
/* Mean true translation of a sequence's n − 1 pairs: the still rule's scale. */
static double mean_true_translation(const double *c2w, int n)
{
    double mean_t = 0, gt[12];
    for (int i = 0; i + 1 < n; i++) {
        nj_motion_from_c2w(c2w + 12 * i, c2w + 12 * (i + 1), gt);
        mean_t += translation_length(gt) / (n - 1);
    }
    return mean_t;
}

static void add_rotation_errors(eval_run *r, const double *c2w, const double *rel, int n)
{
    double mean_t = mean_true_translation(c2w, n);
    for (int i = 0; i + 1 < n; i++) {
        double gt[12];
        nj_motion_from_c2w(c2w + 12 * i, c2w + 12 * (i + 1), gt);
        double err = nj_rotation_error(rel + 12 * i, gt);
        if (translation_length(gt) < STILL_SHARE * mean_t) {
            r->still_pairs++;
            r->still_rot_sum += nj_rotation_angle(rel + 12 * i);
            r->still_t_sum += translation_length(rel + 12 * i);
        } else {
            r->moving_pairs++;
            r->moving_t_sum += translation_length(rel + 12 * i);
            r->moving_err_sum += err;
            add_heading(r, rel + 12 * i, gt);
        }
        r->rot_err_sum += err;
        r->rot_true_sum += nj_rotation_angle(gt);
        double vp[3], vt[3];
        nj_rotation_vector(rel + 12 * i, vp);
        nj_rotation_vector(gt, vt);
        r->pairs++;
        for (int k = 0; k < 3; k++) {
            r->axis_err2[k] += (vp[k] - vt[k]) * (vp[k] - vt[k]);
            r->axis_true2[k] += vt[k] * vt[k];
            double dt = vt[k] - r->axis_true[k], dp = vp[k] - r->axis_pred[k];
            r->axis_true[k] += dt / r->pairs;
            r->axis_pred[k] += dp / r->pairs;
            r->axis_m2t[k] += dt * (vt[k] - r->axis_true[k]);
            r->axis_m2p[k] += dp * (vp[k] - r->axis_pred[k]);
            r->axis_cpt[k] += dt * (vp[k] - r->axis_pred[k]);
        }
    }
}

/* rel: motions i → i + 1, rel2: i → i + 2, of the n kept frames. */
static void add_gap_ratios(eval_run *r, const double *c2w, const double *rel, const double *rel2, int n)
{
    double mean_t = mean_true_translation(c2w, n), gt[3][12];
    for (int i = 0; i + 2 < n; i++) {
        nj_motion_from_c2w(c2w + 12 * i, c2w + 12 * (i + 1), gt[0]);
        nj_motion_from_c2w(c2w + 12 * (i + 1), c2w + 12 * (i + 2), gt[1]);
        nj_motion_from_c2w(c2w + 12 * i, c2w + 12 * (i + 2), gt[2]);
        double ta = translation_length(gt[0]), tb = translation_length(gt[1]);
        double pa = translation_length(rel + 12 * i), pb = translation_length(rel + 12 * (i + 1));
        if (ta < STILL_SHARE * mean_t || tb < STILL_SHARE * mean_t || !(pa + pb > 0)) continue;
        r->gap_triples++;
        r->gap_sum += translation_length(rel2 + 12 * i) / (pa + pb);
        r->gap_true_sum += translation_length(gt[2]) / (ta + tb);
    }
}

/* Mean predicted translation of the stopped pairs over that of the moving
 * ones (the scale-free way to say "it thinks it moved"). */
static double still_ratio(const eval_run *r)
{
    double moving = r->moving_pairs ? r->moving_t_sum / r->moving_pairs : 0;
    return moving > 0 && r->still_pairs ? r->still_t_sum / r->still_pairs / moving : 0;
}

/* Least-squares line of the predicted on the true component of axis k over
 * the pairs: slope (1 = the right amount of rotation, 0 = none learned, 2 =
 * twice the true turn) and Pearson correlation.  -1 when the true or the
 * predicted component does not vary (no fit). */
static int axis_fit(const eval_run *r, int k, double *slope, double *corr)
{
    double vt = r->axis_m2t[k], vp = r->axis_m2p[k], c = r->axis_cpt[k];
    if (!(vt > 0) || !(vp > 0)) return -1;
    *slope = c / vt;
    *corr = c / sqrt(vt * vp);
    return 0;
}

/* A raw rig's left frames are rectified by the rotation R1 (view.R): the
 * rectified camera's camera-to-world rotation is the recorded one times R1ᵀ;
 * its centre is the same. */
static void rectify_poses(const nj_sequence *s, double *c2w, int n)
{
    const nj_undistort *u = nj_sequence_undistort(s, 0);
    if (!u || !s->rig) return;
    const double *R = u->view.R;
    for (int i = 0; i < n; i++) {
        double *p = c2w + 12 * i, row[3];
        for (int a = 0; a < 3; a++) {
            for (int b = 0; b < 3; b++) row[b] = p[4 * a] * R[3 * b] + p[4 * a + 1] * R[3 * b + 1] + p[4 * a + 2] * R[3 * b + 2];
            for (int b = 0; b < 3; b++) p[4 * a + b] = row[b];
        }
    }
}

/* The pose net's motions between frames frame_step apart (0, k, 2k, ...: a
 * model trained on offsets of k and more learnt the motion over k frames, and
 * gives that whatever gap it is shown) against the poses of the same frames. */
static int eval_pose_sequence(eval_run *r, const nj_sequence *s, char *err, size_t errlen)
{
    double *c2w = NULL, *rel = NULL;
    nj_image before = {0, 0, NULL}, prev = {0, 0, NULL}, cur = {0, 0, NULL};
    int n = nj_poses_read(s->poses, &c2w, err, errlen), rc = -1, k = r->frame_step;
    if (n < 0) return -1;
    rectify_poses(s, c2w, n);
    n = nj_poses_keep_every(c2w, n, k);
    if (n < NJ_ATE_SNIPPET) {
        free(c2w);
        return 0;
    }
    rel = malloc((size_t)12 * (2 * n - 3) * sizeof *rel);   /* then rel2: i → i + 2 */
    if (!rel) {
        snprintf(err, errlen, "out of memory");
        goto done;
    }
    if (load_frame(s, 0, &prev, err, errlen)) goto done;
    nj_camera cam = camera_at(s, prev.w, prev.h);   /* for a pose net that sees ray directions */
    for (int i = 1; i < n; i++) {
        if (load_frame(s, i * k, &cur, err, errlen) ||
            nj_infer_motion(&r->inf[0], &prev, &cur, &cam, rel + 12 * (i - 1), err, errlen) ||
            (i >= 2 && nj_infer_motion(&r->inf[0], &before, &cur, &cam, rel + 12 * (n - 1 + i - 2), err, errlen)))
            goto done;
        nj_image_free(&before);
        before = prev;
        prev = cur;
        cur.data = NULL;
    }
    add_snippets(r, c2w, rel, n);
    add_rotation_errors(r, c2w, rel, n);
    add_gap_ratios(r, c2w, rel, rel + 12 * (n - 1), n);
    r->pose_sequences++;
    rc = 0;
done:
    nj_image_free(&before);
    nj_image_free(&prev);
    nj_image_free(&cur);
    free(c2w);
    free(rel);
    return rc;
}

static int run_sequences(eval_run *r, const nj_dataset *ds, char *err, size_t errlen)
{
    for (int q = 0; q < ds->nseq; q++) {
        const nj_sequence *s = &ds->seq[q];
        if (s->split != r->a.split) continue;
        int before = r->frames;
        r->regions.lead_sequences += s->lead_mask_dir && s->depth_dir;
        for (int i = 0; s->depth_dir && i < s->nframes; i++)
            if (eval_frame(r, s, i, err, errlen)) return -1;
        int snip = r->snippets;
        if (s->poses && r->trained.cfg.pose && eval_pose_sequence(r, s, err, errlen)) return -1;
        printf("  %-20s %4d frames with depth scored, %4d pose snippets\n", s->name ? s->name : "?",
               r->frames - before, r->snippets - snip);
        fflush(stdout);
    }
    return 0;
}

/* ---- report ----------------------------------------------------------------- */

static const char *scaling_name(scaling m)
{
    return m == SCALE_MEDIAN ? "median" : m == SCALE_METRIC ? "metric" : "camera_height";
}

static void print_table(const eval_run *r)
{
    printf("\n%-20s %9s %9s %9s %9s %9s %9s %9s\n", "", "AbsRel", "SqRel", "RMSE", "RMSElog",
           "d<1.25", "d<1.25^2", "d<1.25^3");
    for (int k = 0; k < NMETHODS; k++) {
        nj_depth_metrics m;
        double sm, ss;
        nj_metrics_acc_result(&r->acc[k], &m, &sm, &ss);
        if (r->acc[k].images == 0)
            printf("%-20s %9s %9s %9s %9s %9s %9s %9s\n", METHOD_NAMES[k], "n/a", "n/a", "n/a", "n/a", "n/a",
                   "n/a", "n/a");
        else
            printf("%-20s %9.4f %9.4f %9.3f %9.4f %9.4f %9.4f %9.4f\n", METHOD_NAMES[k], m.absrel, m.sqrel,
                   m.rmse, m.rmse_log, m.delta1, m.delta2, m.delta3);
    }
    nj_depth_metrics m;
    double sm, ss;
    nj_metrics_acc_result(&r->acc[M_MODEL], &m, &sm, &ss);
    printf("\n%d images, %ld pixels, depth cap %g m; scaling: %s", r->frames, m.pixels, r->a.depth_cap,
           scaling_name(r->mode));
    if (r->mode == SCALE_MEDIAN)
        printf(" (constant depth: median-scaled too)\n");
    else if (r->mode == SCALE_METRIC)
        printf(" (stereo-trained model, no scaling; constant depth median-scaled)\n");
    else
        printf(" (camera height %g m; constant depth median-scaled)\n", r->a.camera_height);
    if (r->mode != SCALE_METRIC && r->frames)
        printf("per-image scale factor of the model: mean %.4g, std %.4g (%.1f%% of the mean)\n", sm, ss,
               sm > 0 ? 100.0 * ss / sm : 0.0);
    if (r->empty)
        printf("left out: %d images without ground truth within the depth cap\n", r->empty);
    if (r->no_ground)
        printf("left out: %d images where no ground plane was found in the model's depth\n", r->no_ground);
    if (r->untrained_no_ground)
        printf("untrained network: no ground plane in %d images, scored unscaled there\n",
               r->untrained_no_ground);
    if (r->snippets)
        printf("pose: ATE %.4f +/- %.4f (Zhou et al. 2017 protocol), RMS %.4f, over %d snippets of %d frames\n",
               r->ate_mean, sqrt(r->ate_m2 / r->snippets), r->rmse_sum / r->snippets, r->snippets,
               NJ_ATE_SNIPPET);
    if (r->pairs && r->frame_step > 1)
        printf("pose: on frames %d apart (the smallest frame offset the model was trained on)\n", r->frame_step);
    if (r->pairs)
        printf("pose: rotation error %.3f deg per frame pair (true rotation %.3f deg; an error as large as "
               "the true rotation means none was learned), over %d pairs\n",
               RAD2DEG(r->rot_err_sum / r->pairs), RAD2DEG(r->rot_true_sum / r->pairs), r->pairs);
    if (r->moving_pairs)
        printf("pose: rotation error %.3f deg on the %d pairs of a moving camera\n",
               RAD2DEG(r->moving_err_sum / r->moving_pairs), r->moving_pairs);
    if (r->moving_pairs)
        printf("pose: heading (the direction the camera moved) %.3f deg off on the moving pairs; elevation "
               "error %+.3f deg (true elevation %+.3f deg, up positive), azimuth error %+.3f deg (right positive)\n",
               RAD2DEG(r->head_err_sum / r->moving_pairs), RAD2DEG(r->head_elev_err_sum / r->moving_pairs),
               RAD2DEG(r->head_elev_true_sum / r->moving_pairs), RAD2DEG(r->head_azim_err_sum / r->moving_pairs));
    if (r->still_pairs)
        printf("pose: on the %d pairs of a stopped camera: predicted rotation %.3f deg, predicted translation "
               "%.3f of a moving pair's (0 and 0: standing still is seen)\n", r->still_pairs,
               RAD2DEG(r->still_rot_sum / r->still_pairs), still_ratio(r));
    if (r->gap_triples)
        printf("pose: frames %d apart get %.2f of the summed translation of their two halves (truth %.2f; "
               "near 0.5: the pose net answers with the motion it learnt for the place, it does not measure "
               "it), over %d moving triples\n", 2 * r->frame_step, r->gap_sum / r->gap_triples,
               r->gap_true_sum / r->gap_triples, r->gap_triples);
    for (int k = 0; k < 3 && r->pairs; k++)
        printf("pose: %-5s (rotation about the camera's %c axis) mean error %+.3f deg, RMS error %.3f deg, "
               "true RMS %.3f deg\n", AXIS_NAMES[k], "xyz"[k], RAD2DEG(r->axis_pred[k] - r->axis_true[k]),
               RAD2DEG(sqrt(r->axis_err2[k] / r->pairs)), RAD2DEG(sqrt(r->axis_true2[k] / r->pairs)));
    for (int k = 0; k < 3 && r->pairs; k++) {
        double slope, corr;
        if (axis_fit(r, k, &slope, &corr) == 0)
            printf("pose: %-5s predicted against true: slope %.2f, correlation %.2f (1 and 1: learned)\n",
                   AXIS_NAMES[k], slope, corr);
    }
    if (r->frames) nj_eval_regions_print(&r->regions, METHOD_NAMES);
}

static void add_depth_json(cJSON *o, const nj_metrics_acc *acc, int with_scale)
{
    nj_depth_metrics m;
    double sm, ss;
    nj_metrics_acc_result(acc, &m, &sm, &ss);
    int none = acc->images == 0;
    const char *keys[7] = {"absrel", "sqrel", "rmse", "rmse_log", "delta_1_25", "delta_1_25_2", "delta_1_25_3"};
    const double v[7] = {m.absrel, m.sqrel, m.rmse, m.rmse_log, m.delta1, m.delta2, m.delta3};
    for (int k = 0; k < 7; k++) {
        if (none) cJSON_AddNullToObject(o, keys[k]);
        else cJSON_AddNumberToObject(o, keys[k], v[k]);
    }
    cJSON_AddNumberToObject(o, "pixels", (double)m.pixels);
    cJSON_AddNumberToObject(o, "images", acc->images);
    if (with_scale) {
        cJSON *s = cJSON_AddObjectToObject(o, "scale");
        cJSON_AddNumberToObject(s, "mean", sm);
        cJSON_AddNumberToObject(s, "std", ss);
    }
}

static cJSON *report_json(const eval_run *r)
{
    cJSON *root = cJSON_CreateObject();
    add_depth_json(root, &r->acc[M_MODEL], 1);
    cJSON_AddStringToObject(root, "scaling", scaling_name(r->mode));
    if (r->mode == SCALE_CAMERA) {
        cJSON_AddNumberToObject(root, "camera_height", r->a.camera_height);
        cJSON_AddNumberToObject(root, "images_without_ground_plane", r->no_ground);
        cJSON_AddNumberToObject(root, "untrained_images_without_ground_plane", r->untrained_no_ground);
    }
    cJSON *scored = cJSON_AddArrayToObject(root, "scored_depth");   /* ground truth inside it is scored */
    cJSON_AddItemToArray(scored, cJSON_CreateNumber(NJ_EVAL_DEPTH_FLOOR));
    cJSON_AddItemToArray(scored, cJSON_CreateNumber(r->a.depth_cap));
    cJSON_AddStringToObject(root, "split", nj_split_name(r->a.split));
    cJSON_AddStringToObject(root, "model", r->a.model);
    cJSON_AddStringToObject(root, "data", r->a.data);
    cJSON *c = cJSON_AddObjectToObject(root, "baseline_constant");
    add_depth_json(c, &r->acc[M_CONSTANT], 0);
    cJSON_AddStringToObject(c, "scaling", "median");
    cJSON *u = cJSON_AddObjectToObject(root, "baseline_untrained");
    add_depth_json(u, &r->acc[M_UNTRAINED], 1);
    cJSON_AddStringToObject(u, "scaling", scaling_name(r->mode));
    cJSON *o = cJSON_AddObjectToObject(root, METHOD_KEYS[M_ORACLE]);
    add_depth_json(o, &r->acc[M_ORACLE], 0);
    cJSON_AddStringToObject(o, "scaling", r->mode == SCALE_MEDIAN ? "median" : "metric");
    cJSON_AddStringToObject(o, "rule", "each pixel at the median true depth of its image row");
    nj_eval_regions_json(&r->regions, root, METHOD_KEYS);
    if (r->snippets) {
        cJSON *p = cJSON_AddObjectToObject(root, "pose");
        cJSON_AddNumberToObject(p, "ate", r->ate_mean);
        cJSON_AddNumberToObject(p, "ate_std", sqrt(r->ate_m2 / r->snippets));
        cJSON_AddNumberToObject(p, "rmse", r->rmse_sum / r->snippets);
        cJSON_AddNumberToObject(p, "scale_mean", r->scale_sum / r->snippets);
        cJSON_AddNumberToObject(p, "snippets", r->snippets);
        cJSON_AddNumberToObject(p, "snippet_frames", NJ_ATE_SNIPPET);
        cJSON_AddNumberToObject(p, "rotation_error_deg", RAD2DEG(r->rot_err_sum / r->pairs));
        cJSON_AddNumberToObject(p, "rotation_true_deg", RAD2DEG(r->rot_true_sum / r->pairs));
        cJSON_AddNumberToObject(p, "pairs", r->pairs);
        cJSON_AddNumberToObject(p, "frame_step", r->frame_step);
        if (r->moving_pairs) {
            double n = r->moving_pairs;
            cJSON_AddNumberToObject(p, "moving_rotation_error_deg", RAD2DEG(r->moving_err_sum / n));
            cJSON_AddNumberToObject(p, "heading_error_deg", RAD2DEG(r->head_err_sum / n));
            cJSON_AddNumberToObject(p, "heading_elevation_mean_error_deg", RAD2DEG(r->head_elev_err_sum / n));
            cJSON_AddNumberToObject(p, "heading_elevation_true_mean_deg", RAD2DEG(r->head_elev_true_sum / n));
            cJSON_AddNumberToObject(p, "heading_azimuth_mean_error_deg", RAD2DEG(r->head_azim_err_sum / n));
        }
        cJSON_AddNumberToObject(p, "still_pairs", r->still_pairs);
        if (r->still_pairs) {
            cJSON_AddNumberToObject(p, "still_rotation_deg", RAD2DEG(r->still_rot_sum / r->still_pairs));
            cJSON_AddNumberToObject(p, "still_translation_ratio", still_ratio(r));
        }
        cJSON_AddNumberToObject(p, "gap_triples", r->gap_triples);
        if (r->gap_triples) {
            cJSON_AddNumberToObject(p, "gap_translation_ratio", r->gap_sum / r->gap_triples);
            cJSON_AddNumberToObject(p, "gap_translation_ratio_true", r->gap_true_sum / r->gap_triples);
        }
        for (int k = 0; k < 3; k++) {
            char key[40];
            snprintf(key, sizeof key, "%s_mean_error_deg", AXIS_NAMES[k]);
            cJSON_AddNumberToObject(p, key, RAD2DEG(r->axis_pred[k] - r->axis_true[k]));
            snprintf(key, sizeof key, "%s_rms_error_deg", AXIS_NAMES[k]);
            cJSON_AddNumberToObject(p, key, RAD2DEG(sqrt(r->axis_err2[k] / r->pairs)));
            snprintf(key, sizeof key, "%s_true_rms_deg", AXIS_NAMES[k]);
            cJSON_AddNumberToObject(p, key, RAD2DEG(sqrt(r->axis_true2[k] / r->pairs)));
            snprintf(key, sizeof key, "%s_true_mean_deg", AXIS_NAMES[k]);
            cJSON_AddNumberToObject(p, key, RAD2DEG(r->axis_true[k]));
            double slope, corr;
            if (axis_fit(r, k, &slope, &corr) == 0) {
                snprintf(key, sizeof key, "%s_slope", AXIS_NAMES[k]);
                cJSON_AddNumberToObject(p, key, slope);
                snprintf(key, sizeof key, "%s_correlation", AXIS_NAMES[k]);
                cJSON_AddNumberToObject(p, key, corr);
            }
        }
        char axes[1400];
        snprintf(axes, sizeof axes, "rotation vector of each pair's motion (camera i into camera i + 1; "
                 "cameras frame_step frames apart) in the camera frame: pitch about x (right), yaw about y (down), roll about z (forward); error = "
                 "predicted - true component; slope and correlation: least-squares line of predicted on true "
                 "(absent when either does not vary); still pairs: true translation below %g%% of the sequence's "
                 "mean, still_rotation_deg the mean predicted rotation there, still_translation_ratio the mean "
                 "predicted translation there over the moving pairs' mean; heading (moving pairs): the direction "
                 "camera i + 1's centre lies in from camera i (-R^T t), its angle to the true one, and the mean "
                 "errors of its elevation (up positive) and azimuth (right positive); gap (triples of frames i, "
                 "i + 1, i + 2 with both halves moving): the mean over triples of the translation length of "
                 "i -> i + 2 over the sum of those of i -> i + 1 and i + 1 -> i + 2, predicted and true",
                 100 * STILL_SHARE);
        cJSON_AddStringToObject(p, "axes", axes);
        cJSON_AddStringToObject(p, "protocol",
                                "Zhou et al. 2017: first frames aligned, least-squares scale, "
                                "ate = sqrt(sum |e|^2) / n; rmse = sqrt(sum |e|^2 / n)");
    }
    return root;
}

static int write_json(const char *path, cJSON *root, char *err, size_t errlen)
{
    char *text = cJSON_Print(root);
    nj_atomic_file a;
    if (!text) {
        snprintf(err, errlen, "%s: out of memory", path);
        return -1;
    }
    err[0] = 0;
    int rc = nj_atomic_open(&a, path, err, errlen);
    if (!rc) {
        int ok = fputs(text, a.f) >= 0 && fputc('\n', a.f) != EOF;
        rc = nj_atomic_close(&a, ok, err, errlen);
    }
    free(text);
    return rc;
}

/* ---- command ---------------------------------------------------------------- */

static int evaluate(eval_run *r, char *err, size_t errlen)
{
    nj_dataset ds;
    memset(&ds, 0, sizeof ds);
    if (load_models(r, err, errlen)) return -1;
    r->mode = r->a.camera_height > 0 ? SCALE_CAMERA
            : (r->cfg.stereo && !r->cfg.video) ? SCALE_METRIC : SCALE_MEDIAN;
    nj_plane_options_default(&r->plane);
    for (int k = 0; k < NMETHODS; k++) nj_metrics_acc_init(&r->acc[k]);
    nj_eval_regions_init(&r->regions, r->a.depth_cap);
    if (open_split(&r->a, &ds, err, errlen)) {
        nj_dataset_free(&ds);
        return -1;
    }
    printf("eval: %s on split \"%s\" of %s (network input %dx%d, %s scaling)\n", r->a.model,
           nj_split_name(r->a.split), r->a.data, r->cfg.width, r->cfg.height, scaling_name(r->mode));
    int rc = run_sequences(r, &ds, err, errlen);
    nj_dataset_free(&ds);
    if (rc) return -1;
    if (r->frames == 0 && r->snippets == 0 && r->no_ground) {
        snprintf(err, errlen, "no ground plane found in the model's depth for any of the %d images",
                 r->no_ground);
        return -1;
    }
    if (r->frames == 0 && r->snippets == 0) {
        snprintf(err, errlen, "%s: split \"%s\" has no usable ground truth (depth within %g m, or poses)",
                 r->a.data, nj_split_name(r->a.split), r->a.depth_cap);
        return -1;
    }
    print_table(r);
    return 0;
}

void nj_eval_options_default(nj_eval_options *o)
{
    memset(o, 0, sizeof *o);
    o->split = NJ_SPLIT_TEST;
    o->depth_cap = NJ_EVAL_DEPTH_CAP;
}

int nj_eval_run(const nj_eval_options *o, char *err, size_t errlen)
{
    eval_run *r = calloc(1, sizeof *r);
    if (!r) {
        snprintf(err, errlen, "out of memory");
        return -1;
    }
    r->a = *o;
    nj_threads_init(r->a.threads);
    int rc = evaluate(r, err, errlen);
    if (!rc && r->a.out) {
        cJSON *root = report_json(r);
        rc = root ? write_json(r->a.out, root, err, errlen) : -1;
        if (!root) snprintf(err, errlen, "out of memory");
        cJSON_Delete(root);
        if (!rc) printf("wrote %s\n", r->a.out);
    }
    free_run(r);
    free(r);
    return rc;
}

/* train/map/map.c — `nightjar map`: one sequence through the depth and pose
 * networks (or its ground truth), one scale for the whole sequence, the
 * relative motions chained into a trajectory, every depth map fused into the
 * volume (tsdf.c), the mesh (mcubes.c), the picture (topdown.c) and the
 * figures.
 *
 * Scale (monocular models give depth and motion up to one unknown factor,
 * shared by both networks): --camera-height → the median over frames of the
 * ground-plane scale (measure/groundplane.h); else, when the sequence has
 * ground-truth depth, the median over frames of median(gt)/median(pred); else
 * none (model units, said so).  Stereo-trained models are metric.  The
 * trajectory starts at the sequence's first ground-truth pose when there is
 * one (so the map lies in the dataset's world), else at the identity, and
 * C_{i+1} = C_i · rel_i⁻¹, rel_i mapping camera i's points into camera i+1's.
 * Everything is computed before anything is written; the files are written
 * atomically at the end. */
#include "train/map/map.h"
#include "data/atomic.h"
#include "data/dataset.h"
#include "data/depthio.h"
#include "data/poses.h"
#include "data/undistort.h"
#include "train/loop/loop.h"
#include "train/measure/measure.h"
#include "train/model/model.h"
#include <cjson/cJSON.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#define RIGID_TOL 1e-3      /* |RᵀR − I| (max entry) and |det R − 1| a pose may show */

typedef struct map_run {
    nj_map_options a;
    nj_dataset ds;
    nj_sequence *s;
    nj_train_config cfg;
    nj_model trained, net;
    int have_trained, have_net, have_infer;
    nj_infer inf;
    int total;              /* frames in the sequence */
    int step, n;            /* every step-th frame is used: n of them */
    int w, h;
    nj_camera cam;
    float *depth;           /* n·w·h */
    double *rel;            /* 12·(n − 1) motions */
    double *gt;             /* 12·n ground-truth poses of the frames used, or NULL */
    double *c2w;            /* 12·n chained */
    double scale;
    int metric;
    const char *scaled_by;
} map_run;

void nj_map_options_default(nj_map_options *o)
{
    memset(o, 0, sizeof *o);
    o->voxel = NJ_MAP_DEFAULT_VOXEL;
    o->band_voxels = NJ_MAP_DEFAULT_BAND;
    o->max_depth = NJ_MAP_DEFAULT_MAX_DEPTH;
    o->extent = NJ_MAP_DEFAULT_EXTENT;
    o->memory_mb = NJ_MAP_DEFAULT_MEMORY_MB;
}

/* ---- input ------------------------------------------------------------------------ */

static int open_sequence(map_run *r, char *err, size_t errlen)
{
    nj_problems pr;
    nj_problems_init(&pr);
    int n = nj_dataset_parse(r->a.data, &r->ds, &pr);
    for (int i = 0; !n && i < r->ds.nseq; i++)
        if (r->ds.seq[i].name && !strcmp(r->ds.seq[i].name, r->a.sequence)) r->s = &r->ds.seq[i];
    if (!n && r->s) {
        nj_data_options o;
        nj_data_options_default(&o);
        o.noffsets = 0;
        o.stereo = 0;
        o.dup_threshold = 0;
        o.headers_only = 1;
        n = nj_sequence_validate(r->s, &o, &pr);
    }
    if (n) snprintf(err, errlen, "%s", pr.n ? pr.msg[0] : "the dataset has problems");
    else if (!r->s) snprintf(err, errlen, "%s: no sequence named \"%s\"", r->a.data, r->a.sequence);
    nj_problems_free(&pr);
    if (n || !r->s) return -1;
    r->total = r->n = r->s->nframes;
    r->step = 1;
    if (r->n < NJ_MAP_MIN_FRAMES) {
        snprintf(err, errlen, "%s: sequence \"%s\" has %d frame%s; a map needs at least %d", r->a.data,
                 r->a.sequence, r->n, r->n == 1 ? "" : "s", NJ_MAP_MIN_FRAMES);
        return -1;
    }
    r->w = r->s->width;
    r->h = r->s->height;
    r->cam = r->s->camera;
    return 0;
}

/* A pose is a rigid motion when its rotation is orthonormal with det +1. */
static double rigid_defect(const double *p)
{
    double worst = 0;
    for (int a = 0; a < 3; a++)
        for (int b = 0; b < 3; b++) {
            double s = 0;
            for (int k = 0; k < 3; k++) s += p[4 * k + a] * p[4 * k + b];
            worst = fmax(worst, fabs(s - (a == b)));
        }
    double det = p[0] * (p[5] * p[10] - p[6] * p[9]) - p[1] * (p[4] * p[10] - p[6] * p[8]) +
                 p[2] * (p[4] * p[9] - p[5] * p[8]);
    return fmax(worst, fabs(det - 1));
}

static int read_truth_poses(map_run *r, char *err, size_t errlen)
{
    if (!r->s->poses) return 0;
    int n = nj_poses_read(r->s->poses, &r->gt, err, errlen);
    if (n < 0) return -1;
    if (n != r->total) {
        snprintf(err, errlen, "%s: %d poses for %d frames of sequence \"%s\"", r->s->poses, n, r->total,
                 r->a.sequence);
        return -1;
    }
    for (int i = 0; i < n; i++) {
        double d = rigid_defect(r->gt + 12 * i);
        if (!(d <= RIGID_TOL)) {
            snprintf(err, errlen, "%s: pose %d is not a rigid motion (rotation off orthonormal by %.3g)",
                     r->s->poses, i + 1, d);
            return -1;
        }
    }
    return 0;
}

static int load_models(map_run *r, char *err, size_t errlen)
{
    if (r->a.source == NJ_MAP_TRUTH) return 0;
    if (nj_checkpoint_load(r->a.model, &r->trained, &r->cfg, NULL, err, errlen)) return -1;
    r->have_trained = 1;
    nj_model *m = &r->trained;
    char e[512];
    if (r->a.source == NJ_MAP_UNTRAINED) {   /* the same architecture, freshly initialised */
        if (nj_model_init(&r->net, &r->trained.cfg, e, sizeof e)) {
            snprintf(err, errlen, "untrained network: %s", e);
            return -1;
        }
        r->have_net = 1;
        m = &r->net;
    }
    if (!r->trained.cfg.pose && !r->gt) {
        snprintf(err, errlen, "%s: the model has no pose network and sequence \"%s\" has no poses", r->a.model,
                 r->a.sequence);
        return -1;
    }
    if (nj_infer_init(&r->inf, m, r->cfg.width, r->cfg.height, e, sizeof e)) {
        snprintf(err, errlen, "%s: %s", r->a.model, e);
        return -1;
    }
    r->have_infer = 1;
    return 0;
}

/* The pose network learnt the motion between frames `offset` apart (each of
 * data.frame_offsets): its motion between neighbours of a longer offset is
 * not that motion over a shorter gap, so the map takes every k-th frame, k
 * the smallest offset it learnt (nj_train_config_frame_step; measured on the
 * demo: offset 2 chained over neighbours gave paths ~2x too long).  Ground
 * truth uses every frame. */
static int choose_frames(map_run *r, char *err, size_t errlen)
{
    int k = nj_train_config_frame_step(&r->cfg);
    if (r->a.source != NJ_MAP_TRUTH && r->trained.cfg.pose && k > 1) r->step = k;
    r->n = (r->total - 1) / r->step + 1;
    if (r->n < NJ_MAP_MIN_FRAMES) {
        snprintf(err, errlen, "%s: sequence \"%s\" has %d frames; a map at the model's frame offset %d needs at least %d",
                 r->a.data, r->a.sequence, r->total, r->step, r->step * (NJ_MAP_MIN_FRAMES - 1) + 1);
        return -1;
    }
    if (r->gt) nj_poses_keep_every(r->gt, r->total, r->step);
    return 0;
}

/* Frame i of those used (sequence frame i·step). */
static int load_frame(const map_run *r, int i, nj_image *im, char *err, size_t errlen)
{
    char *p = nj_path_join(r->s->images, r->s->frames[i * r->step]), why[256];
    if (!p) {
        snprintf(err, errlen, "out of memory");
        return -1;
    }
    const nj_undistort *u = nj_sequence_undistort(r->s, 0);
    int rc = nj_image_load(p, im, err, errlen);
    if (!rc && u && nj_undistort_image(u, im, why, sizeof why)) {
        snprintf(err, errlen, "%s: %s", p, why);
        rc = -1;
    }
    if (!rc && (im->w != r->w || im->h != r->h)) {
        snprintf(err, errlen, "%s: %dx%d, the sequence's frames are %dx%d", p, im->w, im->h, r->w, r->h);
        rc = -1;
    }
    free(p);
    return rc;
}

static int truth_depth(const map_run *r, int i, float *out, char *err, size_t errlen)
{
    char *p = nj_depth_path(r->s, i * r->step);
    float *d = NULL;
    int w = 0, h = 0, rc = p ? nj_depth_read(p, r->s->depth_format, r->s->depth_scale, &d, &w, &h, err, errlen) : -1;
    if (!p) snprintf(err, errlen, "out of memory");
    if (!rc && (w != r->w || h != r->h)) {
        snprintf(err, errlen, "%s: depth is %dx%d, the frames are %dx%d", p, w, h, r->w, r->h);
        rc = -1;
    }
    if (!rc) memcpy(out, d, sizeof(float) * w * h);
    free(d);
    free(p);
    return rc;
}

/* Depth of every frame and the motion between consecutive ones. */
static int run_frames(map_run *r, char *err, size_t errlen)
{
    size_t px = (size_t)r->w * r->h;
    r->depth = malloc(sizeof(float) * px * r->n);
    r->rel = malloc(sizeof(double) * 12 * (r->n - 1));
    if (!r->depth || !r->rel) {
        snprintf(err, errlen, "out of memory for %d depth maps of %dx%d", r->n, r->w, r->h);
        return -1;
    }
    int truth = r->a.source == NJ_MAP_TRUTH, rc = 0;
    nj_image prev = {0, 0, NULL}, cur = {0, 0, NULL};
    for (int i = 0; !rc && i < r->n; i++) {
        float *d = r->depth + px * i;
        if (truth) rc = truth_depth(r, i, d, err, errlen);
        else rc = load_frame(r, i, &cur, err, errlen) || nj_infer_depth(&r->inf, &cur, r->w, r->h, d, NULL, err, errlen);
        if (!rc && i && (truth || !r->trained.cfg.pose)) nj_motion_from_c2w(r->gt + 12 * (i - 1), r->gt + 12 * i,
                                                                             r->rel + 12 * (i - 1));
        else if (!rc && i) rc = nj_infer_motion(&r->inf, &prev, &cur, &r->cam, r->rel + 12 * (i - 1), err, errlen);
        nj_image_free(&prev);
        prev = cur;
        cur.data = NULL;
    }
    nj_image_free(&prev);
    return rc;
}

/* ---- scale and trajectory --------------------------------------------------------- */

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

/* Median of the finite positive values among v[0..n-1] (sorted in place); NaN when none. */
static double median_of(double *v, int n)
{
    int k = 0;
    for (int i = 0; i < n; i++)
        if (isfinite(v[i]) && v[i] > 0) v[k++] = v[i];
    if (!k) return NAN;
    qsort(v, (size_t)k, sizeof *v, cmp_double);
    return k % 2 ? v[k / 2] : 0.5 * (v[k / 2 - 1] + v[k / 2]);
}

/* The per-frame median ratio to ground-truth depth. */
static double truth_ratio(const map_run *r, int i, float *gt, float *g, float *p, float *scratch)
{
    char e[256];
    size_t px = (size_t)r->w * r->h;
    if (truth_depth(r, i, gt, e, sizeof e)) return NAN;
    size_t k = nj_depth_select(gt, r->depth + px * i, px, 1e-3f, r->a.max_depth, g, p);
    return k ? nj_median_scale(g, p, k, scratch) : NAN;
}

static int choose_scale(map_run *r, char *err, size_t errlen)
{
    r->scale = 1;
    r->metric = 1;
    r->scaled_by = r->a.source == NJ_MAP_TRUTH ? "ground truth (metric)" : "stereo training (metric)";
    if (r->a.source == NJ_MAP_TRUTH || (r->cfg.stereo && !r->cfg.video)) return 0;
    size_t px = (size_t)r->w * r->h;
    double *f = malloc(sizeof(double) * r->n);
    float *buf = malloc(sizeof(float) * px * 4);
    if (!f || !buf) {
        free(f);
        free(buf);
        snprintf(err, errlen, "out of memory");
        return -1;
    }
    nj_plane_options po;
    nj_plane_options_default(&po);
    for (int i = 0; i < r->n; i++) {
        char e[256];
        if (r->a.camera_height > 0) {
            if (nj_ground_scale(r->depth + px * i, r->w, r->h, r->cam, r->a.camera_height, &po, &f[i], NULL, e,
                                sizeof e))
                f[i] = NAN;
        } else {
            f[i] = r->s->depth_dir ? truth_ratio(r, i, buf, buf + px, buf + 2 * px, buf + 3 * px) : NAN;
        }
    }
    double s = median_of(f, r->n);
    free(f);
    free(buf);
    if (r->a.camera_height > 0 && !isfinite(s)) {
        snprintf(err, errlen, "sequence \"%s\": no ground plane found in the model's depth of any frame",
                 r->a.sequence);
        return -1;
    }
    r->scaled_by = r->a.camera_height > 0 ? "camera height (ground plane, median over frames)"
                 : isfinite(s) ? "ground-truth depth (median ratio, median over frames)"
                               : "none: model units, not metres";
    r->metric = isfinite(s);
    r->scale = isfinite(s) ? s : 1;
    for (size_t i = 0; i < px * r->n; i++) r->depth[i] *= (float)r->scale;
    for (int i = 0; i + 1 < r->n; i++)
        for (int k = 0; k < 3; k++) r->rel[12 * i + 4 * k + 3] *= r->scale;
    return 0;
}

/* C_{i+1} = C_i · rel_i⁻¹: R_{i+1} = R_i R_relᵀ, c_{i+1} = c_i − R_i R_relᵀ t_rel. */
static void chain(map_run *r)
{
    static const double I[12] = {1, 0, 0, 0, 0, 1, 0, 0, 0, 0, 1, 0};
    memcpy(r->c2w, r->gt ? r->gt : I, sizeof I);
    for (int i = 0; i + 1 < r->n; i++) {
        const double *C = r->c2w + 12 * i, *T = r->rel + 12 * i;
        double *N = r->c2w + 12 * (i + 1);
        for (int a = 0; a < 3; a++) {
            for (int b = 0; b < 3; b++)
                N[4 * a + b] = C[4 * a] * T[4 * b] + C[4 * a + 1] * T[4 * b + 1] + C[4 * a + 2] * T[4 * b + 2];
            N[4 * a + 3] = C[4 * a + 3];
        }
        for (int a = 0; a < 3; a++)
            for (int b = 0; b < 3; b++) N[4 * a + 3] -= N[4 * a + b] * T[4 * b + 3];
    }
}

static double path_length(const double *c2w, int n)
{
    double L = 0;
    for (int i = 1; i < n; i++) {
        double d[3];
        for (int k = 0; k < 3; k++) d[k] = c2w[12 * i + 4 * k + 3] - c2w[12 * (i - 1) + 4 * k + 3];
        L += sqrt(d[0] * d[0] + d[1] * d[1] + d[2] * d[2]);
    }
    return L;
}

/* ---- fusion ----------------------------------------------------------------------- */

static double now(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return t.tv_sec + 1e-9 * t.tv_nsec;
}

static int fuse(map_run *r, nj_tsdf **t, nj_map_result *res, char *err, size_t errlen)
{
    nj_tsdf_params p = {.voxel = r->a.voxel, .band = r->a.voxel * r->a.band_voxels, .max_depth = r->a.max_depth};
    for (int k = 0; k < 3; k++) {
        p.lo[k] = (float)(r->c2w[4 * k + 3] - r->a.extent);
        p.hi[k] = (float)(r->c2w[4 * k + 3] + r->a.extent);
    }
    p.max_blocks = (long)(r->a.memory_mb * 1048576.0 / nj_tsdf_block_bytes());
    if (p.max_blocks < 1) {
        snprintf(err, errlen, "a memory cap of %g MiB holds no block of %d^3 voxels (%zu bytes)", r->a.memory_mb,
                 NJ_MAP_BLOCK, nj_tsdf_block_bytes());
        return -1;
    }
    char e[512];
    if (nj_tsdf_create(t, &p, e, sizeof e)) {
        snprintf(err, errlen, "%s", e);
        return -1;
    }
    size_t px = (size_t)r->w * r->h;
    nj_image im = {0, 0, NULL};
    for (int i = 0; i < r->n; i++) {
        if (load_frame(r, i, &im, err, errlen)) return -1;
        double t0 = now();
        int rc = nj_tsdf_fuse(*t, r->depth + px * i, r->w, r->h, &im, r->cam, r->c2w + 12 * i, e, sizeof e);
        res->fuse_seconds += now() - t0;
        nj_image_free(&im);
        if (rc) {
            snprintf(err, errlen, "sequence \"%s\", frame %d: %s", r->a.sequence, i * r->step + 1, e);
            return -1;
        }
    }
    res->blocks = nj_tsdf_blocks(*t);
    res->memory_mb = res->blocks * (double)nj_tsdf_block_bytes() / 1048576.0;
    return 0;
}

/* ---- output ----------------------------------------------------------------------- */

static int write_path(const map_run *r, const char *dir, char *err, size_t errlen)
{
    float *xyz = malloc(sizeof(float) * 3 * r->n);
    unsigned char *rgb = malloc(3 * (size_t)r->n);
    int *edge = malloc(sizeof(int) * 2 * r->n);
    int rc = -1;
    if (xyz && rgb && edge) {
        for (int i = 0; i < r->n; i++) {
            for (int k = 0; k < 3; k++) xyz[3 * i + k] = (float)r->c2w[12 * i + 4 * k + 3];
            rgb[3 * i] = (unsigned char)(255 * i / (r->n - 1));   /* red grows along the path */
            rgb[3 * i + 1] = 200;
            rgb[3 * i + 2] = 240;
            edge[2 * i] = i;
            edge[2 * i + 1] = i + 1;
        }
        char path[4200];
        snprintf(path, sizeof path, "%s/%s", dir, NJ_MAP_PATH);
        nj_ply_mesh m = {"nightjar map trajectory: camera centres in order, world frame", r->n, 0, r->n - 1, xyz, rgb,
                         NULL, edge};
        rc = nj_ply_write_mesh(path, &m, err, errlen);
    } else {
        snprintf(err, errlen, "out of memory");
    }
    free(xyz);
    free(rgb);
    free(edge);
    return rc;
}

static int write_picture(const map_run *r, const nj_mesh *m, const char *dir, char *err, size_t errlen)
{
    const double *R = r->c2w;   /* the first camera: y down, x right, z ahead */
    double down[3] = {R[1], R[5], R[9]}, right[3] = {R[0], R[4], R[8]}, ahead[3];
    double dr = right[0] * down[0] + right[1] * down[1] + right[2] * down[2], len = 0;
    for (int k = 0; k < 3; k++) {
        right[k] -= dr * down[k];
        len += right[k] * right[k];
    }
    for (int k = 0; k < 3; k++) right[k] /= sqrt(len);
    ahead[0] = right[1] * down[2] - right[2] * down[1];
    ahead[1] = right[2] * down[0] - right[0] * down[2];
    ahead[2] = right[0] * down[1] - right[1] * down[0];
    double *c = malloc(sizeof(double) * 3 * r->n);
    nj_image im = {0, 0, NULL};
    if (!c) {
        snprintf(err, errlen, "out of memory");
        return -1;
    }
    for (int i = 0; i < r->n; i++)
        for (int k = 0; k < 3; k++) c[3 * i + k] = r->c2w[12 * i + 4 * k + 3];
    char path[4200];
    snprintf(path, sizeof path, "%s/%s", dir, NJ_MAP_PICTURE);
    int rc = nj_map_picture(m, c, r->n, down, right, ahead, r->a.voxel, r->metric ? "m" : "", &im, err, errlen);
    if (!rc) rc = nj_png_write_rgb(path, &im, err, errlen);
    free(c);
    nj_image_free(&im);
    return rc;
}

/* Distance between chained and true centres at the end, per 10 m of true path. */
static void drift(const map_run *r, double *per10, double *worst)
{
    *per10 = *worst = NAN;
    if (!r->gt) return;
    double last = 0;
    *worst = 0;
    for (int i = 0; i < r->n; i++) {
        double d = 0;
        for (int k = 0; k < 3; k++) {
            double e = r->c2w[12 * i + 4 * k + 3] - r->gt[12 * i + 4 * k + 3];
            d += e * e;
        }
        last = sqrt(d);
        *worst = fmax(*worst, last);
    }
    double L = path_length(r->gt, r->n);
    if (L > 0) *per10 = 10 * last / L;
}

static void json_num(cJSON *o, const char *key, double v)
{
    if (isfinite(v)) cJSON_AddNumberToObject(o, key, v);
    else cJSON_AddNullToObject(o, key);
}

static int write_summary(const map_run *r, const nj_map_result *res, const char *dir, char *err, size_t errlen)
{
    static const char *SRC[] = {"model", "untrained network", "ground truth"};
    double per10, worst;
    drift(r, &per10, &worst);
    cJSON *o = cJSON_CreateObject();
    cJSON_AddStringToObject(o, "sequence", r->a.sequence);
    cJSON_AddStringToObject(o, "data", r->a.data);
    cJSON_AddStringToObject(o, "source", SRC[r->a.source]);
    if (r->a.model && r->a.source != NJ_MAP_TRUTH) cJSON_AddStringToObject(o, "model", r->a.model);
    cJSON_AddNumberToObject(o, "frames", r->n);
    cJSON_AddNumberToObject(o, "frame_step", r->step);
    cJSON_AddStringToObject(o, "scaled_by", r->scaled_by);
    cJSON_AddNumberToObject(o, "scale", r->scale);
    cJSON_AddBoolToObject(o, "metric", r->metric);
    cJSON_AddNumberToObject(o, "voxel", r->a.voxel);
    cJSON_AddNumberToObject(o, "truncation", r->a.voxel * r->a.band_voxels);
    cJSON_AddNumberToObject(o, "max_depth", r->a.max_depth);
    cJSON_AddNumberToObject(o, "blocks", res->blocks);
    cJSON_AddNumberToObject(o, "memory_mb", res->memory_mb);
    cJSON_AddNumberToObject(o, "vertices", res->vertices);
    cJSON_AddNumberToObject(o, "triangles", res->triangles);
    cJSON_AddNumberToObject(o, "path_length", res->path_length);
    json_num(o, "drift_per_10m", per10);
    json_num(o, "max_position_error", worst);
    cJSON_AddStringToObject(o, "caution", "depth from a learned model is an estimate, not a certified safety sensor");
    char *text = cJSON_Print(o), path[4200];
    cJSON_Delete(o);
    if (!text) {
        snprintf(err, errlen, "out of memory");
        return -1;
    }
    snprintf(path, sizeof path, "%s/%s", dir, NJ_MAP_SUMMARY);
    nj_atomic_file a;
    int rc = nj_atomic_open(&a, path, err, errlen);
    if (!rc) rc = nj_atomic_close(&a, fprintf(a.f, "%s\n", text) > 0, err, errlen);
    free(text);
    if (!rc && r->gt && r->a.source != NJ_MAP_TRUTH)
        printf("trajectory: end drift %.3f per 10 m of true path, largest position error %.3f\n", per10, worst);
    return rc;
}

static int write_outputs(map_run *r, const nj_mesh *m, const nj_map_result *res, char *err, size_t errlen)
{
    char path[4200];
    snprintf(path, sizeof path, "%s/%s", r->a.out, NJ_MAP_MESH);
    nj_ply_mesh pm = {"nightjar map: TSDF surface, world frame", m->nv, m->nt, 0, m->xyz, m->rgb, m->tri, NULL};
    if (nj_run_mkdir(r->a.out, err, errlen) || nj_ply_write_mesh(path, &pm, err, errlen) ||
        write_path(r, r->a.out, err, errlen) || write_picture(r, m, r->a.out, err, errlen))
        return -1;
    return write_summary(r, res, r->a.out, err, errlen);
}

/* ---- the run ---------------------------------------------------------------------- */

static int map_sequence(map_run *r, nj_map_result *res, char *err, size_t errlen)
{
    if (open_sequence(r, err, errlen) || read_truth_poses(r, err, errlen)) return -1;
    if (r->a.source == NJ_MAP_TRUTH && (!r->s->depth_dir || !r->gt)) {
        snprintf(err, errlen, "%s: sequence \"%s\" has no ground-truth %s", r->a.data, r->a.sequence,
                 r->s->depth_dir ? "poses" : "depth");
        return -1;
    }
    if (load_models(r, err, errlen) || choose_frames(r, err, errlen) || run_frames(r, err, errlen) ||
        choose_scale(r, err, errlen))
        return -1;
    r->c2w = malloc(sizeof(double) * 12 * r->n);
    if (!r->c2w) {
        snprintf(err, errlen, "out of memory");
        return -1;
    }
    chain(r);
    nj_tsdf *t = NULL;
    nj_mesh m = {0};
    int rc = fuse(r, &t, res, err, errlen) || nj_tsdf_mesh(t, &m, err, errlen) ? -1 : 0;
    nj_tsdf_free(t);
    res->frames = r->n;
    res->scale = r->scale;
    res->metric = r->metric;
    res->vertices = m.nv;
    res->triangles = m.nt;
    res->path_length = path_length(r->c2w, r->n);
    if (!rc && m.nv == 0) {
        snprintf(err, errlen, "sequence \"%s\": no surface within %g of the cameras to map", r->a.sequence,
                 r->a.max_depth);
        rc = -1;
    }
    if (!rc) rc = write_outputs(r, &m, res, err, errlen);
    nj_mesh_free(&m);
    return rc;
}

int nj_map_run(const nj_map_options *o, nj_map_result *res, char *err, size_t errlen)
{
    nj_map_result dummy;
    if (!res) res = &dummy;
    memset(res, 0, sizeof *res);
    if (err && errlen) err[0] = 0;
    map_run *r = calloc(1, sizeof *r);
    if (!r) {
        snprintf(err, errlen, "out of memory");
        return -1;
    }
    r->a = *o;
    nj_threads_init(r->a.threads);
    int rc = map_sequence(r, res, err, errlen);
    if (r->have_infer) nj_infer_free(&r->inf);
    if (r->have_net) nj_model_free(&r->net);
    if (r->have_trained) nj_model_free(&r->trained);
    nj_dataset_free(&r->ds);
    free(r->depth);
    free(r->rel);
    free(r->gt);
    free(r->c2w);
    free(r);
    return rc;
}

/* data/synth.c — `nightjar synth`: renders robot-yard sequences and writes
 * frames, exact depth, poses and the dataset JSON (see synth.h). */
#include "data/synth.h"
#include "data/atomic.h"
#include "data/dataset.h"
#include "data/depthio.h"
#include "data/image.h"
#include "data/npy.h"
#include "data/poses.h"
#include "data/render.h"
#include "data/scene_gen.h"
#include <cjson/cJSON.h>
#include <stb_image_write.h>
#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#define FRAME_DT 0.1        /* seconds between frames (10 Hz) */
#define BASELINE 0.12       /* stereo baseline, metres */
#define DEPTH_SCALE 1000.0f /* png16: value / 1000 = metres */
#define GAIN_STEP 0.01      /* exposure drift: std of the gain's step per frame */
#define GAIN_LO 0.85
#define GAIN_HI 1.15

void nj_synth_config_default(nj_synth_config *c)
{
    memset(c, 0, sizeof *c);
    c->seed = 1;
    c->frames = 200;
    c->sequences = 3;
    c->width = 320;
    c->height = 240;
}

/* mkdir -p. */
static int make_dirs(const char *path, char *err, unsigned long errlen)
{
    char buf[4096];
    snprintf(buf, sizeof buf, "%s", path);
    for (char *p = buf + 1;; p++) {
        char c = *p;
        if (c != '/' && c != 0) continue;
        *p = 0;
        if (mkdir(buf, 0755) != 0 && errno != EEXIST) {
            snprintf(err, errlen, "%s: cannot create folder: %s", buf, strerror(errno));
            return -1;
        }
        *p = c;
        if (!c) return 0;
    }
}

static nj_split split_of(int i, int n)
{
    if (n >= 3 && i == n - 1) return NJ_SPLIT_TEST;
    if (n >= 2 && i == (n >= 3 ? n - 2 : n - 1)) return NJ_SPLIT_VAL;
    return NJ_SPLIT_TRAIN;
}

static nj_camera synth_camera(const nj_synth_config *c)
{
    nj_camera k;
    k.fx = k.fy = 0.6f * (float)c->width;
    k.cx = 0.5f * (float)(c->width - 1) + 0.04f * (float)c->width;    /* off-centre, as real lenses are */
    k.cy = 0.5f * (float)(c->height - 1) - 0.03f * (float)c->height;
    return k;
}

static nj_view make_view(const nj_rig_pose *p, nj_camera k, int w, int h, double right)
{
    nj_view v;
    memcpy(v.R, p->R, sizeof v.R);
    for (int i = 0; i < 3; i++) v.c[i] = p->c[i] + p->R[3 * i] * right;   /* + R·(right, 0, 0) */
    v.fx = k.fx; v.fy = k.fy; v.cx = k.cx; v.cy = k.cy;
    v.w = w;
    v.h = h;
    return v;
}

#define BATCH 8          /* frames rendered before being written in parallel */

typedef struct frame_buf {
    nj_image im;
    float *depth;
    unsigned char *mask;     /* lead cart pixels (left view, with a lead cart) */
    int rc;
    char err[512];
} frame_buf;

/* One sequence being rendered. */
typedef struct seq_ctx {
    const nj_synth_config *c;
    const nj_scene *s;
    const nj_trajectory *tr;
    const char *dir;
    float *gain;             /* per frame, NULL without exposure drift */
    uint64_t noise_key;      /* sensor noise: keys per-view generators */
} seq_ctx;

typedef struct sink { FILE *f; int ok; } sink;

static void sink_write(void *ctx, void *data, int size)
{
    sink *s = ctx;
    if (s->ok && fwrite(data, 1, (size_t)size, s->f) != (size_t)size) s->ok = 0;
}

/* 8-bit grey PNG of the lead cart's mask (atomic). */
static int write_mask(const char *path, const unsigned char *m, int w, int h, char *err, unsigned long errlen)
{
    nj_atomic_file a;
    if (nj_atomic_open(&a, path, err, errlen)) return -1;
    sink k = {a.f, 1};
    int ok = stbi_write_png_to_func(sink_write, &k, w, h, 1, (void *)m, w) && k.ok;
    return nj_atomic_close(&a, ok, err, errlen);
}

static int write_frame(const char *dir, const frame_buf *f, int i, int right, char *err, unsigned long errlen)
{
    char path[4400];
    snprintf(path, sizeof path, "%s/%s/%06d.png", dir, right ? "cam1" : "cam0", i);
    if (nj_png_write_rgb(path, &f->im, err, errlen)) return -1;
    if (right) return 0;
    snprintf(path, sizeof path, "%s/lead/%06d.png", dir, i);
    if (f->mask && write_mask(path, f->mask, f->im.w, f->im.h, err, errlen)) return -1;
    int shape[2] = {f->im.h, f->im.w};
    snprintf(path, sizeof path, "%s/depth/%06d.npy", dir, i);
    if (nj_npy_write(path, f->depth, shape, 2, err, errlen)) return -1;
    snprintf(path, sizeof path, "%s/depth16/%06d.png", dir, i);
    return nj_png16_depth_write(path, DEPTH_SCALE, f->depth, f->im.w, f->im.h, err, errlen);
}

/* Exposure drift and sensor noise on a rendered view, before quantisation:
 * colour × the frame's gain, plus Gaussian noise from a generator keyed by
 * the sequence, the frame and the camera (independent of render order). */
static void sensor(const seq_ctx *q, int i, int right, nj_image *im)
{
    size_t n = (size_t)3 * im->w * im->h;
    if (q->gain)
        for (size_t p = 0; p < n; p++) im->data[p] *= q->gain[i];
    if (q->c->sensor_noise > 0) {
        nj_rng r;
        nj_rng_seed(&r, q->noise_key + (uint64_t)(2 * i + right) * 0x9E3779B97F4A7C15ull);
        nj_rng_add_normals(&r, im->data, n, 0, q->c->sensor_noise);
    }
}

/* Renders views j0 .. j0+m−1 (view j = frame j / views, right camera when
 * j % views == 1) one after the other, each with OpenMP over rows, then
 * encodes and writes them in parallel over frames. */
static int render_batch(const seq_ctx *q, frame_buf *buf, int j0, int m, char *err, unsigned long errlen)
{
    const nj_synth_config *c = q->c;
    const nj_trajectory *tr = q->tr;
    const char *dir = q->dir;
    nj_camera k = synth_camera(c);
    int views = c->stereo ? 2 : 1;
    for (int b = 0; b < m; b++) {
        int i = (j0 + b) / views, right = (j0 + b) % views;
        nj_view v = make_view(&tr->pose[i], k, c->width, c->height, right ? BASELINE : 0.0);
        nj_object lead;
        if (q->s->has_lead) lead = nj_scene_lead_at(q->s, tr, i);
        if (nj_render_with(q->s, &v, (float)(i * tr->dt), &lead, q->s->has_lead ? 1 : 0, buf[b].im.data,
                           buf[b].depth, right ? NULL : buf[b].mask)) {
            snprintf(err, errlen, "%s: out of memory rendering", dir);
            return -1;
        }
        sensor(q, i, right, &buf[b].im);
    }
#pragma omp parallel for schedule(dynamic)
    for (int b = 0; b < m; b++)
        buf[b].rc = write_frame(q->dir, &buf[b], (j0 + b) / views, (j0 + b) % views, buf[b].err, sizeof buf[b].err);
    for (int b = 0; b < m; b++)
        if (buf[b].rc) {
            snprintf(err, errlen, "%s", buf[b].err);
            return -1;
        }
    return 0;
}

static int render_frames(const seq_ctx *q, char *err, unsigned long errlen)
{
    const nj_synth_config *c = q->c;
    frame_buf buf[BATCH];
    int rc = 0;
    memset(buf, 0, sizeof buf);
    for (int b = 0; b < BATCH && !rc; b++) {
        buf[b].depth = malloc((size_t)c->width * c->height * sizeof(float));
        if (q->s->has_lead) buf[b].mask = malloc((size_t)c->width * c->height);
        rc = !buf[b].depth || (q->s->has_lead && !buf[b].mask) || nj_image_alloc(&buf[b].im, c->width, c->height);
    }
    if (rc) snprintf(err, errlen, "%s: out of memory", q->dir);
    int total = q->tr->n * (c->stereo ? 2 : 1);
    for (int j0 = 0; j0 < total && !rc; j0 += BATCH)
        rc = render_batch(q, buf, j0, total - j0 < BATCH ? total - j0 : BATCH, err, errlen);
    for (int b = 0; b < BATCH; b++) {
        free(buf[b].mask);
        free(buf[b].depth);
        nj_image_free(&buf[b].im);
    }
    return rc ? -1 : 0;
}

static int write_poses(const nj_trajectory *tr, const char *dir, char *err, unsigned long errlen)
{
    double *p = malloc((size_t)tr->n * 12 * sizeof(double));
    if (!p) { snprintf(err, errlen, "%s: out of memory", dir); return -1; }
    for (int i = 0; i < tr->n; i++)
        for (int r = 0; r < 3; r++) {
            for (int k = 0; k < 3; k++) p[12 * i + 4 * r + k] = tr->pose[i].R[3 * r + k];
            p[12 * i + 4 * r + 3] = tr->pose[i].c[r];
        }
    char path[4200];
    snprintf(path, sizeof path, "%s/poses.txt", dir);
    int rc = nj_poses_write(path, p, tr->n, err, errlen);
    free(p);
    return rc;
}

static int make_folders(const nj_synth_config *c, const char *dir, char *err, unsigned long errlen)
{
    static const char *sub[5] = {"cam0", "depth", "depth16", "cam1", "lead"};
    char path[4200];
    for (int i = 0; i < 5; i++) {
        if ((i == 3 && !c->stereo) || (i == 4 && !c->lead_cart)) continue;
        snprintf(path, sizeof path, "%s/%s", dir, sub[i]);
        if (make_dirs(path, err, errlen)) return -1;
    }
    return 0;
}

/* Exposure drift: the gain walks by GAIN_STEP·N(0, 1) per frame from a start
 * in [0.9, 1.1], clamped to [GAIN_LO, GAIN_HI]. */
static float *draw_gains(nj_rng *r, int n)
{
    float *g = malloc((size_t)n * sizeof(float));
    double v = 0.9 + 0.2 * nj_rng_uniform(r);
    for (int i = 0; g && i < n; i++) {
        g[i] = (float)v;
        v += GAIN_STEP * nj_rng_normal(r);
        v = v < GAIN_LO ? GAIN_LO : v > GAIN_HI ? GAIN_HI : v;
    }
    return g;
}

static void summary(const nj_synth_config *c, const char *name, const nj_trajectory *tr, const nj_scene *s)
{
    char lead[64] = "";
    if (s->has_lead) snprintf(lead, sizeof lead, ", lead cart %.1f m ahead", s->lead_ahead - s->lead.hz);
    printf("synth: %s: %d frames, %d stop%s, peak turn %.2f deg/frame, %d objects%s%s\n", name, tr->n, tr->stops,
           tr->stops == 1 ? "" : "s", tr->peak_turn * 180 / 3.14159265358979323846, s->nobj,
           s->has_mover ? ", moving robot" : c->moving ? ", no room for a moving robot" : "", lead);
}

/* The path and the yard of sequence idx.  Every sequence draws its yard from
 * one generator keyed by (seed, index); the fleet nuisances draw from a
 * second one keyed from the same value, so the first one's draws, and the
 * output without them, do not change.  `fleet` is left where the exposure
 * gains draw next; *noise_key keys the sensor noise. */
static int yard_of(const nj_synth_config *c, int idx, nj_rng *fleet, uint64_t *noise_key, nj_trajectory *tr,
                   nj_scene *s)
{
    uint64_t key = c->seed * 0x9E3779B97F4A7C15ull + (uint64_t)idx * 0xD1B54A32D192ED03ull + 1;
    nj_rng r;
    nj_rng_seed(&r, key);
    nj_rng_seed(fleet, key ^ 0xA0761D6478BD642Full);
    if (nj_trajectory_make_fleet(&r, fleet, c->frames, FRAME_DT, c->halts, c->turns, tr)) return -1;
    *noise_key = nj_rng_next(fleet);
    if (nj_scene_make_fleet(&r, fleet, tr, c->moving, c->lead_cart, s)) {
        nj_trajectory_free(tr);
        return -1;
    }
    return 0;
}

int nj_synth_yard(const nj_synth_config *c, int idx, nj_scene *s)
{
    nj_rng fleet;
    uint64_t noise_key;
    nj_trajectory tr;
    if (yard_of(c, idx, &fleet, &noise_key, &tr, s)) return -1;
    nj_trajectory_free(&tr);
    return 0;
}

static int sequence(const nj_synth_config *c, int idx, const char *name, char *err, unsigned long errlen)
{
    nj_rng fleet;
    char dir[4096];
    snprintf(dir, sizeof dir, "%s/%s", c->out, name);
    nj_trajectory tr;
    nj_scene s;
    uint64_t noise_key;
    if (make_folders(c, dir, err, errlen)) return -1;
    if (yard_of(c, idx, &fleet, &noise_key, &tr, &s)) {
        snprintf(err, errlen, "out of memory");
        return -1;
    }
    seq_ctx q = {c, &s, &tr, dir, NULL, noise_key};
    int rc = 0;
    if (c->exposure_drift) rc = !(q.gain = draw_gains(&fleet, tr.n));
    if (rc) snprintf(err, errlen, "out of memory");
    else rc = render_frames(&q, err, errlen);
    if (!rc) rc = write_poses(&tr, dir, err, errlen);
    if (!rc) summary(c, name, &tr, &s);
    free(q.gain);
    nj_scene_free(&s);
    nj_trajectory_free(&tr);
    return rc ? -1 : 0;
}

static cJSON *sequence_json(const nj_synth_config *c, const char *name, nj_split split)
{
    char buf[300];
    nj_camera k = synth_camera(c);
    cJSON *s = cJSON_CreateObject(), *cam = cJSON_CreateObject(), *depth = cJSON_CreateObject();
    cJSON_AddStringToObject(s, "name", name);
    snprintf(buf, sizeof buf, "%s/cam0", name);
    cJSON_AddStringToObject(s, "images", buf);
    cJSON_AddNumberToObject(cam, "fx", k.fx);
    cJSON_AddNumberToObject(cam, "fy", k.fy);
    cJSON_AddNumberToObject(cam, "cx", k.cx);
    cJSON_AddNumberToObject(cam, "cy", k.cy);
    cJSON_AddItemToObject(s, "camera", cam);
    if (c->stereo) {
        snprintf(buf, sizeof buf, "%s/cam1", name);
        cJSON_AddStringToObject(s, "right_images", buf);
        cJSON_AddNumberToObject(s, "baseline", BASELINE);
    }
    snprintf(buf, sizeof buf, "%s/depth", name);
    cJSON_AddStringToObject(depth, "dir", buf);
    cJSON_AddStringToObject(depth, "format", "npy");
    cJSON_AddItemToObject(s, "depth", depth);
    snprintf(buf, sizeof buf, "%s/poses.txt", name);
    cJSON_AddStringToObject(s, "poses", buf);
    if (c->lead_cart) {
        snprintf(buf, sizeof buf, "%s/lead", name);
        cJSON_AddStringToObject(s, "lead_mask", buf);
    }
    cJSON_AddStringToObject(s, "split", nj_split_name(split));
    return s;
}

static int write_json(const nj_synth_config *c, char *err, unsigned long errlen)
{
    cJSON *root = cJSON_CreateObject(), *arr = cJSON_CreateArray();
    cJSON_AddItemToObject(root, "sequences", arr);
    for (int i = 0; i < c->sequences; i++) {
        char name[32];
        snprintf(name, sizeof name, "yard-%02d", i);
        cJSON_AddItemToArray(arr, sequence_json(c, name, split_of(i, c->sequences)));
    }
    char *text = cJSON_Print(root), path[4200];
    cJSON_Delete(root);
    if (!text) { snprintf(err, errlen, "out of memory"); return -1; }
    snprintf(path, sizeof path, "%s/dataset.json", c->out);
    nj_atomic_file a;
    int rc = nj_atomic_open(&a, path, err, errlen);
    if (!rc) rc = nj_atomic_close(&a, fprintf(a.f, "%s\n", text) > 0, err, errlen);
    free(text);
    return rc;
}

int nj_synth_run(const nj_synth_config *c, char *err, unsigned long errlen)
{
    if (err && errlen) err[0] = 0;
    if (!c->out || !c->out[0]) { snprintf(err, errlen, "synth: no output folder"); return -1; }
    if (c->frames < 3 || c->sequences < 1 || c->width < 16 || c->height < 16 ||
        c->width > 4096 || c->height > 4096 || !(c->sensor_noise >= 0 && c->sensor_noise <= 1)) {
        snprintf(err, errlen, "synth: need frames >= 3, sequences >= 1, sizes 16..4096, sensor noise 0..1");
        return -1;
    }
    if (make_dirs(c->out, err, errlen)) return -1;
    for (int i = 0; i < c->sequences; i++) {
        char name[32];
        snprintf(name, sizeof name, "yard-%02d", i);
        if (sequence(c, i, name, err, errlen)) return -1;
    }
    return write_json(c, err, errlen);
}

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
#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#define FRAME_DT 0.1        /* seconds between frames (10 Hz) */
#define BASELINE 0.12       /* stereo baseline, metres */
#define DEPTH_SCALE 1000.0f /* png16: value / 1000 = metres */

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
    int rc;
    char err[512];
} frame_buf;

static int write_frame(const char *dir, const frame_buf *f, int i, int right, char *err, unsigned long errlen)
{
    char path[4400];
    snprintf(path, sizeof path, "%s/%s/%06d.png", dir, right ? "cam1" : "cam0", i);
    if (nj_png_write_rgb(path, &f->im, err, errlen)) return -1;
    if (right) return 0;
    int shape[2] = {f->im.h, f->im.w};
    snprintf(path, sizeof path, "%s/depth/%06d.npy", dir, i);
    if (nj_npy_write(path, f->depth, shape, 2, err, errlen)) return -1;
    snprintf(path, sizeof path, "%s/depth16/%06d.png", dir, i);
    return nj_png16_depth_write(path, DEPTH_SCALE, f->depth, f->im.w, f->im.h, err, errlen);
}

/* Renders views j0 .. j0+m−1 (view j = frame j / views, right camera when
 * j % views == 1) one after the other, each with OpenMP over rows, then
 * encodes and writes them in parallel over frames. */
static int render_batch(const nj_synth_config *c, const nj_scene *s, const nj_trajectory *tr, const char *dir,
                        frame_buf *buf, int j0, int m, char *err, unsigned long errlen)
{
    nj_camera k = synth_camera(c);
    int views = c->stereo ? 2 : 1;
    for (int b = 0; b < m; b++) {
        int i = (j0 + b) / views, right = (j0 + b) % views;
        nj_view v = make_view(&tr->pose[i], k, c->width, c->height, right ? BASELINE : 0.0);
        if (nj_render(s, &v, (float)(i * tr->dt), buf[b].im.data, buf[b].depth)) {
            snprintf(err, errlen, "%s: out of memory rendering", dir);
            return -1;
        }
    }
#pragma omp parallel for schedule(dynamic)
    for (int b = 0; b < m; b++)
        buf[b].rc = write_frame(dir, &buf[b], (j0 + b) / views, (j0 + b) % views, buf[b].err, sizeof buf[b].err);
    for (int b = 0; b < m; b++)
        if (buf[b].rc) {
            snprintf(err, errlen, "%s", buf[b].err);
            return -1;
        }
    return 0;
}

static int render_frames(const nj_synth_config *c, const nj_scene *s, const nj_trajectory *tr, const char *dir,
                         char *err, unsigned long errlen)
{
    frame_buf buf[BATCH];
    int rc = 0;
    memset(buf, 0, sizeof buf);
    for (int b = 0; b < BATCH && !rc; b++) {
        buf[b].depth = malloc((size_t)c->width * c->height * sizeof(float));
        rc = !buf[b].depth || nj_image_alloc(&buf[b].im, c->width, c->height);
    }
    if (rc) snprintf(err, errlen, "%s: out of memory", dir);
    int total = tr->n * (c->stereo ? 2 : 1);
    for (int j0 = 0; j0 < total && !rc; j0 += BATCH)
        rc = render_batch(c, s, tr, dir, buf, j0, total - j0 < BATCH ? total - j0 : BATCH, err, errlen);
    for (int b = 0; b < BATCH; b++) {
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
    static const char *sub[4] = {"cam0", "depth", "depth16", "cam1"};
    char path[4200];
    for (int i = 0; i < (c->stereo ? 4 : 3); i++) {
        snprintf(path, sizeof path, "%s/%s", dir, sub[i]);
        if (make_dirs(path, err, errlen)) return -1;
    }
    return 0;
}

static int sequence(const nj_synth_config *c, int idx, const char *name, char *err, unsigned long errlen)
{
    nj_rng r;
    nj_rng_seed(&r, c->seed * 0x9E3779B97F4A7C15ull + (uint64_t)idx * 0xD1B54A32D192ED03ull + 1);
    char dir[4096];
    snprintf(dir, sizeof dir, "%s/%s", c->out, name);
    nj_trajectory tr;
    nj_scene s;
    if (make_folders(c, dir, err, errlen)) return -1;
    if (nj_trajectory_make(&r, c->frames, FRAME_DT, &tr)) { snprintf(err, errlen, "out of memory"); return -1; }
    int rc = nj_scene_make(&r, &tr, c->moving, &s);
    if (rc) snprintf(err, errlen, "out of memory");
    else rc = render_frames(c, &s, &tr, dir, err, errlen);
    if (!rc) rc = write_poses(&tr, dir, err, errlen);
    if (!rc)
        printf("synth: %s: %d frames, %d stop%s, %d objects%s\n", name, tr.n, tr.stops, tr.stops == 1 ? "" : "s",
               s.nobj, s.has_mover ? ", moving robot" : c->moving ? ", no room for a moving robot" : "");
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
        c->width > 4096 || c->height > 4096) {
        snprintf(err, errlen, "synth: need frames >= 3, sequences >= 1, sizes 16..4096");
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

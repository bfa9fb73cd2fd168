/* train/eval/predict.c — `nightjar predict`: depth for single frames or a folder of
 * frames.  For each input NAME.ext writes into the output folder
 *   NAME.depth.npy     float32 H×W depth in metres (model units when only up to scale)
 *   NAME.depth16.png   16-bit depth in millimetres (saturating at 65535)
 *   NAME.preview.png   depth in the "bracken" colour map, log depth between the
 *                      frame's 2nd and 98th percentiles, near = dark (colormap.h)
 *   NAME.points.ply    with --ply: coloured binary point cloud (pointcloud.h)
 * all at the input's size, all written atomically. */
#include "train/eval/eval.h"
#include "data/dataset.h"
#include "data/image.h"
#include "data/npy.h"
#include "train/loop/loop.h"
#include "train/eval/colormap.h"
#include "train/measure/measure.h"
#include "train/model/model.h"
#include <errno.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#define DEFAULT_FOCAL 0.8f           /* assumed fx = fy = 0.8·W without --camera */

typedef struct predictor {
    nj_predict_options a;
    nj_train_config cfg;
    nj_model model;
    nj_infer inf;
    nj_plane_options plane;
    int metric;                      /* stereo-trained */
    int assumed_printed, scaled, unscaled;
    nj_undistort lens;               /* --camera with a lens: built for the first frame's size */
    int lens_ready;
} predictor;

/* ---- inputs and outputs ------------------------------------------------------ */

/* The frames to process: the input file itself, or the frames of the folder.
 * names[] are full paths (malloc'd).  Returns the count or -1 with err. */
static int list_inputs(const char *input, char ***paths, char *err, size_t errlen)
{
    struct stat st;
    *paths = NULL;
    if (stat(input, &st) != 0) {
        snprintf(err, errlen, "%s: %s", input, strerror(errno));
        return -1;
    }
    if (!S_ISDIR(st.st_mode)) {
        *paths = malloc(sizeof **paths);
        if (!*paths || !((*paths)[0] = strdup(input))) {
            snprintf(err, errlen, "out of memory");
            return -1;
        }
        return 1;
    }
    char **names = NULL;
    int n = nj_list_frames(input, &names);
    if (n <= 0) {
        snprintf(err, errlen, n < 0 ? "%s: cannot read the folder" : "%s: no PNG or JPEG frames in the folder",
                 input);
        nj_free_names(names, n > 0 ? n : 0);
        return -1;
    }
    for (int i = 0; i < n; i++) {
        char *full = nj_path_join(input, names[i]);
        if (!full) {
            snprintf(err, errlen, "out of memory");
            nj_free_names(names, n);
            return -1;
        }
        free(names[i]);
        names[i] = full;
    }
    *paths = names;
    return n;
}

/* NAME of a path: the file name without its last extension. */
static void stem_of(const char *path, char *out, size_t len)
{
    const char *base = strrchr(path, '/');
    base = base ? base + 1 : path;
    const char *dot = strrchr(base, '.');
    size_t n = dot && dot != base ? (size_t)(dot - base) : strlen(base);
    snprintf(out, len, "%.*s", (int)n, base);
}

static int cmp_str(const void *a, const void *b)
{
    return strcmp(*(char *const *)a, *(char *const *)b);
}

/* Refuses inputs whose outputs would overwrite each other (a.png and a.jpg). */
static int check_stems(char **paths, int n, char *err, size_t errlen)
{
    char **stems = calloc((size_t)n, sizeof *stems);
    int rc = stems ? 0 : -1;
    for (int i = 0; !rc && i < n; i++) {
        char s[1024];
        stem_of(paths[i], s, sizeof s);
        if (!(stems[i] = strdup(s))) rc = -1;
    }
    if (rc) snprintf(err, errlen, "out of memory");
    else qsort(stems, (size_t)n, sizeof *stems, cmp_str);
    for (int i = 1; !rc && i < n; i++)
        if (!strcmp(stems[i], stems[i - 1])) {
            snprintf(err, errlen, "two input frames are both named \"%s\" (outputs would collide)", stems[i]);
            rc = -1;
        }
    for (int i = 0; stems && i < n; i++) free(stems[i]);
    free(stems);
    return rc;
}

/* mkdir -p */
static int make_dirs(const char *dir, char *err, size_t errlen)
{
    char p[4096];
    snprintf(p, sizeof p, "%s", dir);
    size_t len = strlen(p);
    for (size_t i = 1; i <= len; i++) {
        if (p[i] != '/' && p[i] != 0) continue;
        char c = p[i];
        p[i] = 0;
        if (mkdir(p, 0777) != 0 && errno != EEXIST) {
            snprintf(err, errlen, "%.900s: cannot create folder: %s", p, strerror(errno));
            return -1;
        }
        p[i] = c;
    }
    struct stat st;
    if (stat(dir, &st) != 0 || !S_ISDIR(st.st_mode)) {
        snprintf(err, errlen, "%s: not a folder", dir);
        return -1;
    }
    return 0;
}

static int write_depth16(const char *path, const float *depth, int w, int h, char *err, size_t errlen)
{
    size_t n = (size_t)w * h;
    uint16_t *v = malloc(n * sizeof *v);
    if (!v) {
        snprintf(err, errlen, "out of memory for %.900s", path);
        return -1;
    }
    for (size_t i = 0; i < n; i++) {
        double mm = (double)depth[i] * 1000.0;
        v[i] = !(mm > 0) || !isfinite(mm) ? 0 : mm >= 65535.0 ? 65535 : (uint16_t)lround(mm);
    }
    int rc = nj_png_write_grey16(path, v, w, h, err, errlen);
    free(v);
    return rc;
}

/* The depth picture (colormap.h: the same scaling as the report's gallery);
 * its scale goes to *scale so that the run can print what the colours mean. */
static int write_preview(const char *path, const float *depth, int w, int h, nj_depth_scale *scale, char *err,
                         size_t errlen)
{
    nj_image im = {0, 0, NULL};
    int rc = -1;
    if (nj_depth_scale_fit(depth, (size_t)w * h, scale) < 0 || nj_depth_image(depth, w, h, *scale, &im))
        snprintf(err, errlen, "out of memory for %.900s", path);
    else
        rc = nj_png_write_rgb(path, &im, err, errlen);
    nj_image_free(&im);
    return rc;
}

/* ---- one frame ----------------------------------------------------------------- */

static nj_camera camera_for(predictor *p, int w, int h)
{
    if (p->lens_ready) return p->lens.view.out;
    if (p->a.has_camera) return p->a.camera;
    nj_camera c = {DEFAULT_FOCAL * (float)w, DEFAULT_FOCAL * (float)w, 0.5f * (float)(w - 1),
                   0.5f * (float)(h - 1)};
    if (!p->assumed_printed && (p->a.ply || p->a.camera_height > 0)) {
        printf("note: no --camera given: ASSUMING intrinsics fx = fy = 0.8*W = %.1f, cx = %.1f, cy = %.1f "
               "pixels (W = %d); pass --camera fx,fy,cx,cy for true geometry\n", c.fx, c.cx, c.cy, w);
        p->assumed_printed = 1;
    }
    return c;
}

/* Multiplies depth by the ground-plane scale; returns 1 when scaled. */
static int apply_camera_height(predictor *p, const char *stem, float *depth, int w, int h, nj_camera cam)
{
    double scale;
    nj_plane plane;
    char e[512];
    if (nj_ground_scale(depth, w, h, cam, p->a.camera_height, &p->plane, &scale, &plane, e, sizeof e)) {
        printf("warning: %s: %s; depth left unscaled\n", stem, e);
        p->unscaled++;
        return 0;
    }
    for (size_t i = 0; i < (size_t)w * h; i++) depth[i] *= (float)scale;
    printf("  %s: ground plane %.3f model units below the camera (%d of %d points), scale x%.4g\n", stem,
           plane.dist, plane.inliers, plane.points, scale);
    p->scaled++;
    return 1;
}

static int write_outputs(predictor *p, const char *stem, const float *depth, const nj_image *im,
                         nj_camera cam, nj_depth_scale *scale, char *err, size_t errlen)
{
    char path[4096];
    int shape[2] = {im->h, im->w};
    snprintf(path, sizeof path, "%s/%s.depth.npy", p->a.out, stem);
    if (nj_npy_write(path, depth, shape, 2, err, errlen)) return -1;
    snprintf(path, sizeof path, "%s/%s.depth16.png", p->a.out, stem);
    if (write_depth16(path, depth, im->w, im->h, err, errlen)) return -1;
    snprintf(path, sizeof path, "%s/%s.preview.png", p->a.out, stem);
    if (write_preview(path, depth, im->w, im->h, scale, err, errlen)) return -1;
    if (!p->a.ply) return 0;
    snprintf(path, sizeof path, "%s/%s.points.ply", p->a.out, stem);
    return nj_ply_write(path, depth, im, cam, NULL, err, errlen);
}

/* --camera with distortion: the map of the camera's pinhole view, built once
 * for the size the intrinsics are for — the first input's (the same
 * resampling as training's, data/undistort.h). */
static int setup_lens(predictor *p, const char *first, char *err, size_t errlen)
{
    char why[512];
    int w, h;
    if (p->a.lens.kind == NJ_LENS_NONE) return 0;
    if (nj_image_probe(first, &w, &h, err, errlen)) return -1;
    nj_lens_view v = {.w = w, .h = h, .src = p->a.camera, .lens = p->a.lens, .R = {1, 0, 0, 0, 1, 0, 0, 0, 1}};
    if (nj_undistort_init(&p->lens, &v, 1, why, sizeof why)) {
        snprintf(err, errlen, "--camera: %s (at %dx%d)", why, w, h);
        return -1;
    }
    p->lens_ready = 1;
    nj_camera c = p->lens.view.out;
    printf("lens: %s; frames undistorted to pinhole fx %.6g fy %.6g cx %.6g cy %.6g at %dx%d "
           "(every output is in this view)\n", nj_lens_kind_name(p->a.lens.kind), c.fx, c.fy, c.cx, c.cy, w, h);
    return 0;
}

static int undistort_input(predictor *p, const char *input, nj_image *im, char *err, size_t errlen)
{
    char why[512];
    if (!p->lens_ready || !nj_undistort_image(&p->lens, im, why, sizeof why)) return 0;
    snprintf(err, errlen, "%s: %s (--camera is for one frame size)", input, why);
    return -1;
}

static int predict_frame(predictor *p, const char *input, char *err, size_t errlen)
{
    nj_image im = {0, 0, NULL};
    char stem[1024];
    float *depth = NULL;
    int rc = -1;
    stem_of(input, stem, sizeof stem);
    if (nj_image_load(input, &im, err, errlen)) return -1;
    if (undistort_input(p, input, &im, err, errlen)) goto done;
    depth = malloc((size_t)im.w * im.h * sizeof *depth);
    if (!depth) {
        snprintf(err, errlen, "%s: out of memory", input);
        goto done;
    }
    if (nj_infer_depth(&p->inf, &im, im.w, im.h, depth, NULL, err, errlen)) goto done;
    nj_camera cam = camera_for(p, im.w, im.h);
    if (p->a.camera_height > 0) apply_camera_height(p, stem, depth, im.w, im.h, cam);
    nj_depth_scale scale;
    if (write_outputs(p, stem, depth, &im, cam, &scale, err, errlen)) goto done;
    float *tmp = malloc((size_t)im.w * im.h * sizeof *tmp);
    if (tmp) {
        memcpy(tmp, depth, (size_t)im.w * im.h * sizeof *tmp);
        printf("  %s: %dx%d, median depth %.3f, preview dark %.3g .. light %.3g\n", stem, im.w, im.h,
               nj_median(tmp, (size_t)im.w * im.h), scale.near, scale.far);
        free(tmp);
    }
    rc = 0;
done:
    free(depth);
    nj_image_free(&im);
    return rc;
}

/* ---- command -------------------------------------------------------------------- */

/* Checks every input's header before any work, so a bad input fails fast. */
static int probe_inputs(char **paths, int n, char *err, size_t errlen)
{
    for (int i = 0; i < n; i++) {
        int w, h;
        if (nj_image_probe(paths[i], &w, &h, err, errlen)) return -1;
    }
    return 0;
}

static void print_notes(const predictor *p, int done)
{
    if (done) printf("wrote %d frame%s into %s/\n", done, done == 1 ? "" : "s", p->a.out);
    if (p->a.camera_height > 0) {
        printf("depth: scaled to metres from the camera height %g m on %d frame%s", p->a.camera_height,
               p->scaled, p->scaled == 1 ? "" : "s");
        if (p->unscaled) printf("; %d left as the model gave them (no ground plane found)", p->unscaled);
        printf("\n");
    } else if (p->metric) {
        printf("depth: metric — the model was trained on rectified stereo pairs with a known baseline\n");
    } else {
        printf("note: this model learned from monocular video, so its depth is right only up to an\n"
               "      unknown scale factor (values are in the model's own units, not metres).  For\n"
               "      metric depth pass --camera-height METRES: the camera's height above flat ground.\n");
    }
    printf("caution: learned monocular depth is an estimate, not a certified safety sensor; do not\n"
           "         rely on it alone for collision avoidance or any other safety function.\n");
}

static int setup(predictor *p, char **paths, int n, char *err, size_t errlen)
{
    if (check_stems(paths, n, err, errlen) || probe_inputs(paths, n, err, errlen)) return -1;
    if (nj_checkpoint_load(p->a.model, &p->model, &p->cfg, NULL, err, errlen)) return -1;
    char e[512];
    if (nj_infer_init(&p->inf, &p->model, p->cfg.width, p->cfg.height, e, sizeof e)) {
        snprintf(err, errlen, "%s: %s", p->a.model, e);
        nj_model_free(&p->model);
        return -1;
    }
    if (setup_lens(p, paths[0], err, errlen) || make_dirs(p->a.out, err, errlen)) {
        if (p->lens_ready) nj_undistort_free(&p->lens);
        nj_infer_free(&p->inf);
        nj_model_free(&p->model);
        return -1;
    }
    p->metric = p->cfg.stereo && !p->cfg.video;
    nj_plane_options_default(&p->plane);
    return 0;
}

void nj_predict_options_default(nj_predict_options *o)
{
    memset(o, 0, sizeof *o);
}

int nj_predict_run(const nj_predict_options *o, char *err, size_t errlen)
{
    predictor *p = calloc(1, sizeof *p);
    char **paths = NULL;
    if (!p) {
        snprintf(err, errlen, "out of memory");
        return -1;
    }
    p->a = *o;
    nj_threads_init(p->a.threads);
    int n = list_inputs(p->a.input, &paths, err, errlen), done = 0, failed = 0;
    if (n < 0 || setup(p, paths, n, err, errlen)) {
        if (n > 0) nj_free_names(paths, n);
        free(p);
        return -1;
    }
    printf("predict: %d frame%s with %s (network input %dx%d, depth range %g..%g)\n", n, n == 1 ? "" : "s",
           p->a.model, p->cfg.width, p->cfg.height, p->model.cfg.depth_range.near, p->model.cfg.depth_range.far);
    for (int i = 0; i < n; i++) {
        char e[1024] = "";
        if (predict_frame(p, paths[i], e, sizeof e)) {
            fprintf(stderr, "nightjar predict: %s\n", e);
            failed++;
        } else {
            done++;
        }
        fflush(stdout);
    }
    print_notes(p, done);
    if (failed) snprintf(err, errlen, "%d of %d frames failed", failed, n);
    nj_free_names(paths, n);
    nj_infer_free(&p->inf);
    nj_model_free(&p->model);
    if (p->lens_ready) nj_undistort_free(&p->lens);
    free(p);
    return failed ? -1 : 0;
}

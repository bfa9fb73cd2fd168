/* train/report/report_gallery.c — the report's gallery: up to three fixed frames
 * of the run's dataset (validation split, else test, else train; evenly
 * spaced, no augmentation) passed through the training step without
 * gradients (train/loop/step.h) at up to three checkpoints of the run (the oldest
 * numbered, final, best, then newer numbered ones; distinct steps, shown
 * in step order).
 * Shown per frame: the input and a colour bar; per checkpoint the scale-0
 * depth (the network's disparity through the configured depth range) in the
 * "bracken" map with the scaling of `predict` (colormap.h: log depth, near =
 * dark), the auto-mask (white = pixel used) and the minimum photometric error
 * (grey, black 0 → white at the frame's 99th percentile over all shown
 * checkpoints).
 * One depth scale per frame, fitted to the newest checkpoint shown and shared
 * by the frame's earlier ones: a reader compares checkpoints by colour, and
 * one bar reads them all.  Fitted to the newest (not to all pooled) because an
 * early checkpoint's near-constant output would otherwise take a share of the
 * percentiles and squeeze the trained picture into a few colours; values of
 * earlier checkpoints beyond the ends take the end colours. */
#include "train/report/report_parts.h"
#include "train/eval/eval.h"
#include "train/measure/measure.h"
#include "train/loop/loop.h"
#include "losses/depth.h"
#include "data/scancache.h"
#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#define MAX_FRAMES 3
#define MAX_CANDIDATES 16
#define MAX_SHOWN 3

typedef struct shot {
    long step;
    char file[32];
    float *disp, *mask, *err;    /* nframes × h × w each; mask NULL without auto-mask */
} shot;

typedef struct gallery {
    nj_train_config cfg;
    nj_dataset ds;
    int ds_open;
    nj_sample picked[MAX_FRAMES];
    int nframes, w, h;
    nj_split split;
    float *input;                /* nframes × 3 × h × w */
    shot shots[MAX_SHOWN];
    int nshots;
    char note[512];
} gallery;

/* Candidate checkpoint file names in order of preference: the oldest
 * numbered, final, best, then the other numbered ones newest first. */
static int candidates(const char *run_dir, char names[MAX_CANDIDATES][32])
{
    long steps[MAX_CANDIDATES];
    int ns = nj_run_list_steps(run_dir, steps, MAX_CANDIDATES - 2), n = 0;
    if (ns > 0) snprintf(names[n++], 32, "step-%08ld.ckpt", steps[ns - 1]);
    const char *named[2] = {"final.ckpt", "best.ckpt"};
    for (int i = 0; i < 2; i++) {
        char path[NJ_PATH_MAX + 40];
        snprintf(path, sizeof path, "%s/%s", run_dir, named[i]);
        if (access(path, R_OK) == 0) snprintf(names[n++], 32, "%s", named[i]);
    }
    for (int i = 0; i < ns - 1; i++) snprintf(names[n++], 32, "step-%08ld.ckpt", steps[i]);
    return n;
}

/* Validates the sequences of the first split with samples and picks frames. */
static int pick_frames(gallery *G, char *err, size_t errlen)
{
    nj_data_options o;
    nj_train_config_data_options(&G->cfg, &o);
    char cache[4096];   /* the validation split's scan, cached by train (data/scancache.h) */
    if (!nj_scan_cache_dir(cache, sizeof cache)) {
        o.scan_cache = cache;
        o.scan_cache_read = 1;
    }
    nj_problems pr;
    nj_problems_init(&pr);
    int bad = nj_dataset_parse(G->cfg.dataset, &G->ds, &pr);
    G->ds_open = 1;
    const nj_split order[3] = {NJ_SPLIT_VAL, NJ_SPLIT_TEST, NJ_SPLIT_TRAIN};
    int n = 0;
    nj_sample *all = NULL;
    for (int k = 0; !bad && k < 3 && n <= 0; k++) {
        for (int i = 0; i < G->ds.nseq; i++)
            if (G->ds.seq[i].split == order[k]) bad += nj_sequence_validate(&G->ds.seq[i], &o, &pr);
        free(all);
        all = NULL;
        n = bad ? 0 : nj_dataset_samples(&G->ds, order[k], &o, &all);
        G->split = order[k];
    }
    nj_problems_free(&pr);
    if (bad || n <= 0) {
        snprintf(err, errlen, "%.500s: %s", G->cfg.dataset, bad ? "the dataset has problems (see check-data)"
                                                                 : "no samples in any split");
        free(all);
        return -1;
    }
    G->nframes = n < MAX_FRAMES ? n : MAX_FRAMES;
    for (int i = 0; i < G->nframes; i++)
        G->picked[i] = all[G->nframes == 1 ? 0 : (long)i * (n - 1) / (G->nframes - 1)];
    free(all);
    return 0;
}

static float *copy_plane(const nj_tensor *t, size_t n)
{
    float *p = t ? malloc(n * sizeof *p) : NULL;
    if (p) memcpy(p, t->data, n * sizeof *p);
    return p;
}

/* Runs the loss step of checkpoint `file` on batch b into a new shot. */
static int run_checkpoint(gallery *G, const char *run_dir, const char *file, const nj_batch *b,
                          char *err, size_t errlen)
{
    char path[NJ_PATH_MAX + 40];
    snprintf(path, sizeof path, "%s/%s", run_dir, file);
    nj_model m;
    nj_train_config cfg;
    nj_train_state st;
    if (nj_checkpoint_load(path, &m, &cfg, &st, err, errlen)) return -1;
    for (int i = 0; i < G->nshots; i++)
        if (G->shots[i].step == st.step) { nj_model_free(&m); return 0; }
    nj_graph *g = nj_graph_new((size_t)32 << 20);
    int rc = -1;
    nj_step_result r;
    if (g) {
        nj_graph_set_grad(g, 0);
        nj_graph_set_training(g, 0);
        if (nj_train_step(g, &m, &cfg, b, NULL, 0, &r) == 0 && r.disp0 && r.error) rc = 0;
        else snprintf(err, errlen, "%s: %s", file, nj_graph_error(g) ? nj_graph_error(g) : "no loss outputs");
    } else {
        snprintf(err, errlen, "out of memory");
    }
    if (rc == 0) {
        size_t n = (size_t)G->nframes * G->w * G->h;
        shot *s = &G->shots[G->nshots++];
        s->step = st.step;
        snprintf(s->file, sizeof s->file, "%.31s", file);
        s->disp = copy_plane(r.disp0, n);
        s->err = copy_plane(r.error, n);
        s->mask = copy_plane(r.automask, n);
        if (!s->disp || !s->err) rc = -1, snprintf(err, errlen, "out of memory");
    }
    if (g) nj_graph_free(g);
    nj_model_free(&m);
    return rc;
}

static int load_batch_and_run(gallery *G, const char *run_dir, char names[][32], int nc,
                              char *err, size_t errlen)
{
    nj_loader_config lc;
    nj_loader_config_default(&lc);
    lc.width = G->w = G->cfg.width;
    lc.height = G->h = G->cfg.height;
    lc.batch = G->nframes;
    lc.seed = 12345;
    lc.jitter = 0;
    lc.flip_prob = 0;
    nj_loader *L = nj_loader_create(&G->ds, G->picked, G->nframes, &lc, err, errlen);
    if (!L) return -1;
    const nj_batch *b = nj_loader_next(L, err, errlen);
    int rc = b ? 0 : -1;
    size_t n = (size_t)G->nframes * 3 * G->w * G->h;
    if (b && (G->input = malloc(n * sizeof *G->input))) memcpy(G->input, b->target, n * sizeof *G->input);
    for (int i = 0; b && i < nc && G->nshots < MAX_SHOWN; i++)
        if (run_checkpoint(G, run_dir, names[i], b, err, errlen)) { rc = -1; break; }
    nj_loader_destroy(L);
    return rc;
}

static int by_step(const void *a, const void *b)
{
    long x = ((const shot *)a)->step, y = ((const shot *)b)->step;
    return (x > y) - (x < y);
}

/* The shots in step order. */
static void choose_shown(gallery *G, int *idx, int *nshown)
{
    qsort(G->shots, (size_t)G->nshots, sizeof *G->shots, by_step);
    *nshown = G->nshots;
    for (int i = 0; i < G->nshots; i++) idx[i] = i;
}

/* Float values → interleaved 8-bit RGB: grey from lo (black) to hi (white). */
static unsigned char *grey_rgb(const float *v, int w, int h, float lo, float hi)
{
    size_t n = (size_t)w * h;
    unsigned char *px = malloc(3 * n);
    if (!px) return NULL;
    for (size_t i = 0; i < n; i++) {
        float t = hi > lo ? (v[i] - lo) / (hi - lo) : 0.0f;
        t = isfinite(t) ? (t < 0 ? 0 : t > 1 ? 1 : t) : 0;
        for (int c = 0; c < 3; c++) px[3 * i + c] = (unsigned char)lrintf(t * 255.0f);
    }
    return px;
}

/* Depths → interleaved 8-bit RGB through the colour map and `scale`. */
static unsigned char *depth_rgb(const float *depth, int w, int h, nj_depth_scale scale)
{
    size_t n = (size_t)w * h;
    nj_image im = {0, 0, NULL};
    unsigned char *px = malloc(3 * n);
    if (!px || nj_depth_image(depth, w, h, scale, &im)) {
        free(px);
        return NULL;
    }
    for (size_t i = 0; i < n; i++)
        for (int c = 0; c < 3; c++) px[3 * i + c] = (unsigned char)lrintf(im.data[c * n + i] * 255.0f);
    nj_image_free(&im);
    return px;
}

static void emit_image(FILE *f, const unsigned char *px, int w, int h, const char *cls, const char *caption)
{
    fprintf(f, "<figure class=\"%s\"><img width=\"%d\" height=\"%d\" alt=\"", cls, w, h);
    nj_html_text(f, caption);
    fputs("\" src=\"", f);
    if (!px || nj_png_data_uri(f, px, w, h)) fputs("data:,", f);
    fputs("\"><figcaption>", f);
    nj_html_text(f, caption);
    fputs("</figcaption></figure>\n", f);
}

static void emit_grey(FILE *f, const float *v, int w, int h, float lo, float hi, const char *caption)
{
    unsigned char *px = grey_rgb(v, w, h, lo, hi);
    emit_image(f, px, w, h, "grey", caption);
    free(px);
}

/* Depth of frame fr at shot sh (malloc'd; NULL when out of memory): the
 * network's disparity read through the run's depth range, as inference does. */
static float *shot_depth(const gallery *G, const shot *sh, int fr)
{
    size_t n = (size_t)G->w * G->h;
    float *d = malloc(n * sizeof *d);
    for (size_t i = 0; d && i < n; i++)
        d[i] = nj_depth_from_disparity_value(sh->disp[fr * n + i], G->cfg.model.depth_range);
    return d;
}

/* The depth units: metres only for a model trained on stereo pairs alone. */
static const char *depth_units(const gallery *G)
{
    return G->cfg.stereo && !G->cfg.video ? "depth (m)" : "depth (model units, up to scale)";
}

static float error_top(const gallery *G, const int *idx, int nshown, int frame)
{
    size_t n = (size_t)G->w * G->h, k = 0;
    float *tmp = malloc(n * (size_t)nshown * sizeof *tmp);
    if (!tmp) return 1.0f;
    for (int j = 0; j < nshown; j++)
        for (size_t i = 0; i < n; i++) {
            float e = G->shots[idx[j]].err[frame * n + i];
            if (isfinite(e)) tmp[k++] = e;
        }
    float top = k ? (float)nj_quantile(tmp, k, 0.99) : 1.0f;
    free(tmp);
    return top > 0 ? top : 1.0f;
}

static void emit_frame(FILE *f, const gallery *G, int fr, const int *idx, int nshown)
{
    int w = G->w, h = G->h;
    size_t n = (size_t)w * h;
    const nj_sequence *s = &G->ds.seq[G->picked[fr].seq];
    fputs("<div class=\"frame\"><h3>", f);
    nj_html_text(f, s->name);
    fputs(" · ", f);
    nj_html_text(f, s->frames[G->picked[fr].target]);
    fputs("</h3>\n<div class=\"tiles\">\n", f);
    unsigned char *px = malloc(3 * n);
    for (size_t i = 0; px && i < n; i++)
        for (int c = 0; c < 3; c++)
            px[3 * i + c] = (unsigned char)lrintf(fminf(fmaxf(G->input[(fr * 3 + c) * n + i], 0), 1) * 255.0f);
    emit_image(f, px, w, h, "input", "input");
    free(px);
    nj_depth_scale scale = {1.0f, 1.0f};
    float *newest = shot_depth(G, &G->shots[idx[nshown - 1]], fr);
    if (newest) nj_depth_scale_fit(newest, n, &scale);
    free(newest);
    char cap[160];
    snprintf(cap, sizeof cap, "colour bar: step %ld, shared by this frame's depth pictures",
             G->shots[idx[nshown - 1]].step);
    nj_svg_depth_bar(f, scale, depth_units(G), cap);
    fputs("</div>\n", f);
    float top = error_top(G, idx, nshown, fr);
    for (int j = 0; j < nshown; j++) {
        const shot *sh = &G->shots[idx[j]];
        fputs("<div class=\"tiles\">\n", f);
        snprintf(cap, sizeof cap, "step %ld depth", sh->step);
        float *depth = shot_depth(G, sh, fr);
        unsigned char *dpx = depth ? depth_rgb(depth, w, h, scale) : NULL;
        emit_image(f, dpx, w, h, "depth", cap);
        free(dpx);
        free(depth);
        if (sh->mask) {
            snprintf(cap, sizeof cap, "step %ld auto-mask", sh->step);
            emit_grey(f, sh->mask + fr * n, w, h, 0, 1, cap);
        }
        snprintf(cap, sizeof cap, "step %ld photometric error", sh->step);
        emit_grey(f, sh->err + fr * n, w, h, 0, top, cap);
        fputs("</div>\n", f);
    }
    fputs("</div>\n", f);
}

static void emit(FILE *f, const gallery *G, const char *problem)
{
    fputs("<section id=\"gallery\"><h2>Gallery</h2>\n", f);
    if (problem) {
        fputs("<p class=\"note\">No gallery: ", f);
        nj_html_text(f, problem);
        fputs("</p></section>\n", f);
        return;
    }
    int idx[MAX_SHOWN], nshown;
    choose_shown((gallery *)G, idx, &nshown);
    fprintf(f, "<p class=\"note\">%d %s frame%s at %d checkpoint%s (", G->nframes, nj_split_name(G->split),
            G->nframes == 1 ? "" : "s", nshown, nshown == 1 ? "" : "s");
    for (int j = 0; j < nshown; j++)
        fprintf(f, "%s%s", j ? ", " : "", G->shots[idx[j]].file);
    fprintf(f, "). Depth: " NJ_COLORMAP_NAME " colour map, <strong>near = dark, far = light</strong>, log depth "
               "from the 2nd percentile (darkest) to the 98th (lightest) of the newest checkpoint's depth; "
               "that one scale is shared by the frame's earlier checkpoints (beyond its ends they take the end "
               "colours) and read back by the colour bar beside the input; slate blue = no depth. %s "
               "Auto-mask: white = pixel used by the loss. Photometric error: black = 0, white = the frame's "
               "99th percentile over the checkpoints shown.</p>\n",
            G->cfg.stereo && !G->cfg.video
                ? "Depth in metres (trained on stereo pairs with a known baseline)."
                : "Monocular training: depth in the model's own units, right only up to an unknown scale "
                  "(not metres, not median-scaled).");
    for (int fr = 0; fr < G->nframes; fr++) emit_frame(f, G, fr, idx, nshown);
    fputs("</section>\n", f);
}

static void release(gallery *G)
{
    for (int i = 0; i < G->nshots; i++) {
        free(G->shots[i].disp);
        free(G->shots[i].mask);
        free(G->shots[i].err);
    }
    free(G->input);
    if (G->ds_open) nj_dataset_free(&G->ds);
}

void nj_report_gallery(FILE *f, const char *run_dir)
{
    gallery *G = calloc(1, sizeof *G);
    char names[MAX_CANDIDATES][32], err[600] = "";
    int nc = candidates(run_dir, names);
    int ok = G && nc > 0;
    if (!G) snprintf(err, sizeof err, "out of memory");
    else if (nc == 0) snprintf(err, sizeof err, "no checkpoint in the run folder yet");
    if (ok) {
        char path[NJ_PATH_MAX + 40];
        nj_model m;
        snprintf(path, sizeof path, "%s/%s", run_dir, names[0]);
        ok = nj_checkpoint_load(path, &m, &G->cfg, NULL, err, sizeof err) == 0;
        if (ok) nj_model_free(&m);
    }
    ok = ok && pick_frames(G, err, sizeof err) == 0;
    ok = ok && load_batch_and_run(G, run_dir, names, nc, err, sizeof err) == 0 && G->input;
    if (ok && !G->nshots) ok = 0, snprintf(err, sizeof err, "no checkpoint could be evaluated");
    emit(f, G, ok ? NULL : err);
    if (G) release(G);
    free(G);
}

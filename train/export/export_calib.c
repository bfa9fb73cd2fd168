/* train/export/export_calib.c — activation scales of the integer C export
 * (nj_export_calibrate, export.h): the folded f32 depth net is run on frames
 * of the training split and every layer output's |value| is counted in a
 * log-spaced histogram (1/16 octave bins, so the percentile is known to
 * within 4.4 %), from which a high percentile sets the layer's int8 scale.
 *
 * Why a percentile and not the maximum: ELU outputs have long positive tails;
 * the maximum over tens of frames is one pixel's value and sets a step 2–4×
 * coarser than the 99.99th percentile on the trained demo-style models, while
 * clipping 1 value in 10 000 costs nothing measurable (DEVELOPERS.md, export). */
#include "data/dataset.h"
#include "data/loader_item.h"
#include "train/export/export.h"
#include <cblas.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define BINS_PER_OCTAVE 16
#define LOW_OCTAVE 24        /* bin 0 holds |v| < 2^-24 (and zeros) */
#define NBINS (48 * BINS_PER_OCTAVE)

typedef struct hist {
    double n[NBINS];
    double total;
} hist;

static void hist_add(hist *h, const float *v, long n)
{
    for (long i = 0; i < n; i++) {
        float a = fabsf(v[i]);
        int b = a > 0.0f ? (int)floorf((log2f(a) + LOW_OCTAVE) * BINS_PER_OCTAVE) : 0;
        h->n[b < 0 ? 0 : (b >= NBINS ? NBINS - 1 : b)] += 1.0;
    }
    h->total += (double)n;
}

/* The upper edge of the bin where the cumulative count reaches pct % of the values. */
static float hist_percentile(const hist *h, float pct)
{
    double want = h->total * pct / 100.0, c = 0;
    int b = 0;
    for (; b < NBINS - 1; b++) {
        c += h->n[b];
        if (c >= want) break;
    }
    return exp2f((float)(b + 1) / BINS_PER_OCTAVE - LOW_OCTAVE);
}

/* ---- the f32 forward on the export's layers ----------------------------------- */

static int src_index(int v, int n, int reflect)
{
    if (v >= 0 && v < n) return v;
    if (!reflect) return -1;
    return v < 0 ? -v : 2 * n - 2 - v;
}

/* y = act(conv(concat(x0 [c0 planes], x1)) + b) at ih x iw; col: cin*k*k*oh*ow floats. */
static void conv(const nj_export_layer *l, const float *x0, int c0, const float *x1, int ih, int iw, float *y,
                 float *col)
{
    const int oh = (ih + 2 * l->pad - l->k) / l->stride + 1, ow = (iw + 2 * l->pad - l->k) / l->stride + 1;
    const long np = (long)oh * ow, kn = (long)l->cin * l->k * l->k, plane = (long)ih * iw;
    const int reflect = l->pad_mode == NJ_PAD_REFLECT;
    for (int ci = 0; ci < l->cin; ci++) {
        const float *src = ci < c0 ? x0 + ci * plane : x1 + (ci - c0) * plane;
        for (int ky = 0; ky < l->k; ky++)
            for (int kx = 0; kx < l->k; kx++) {
                float *d = col + ((long)(ci * l->k + ky) * l->k + kx) * np;
                for (int oy = 0; oy < oh; oy++) {
                    int sy = src_index(oy * l->stride + ky - l->pad, ih, reflect);
                    for (int ox = 0; ox < ow; ox++) {
                        int sx = src_index(ox * l->stride + kx - l->pad, iw, reflect);
                        d[(long)oy * ow + ox] = sy < 0 || sx < 0 ? 0.0f : src[(long)sy * iw + sx];
                    }
                }
            }
    }
    for (int o = 0; o < l->cout; o++)
        for (long p = 0; p < np; p++) y[o * np + p] = l->b[o];
    cblas_sgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, l->cout, (int)np, (int)kn, 1.0f, l->w, (int)kn, col,
                (int)np, 1.0f, y, (int)np);
    for (long i = 0; i < l->cout * np; i++) {
        float v = y[i];
        if (l->act == NJ_ACT_ELU) y[i] = v > 0.0f ? v : expm1f(v);
        else if (l->act == NJ_ACT_SIGMOID) y[i] = 1.0f / (1.0f + expf(-v));
    }
}

static void up2(const float *x, int c, int h, int w, float *y)
{
    for (int ch = 0; ch < c; ch++)
        for (int r = 0; r < 2 * h; r++)
            for (int q = 0; q < 2 * w; q++) y[((long)ch * 2 * h + r) * 2 * w + q] = x[((long)ch * h + r / 2) * w + q / 2];
}

typedef struct calib_bufs {
    float *feat[NJ_MAX_STAGES], *a, *b, *up, *col;
} calib_bufs;

/* The depth path on one standardised frame (3 x H x W in bufs->a), counting
 * every layer output except the head's into hists (indexed like units). */
static void forward(const nj_export_net *net, calib_bufs *B, hist *hists)
{
    const nj_model *m = net->model;
    const int S = m->cfg.stages;
    int h = net->height, w = net->width, c = 3;
    float *cur = B->a;
    for (int i = 0; i < S; i++) {
        const nj_export_layer *l0 = &net->layers[m->enc[i][0]], *l1 = &net->layers[m->enc[i][1]];
        float *t = cur == B->a ? B->b : B->a;
        conv(l0, cur, c, NULL, h, w, t, B->col);
        h /= 2;
        w /= 2;
        hist_add(&hists[m->enc[i][0]], t, (long)l0->cout * h * w);
        conv(l1, t, l0->cout, NULL, h, w, B->feat[i], B->col);
        hist_add(&hists[m->enc[i][1]], B->feat[i], (long)l1->cout * h * w);
        cur = B->feat[i];
        c = l1->cout;
    }
    for (int i = S - 1; i >= 0; i--) {
        const nj_export_layer *l0 = &net->layers[m->dec[i][0]], *l1 = &net->layers[m->dec[i][1]];
        conv(l0, cur, c, NULL, h, w, B->a, B->col);
        hist_add(&hists[m->dec[i][0]], B->a, (long)l0->cout * h * w);
        up2(B->a, l0->cout, h, w, B->up);
        h *= 2;
        w *= 2;
        conv(l1, B->up, l0->cout, i > 0 ? B->feat[i - 1] : NULL, h, w, B->b, B->col);
        hist_add(&hists[m->dec[i][1]], B->b, (long)l1->cout * h * w);
        cur = B->b;
        c = l1->cout;
    }
}

/* ---- frames and scales ------------------------------------------------------------ */

/* The scales from the histograms; a decoder output concatenated with an
 * encoder feature takes the larger of the two scales, and so does the feature. */
static void set_scales(nj_export_net *net, const hist *hists, float pct)
{
    const nj_model *m = net->model;
    const int S = m->cfg.stages;
    for (int u = 0; u < net->nlayers; u++) net->out_scale[u] = fmaxf(hist_percentile(&hists[u], pct), 1e-6f) / 127.0f;
    for (int i = 1; i < S; i++) {
        int d = m->dec[i][0], e = m->enc[i - 1][1];
        net->out_scale[d] = net->out_scale[e] = fmaxf(net->out_scale[d], net->out_scale[e]);
    }
    /* the standardised input's exact range: bytes 0 and 255 */
    net->in_scale = fmaxf(NJ_MODEL_INPUT_MEAN, 1.0f - NJ_MODEL_INPUT_MEAN) / NJ_MODEL_INPUT_STD / 127.0f;
    for (int i = 0; i < S; i++) {
        net->in_scale_of[m->enc[i][0]] = i == 0 ? net->in_scale : net->out_scale[m->enc[i - 1][1]];
        net->in_scale_of[m->enc[i][1]] = net->out_scale[m->enc[i][0]];
    }
    for (int i = S - 1; i >= 0; i--) {
        net->in_scale_of[m->dec[i][0]] = i == S - 1 ? net->out_scale[m->enc[S - 1][1]] : net->out_scale[m->dec[i + 1][1]];
        net->in_scale_of[m->dec[i][1]] = net->out_scale[m->dec[i][0]];
    }
    net->in_scale_of[m->head[0]] = net->out_scale[m->dec[0][1]];
    net->percentile = pct;
}

static void grow(long *most, long v)
{
    if (v > *most) *most = v;
}

/* Buffer sizes from the forward's own walk over the levels. */
static int alloc_bufs(const nj_export_net *net, calib_bufs *B)
{
    const nj_model *m = net->model;
    long most = 3L * net->width * net->height, col = 0;
    int h = net->height, w = net->width;
    memset(B, 0, sizeof *B);
    for (int i = 0; i < m->cfg.stages; i++) {
        const nj_export_layer *l0 = &net->layers[m->enc[i][0]], *l1 = &net->layers[m->enc[i][1]];
        grow(&col, (long)l0->k * l0->k * l0->cin * (h / 2) * (w / 2));
        h /= 2;
        w /= 2;
        grow(&col, (long)l1->k * l1->k * l1->cin * h * w);
        grow(&most, (long)l0->cout * h * w);
        B->feat[i] = malloc(sizeof(float) * (size_t)l1->cout * h * w);
        if (!B->feat[i]) return -1;
    }
    for (int i = m->cfg.stages - 1; i >= 0; i--) {
        const nj_export_layer *l0 = &net->layers[m->dec[i][0]], *l1 = &net->layers[m->dec[i][1]];
        grow(&col, (long)l0->k * l0->k * l0->cin * h * w);
        h *= 2;
        w *= 2;
        grow(&col, (long)l1->k * l1->k * l1->cin * h * w);
        grow(&most, (long)(l0->cout > l1->cout ? l0->cout : l1->cout) * h * w);
    }
    B->a = malloc(sizeof(float) * (size_t)most);
    B->b = malloc(sizeof(float) * (size_t)most);
    B->up = malloc(sizeof(float) * (size_t)most);
    B->col = malloc(sizeof(float) * (size_t)col);
    return B->a && B->b && B->up && B->col ? 0 : -1;
}

static void free_bufs(calib_bufs *B)
{
    for (int i = 0; i < NJ_MAX_STAGES; i++) free(B->feat[i]);
    free(B->a);
    free(B->b);
    free(B->up);
    free(B->col);
}

/* Frame `k` of `n` spread evenly over the training sequences' frames. */
static int pick_frame(const nj_dataset *ds, int k, int n, int *seq, int *frame)
{
    long total = 0, at;
    for (int s = 0; s < ds->nseq; s++)
        if (ds->seq[s].split == NJ_SPLIT_TRAIN) total += ds->seq[s].nframes;
    if (total == 0) return -1;
    at = (long)((double)k * total / n);
    for (int s = 0; s < ds->nseq; s++) {
        if (ds->seq[s].split != NJ_SPLIT_TRAIN) continue;
        if (at < ds->seq[s].nframes) {
            *seq = s;
            *frame = (int)at;
            return 0;
        }
        at -= ds->seq[s].nframes;
    }
    return -1;
}

static int calibrate_on(nj_export_net *net, const nj_dataset *ds, int frames, float pct, char *err, size_t errlen)
{
    calib_bufs B;
    hist *hists = calloc(NJ_MAX_UNITS, sizeof *hists);
    int rc = 0, seq = 0, fr = 0, sw, sh;
    const long n = (long)net->width * net->height;
    if (!hists || alloc_bufs(net, &B)) {
        snprintf(err, errlen, "--calibrate: out of memory");
        rc = -1;
    }
    for (int k = 0; !rc && k < frames; k++) {
        if (pick_frame(ds, k, frames, &seq, &fr)) {
            snprintf(err, errlen, "--calibrate %s: no frames in the training split", ds->path);
            rc = -1;
            break;
        }
        rc = nj_loader_frame(&ds->seq[seq], 0, fr, net->width, net->height, B.a, &sw, &sh, err, errlen);
        for (long i = 0; !rc && i < 3 * n; i++) B.a[i] = (B.a[i] - NJ_MODEL_INPUT_MEAN) / NJ_MODEL_INPUT_STD;
        if (!rc) forward(net, &B, hists);
    }
    if (!rc) {
        set_scales(net, hists, pct);
        net->calibrated = frames;
    }
    if (hists) free_bufs(&B);
    free(hists);
    return rc;
}

int nj_export_calibrate(nj_export_net *net, const char *dataset, int frames, float percentile, char *err,
                        size_t errlen)
{
    nj_dataset ds;
    nj_data_options o;
    nj_problems pr;
    nj_data_options_default(&o);
    o.offsets[0] = 1;   /* as check-data: every frame counts, the split's sample rule does not matter here */
    o.noffsets = 1;
    o.stereo = 0;
    o.dup_threshold = 0;
    o.headers_only = 1;
    nj_problems_init(&pr);
    memset(&ds, 0, sizeof ds);
    int rc = 0;
    if (nj_dataset_open(dataset, &o, &ds, &pr) != 0) {
        snprintf(err, errlen, "--calibrate %s: %s", dataset, pr.n ? pr.msg[0] : "cannot open the dataset");
        rc = -1;
    } else {
        rc = calibrate_on(net, &ds, frames, percentile, err, errlen);
    }
    nj_dataset_free(&ds);
    nj_problems_free(&pr);
    return rc;
}

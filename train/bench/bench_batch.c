/* train/bench/bench_batch.c — synthetic batch, conv FLOP count and weight/batch dump
 * for the training-step benchmark (see bench.h). */
#include "train/bench/bench.h"
#include "data/npy.h"
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define NWAVES 6

typedef struct { float fx, fy, ph, amp; } wave;

/* Channel c of a smooth texture at (x, y): sum of sinusoids. */
static float texture(const wave *wv, int c, float x, float y)
{
    float s = 0.5f;
    for (int k = 0; k < NWAVES; k++) {
        const wave *q = &wv[c * NWAVES + k];
        s += q->amp * sinf(q->fx * x + q->fy * y + q->ph);
    }
    return s;
}

static void render(const wave *wv, nj_rng *r, float *img, int h, int w, float shift)
{
    for (int c = 0; c < 3; c++)
        for (int y = 0; y < h; y++)
            for (int x = 0; x < w; x++) {
                float v = texture(wv, c, (float)x + shift, (float)y) + 0.02f * (float)nj_rng_normal(r);
                img[((size_t)c * h + y) * w + x] = v < 0 ? 0 : (v > 1 ? 1 : v);
            }
}

int nj_bench_batch_make(nj_bench_batch *bb, int n, int h, int w, unsigned seed)
{
    memset(bb, 0, sizeof *bb);
    size_t img = (size_t)3 * h * w;
    nj_batch *b = &bb->b;
    if (nj_batch_alloc(b, n, h, w, 2, 0, 0, 0, 0)) return -1;
    nj_rng r;
    nj_rng_seed(&r, seed);
    for (int i = 0; i < n; i++) {
        wave wv[3 * NWAVES];
        for (int k = 0; k < 3 * NWAVES; k++)
            wv[k] = (wave){(float)(0.3 * nj_rng_uniform(&r) - 0.15), (float)(0.3 * nj_rng_uniform(&r) - 0.15),
                           (float)(6.2832 * nj_rng_uniform(&r)), (float)(0.08 * nj_rng_uniform(&r))};
        render(wv, &r, b->target + i * img, h, w, 0.0f);
        for (int j = 0; j < 2; j++)
            render(wv, &r, b->sources + ((size_t)i * 2 + j) * img, h, w, j ? 2.0f : -2.0f);
        /* a typical driving-camera field of view at this size */
        b->camera[i] = (nj_camera){0.58f * w, 1.92f * h, 0.5f * w, 0.5f * h};
    }
    return 0;
}

void nj_bench_batch_free(nj_bench_batch *bb)
{
    nj_batch_free(&bb->b);
}

static double first_unit_flops(const nj_unit *u, int h, int w)
{
    int oh = (h + 2 * u->pad - u->k) / u->stride + 1, ow = (w + 2 * u->pad - u->k) / u->stride + 1;
    return 2.0 * u->cout * u->cin * u->k * u->k * (double)oh * ow;
}

double nj_bench_conv_flops(const nj_model *m, int h, int w, int batch, int pose_pairs)
{
    double fd = nj_depth_flops(m, h, w), f0 = first_unit_flops(&m->units[m->enc[0][0]], h, w);
    double total = 3 * fd - f0;
    if (m->cfg.pose && pose_pairs > 0) {
        double fp = nj_pose_flops(m, h, w), p0 = first_unit_flops(&m->units[m->pose_units[0]], h, w);
        total += pose_pairs * (3 * fp - p0);
    }
    return total * batch;
}

void nj_bench_config(nj_train_config *cfg, int w, int h, int batch)
{
    nj_train_config_default(cfg);
    cfg->width = w;
    cfg->height = h;
    cfg->batch = batch;
    cfg->video = 1;
    cfg->stereo = 0;
    cfg->loss.automask = 1;
}

static int dump_one(const char *dir, const char *name, const float *data, int ndim, const int *shape,
                    char *err, size_t errlen)
{
    char path[4096];
    snprintf(path, sizeof path, "%s/%s.npy", dir, name);
    return nj_npy_write(path, data, shape, ndim, err, errlen) ? -1 : 0;
}

int nj_bench_dump(const char *dir, const nj_model *m, const nj_bench_batch *bb, char *err, size_t errlen)
{
    for (int i = 0; i < m->params.count; i++) {
        const nj_param *p = m->params.items[i];
        int shape[4] = {p->n, p->c, p->h, p->w};
        if (dump_one(dir, p->name, p->data, 4, shape, err, errlen)) return -1;
    }
    const nj_batch *b = &bb->b;
    int shape[4] = {b->n, 3, b->h, b->w};
    size_t img = (size_t)3 * b->h * b->w;
    float *src = malloc(sizeof(float) * img * b->n);
    float *cams = malloc(sizeof(float) * 4 * b->n);
    if (!src || !cams) { free(src); free(cams); snprintf(err, errlen, "bench dump: out of memory"); return -1; }
    int rc = dump_one(dir, "target", b->target, 4, shape, err, errlen);
    for (int j = 0; j < 2 && !rc; j++) {
        char nm[24];
        for (int i = 0; i < b->n; i++)
            memcpy(src + i * img, b->sources + ((size_t)i * 2 + j) * img, sizeof(float) * img);
        snprintf(nm, sizeof nm, "source%d", j);
        rc = dump_one(dir, nm, src, 4, shape, err, errlen);
    }
    for (int i = 0; i < b->n; i++) {
        cams[4 * i] = b->camera[i].fx; cams[4 * i + 1] = b->camera[i].fy;
        cams[4 * i + 2] = b->camera[i].cx; cams[4 * i + 3] = b->camera[i].cy;
    }
    int cs[2] = {b->n, 4};
    if (!rc) rc = dump_one(dir, "cams", cams, 2, cs, err, errlen);
    free(src);
    free(cams);
    return rc;
}

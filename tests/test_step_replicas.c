/* tests/test_step_replicas.c — the training step split over threads as
 * replicas (train/loop/step_replicas.h) computes what the plain step computes.
 *
 * Reference: the plain step (train/loop/step.h) on the whole batch, itself checked
 * against an independent PyTorch implementation of the recipe
 * (tests/test_bench_equiv.c).  The bench's default nets and synthetic frames
 * (128×64, batch 4, two sources, auto-mask with tie-break noise):
 *  - 2 threads, batch 4 (2 replicas): the loss and its parts equal the plain step's within float
 *    rounding (the sums run in another order), every parameter gradient
 *    within 1e-4 of the largest |gradient| of its tensor (conv biases before
 *    batch norm, whose gradient is 0 in exact arithmetic: rounding-small on
 *    both sides), the batch-norm
 *    running statistics (updated by replica 0 from synchronised statistics)
 *    within 1e-5, and the noise generator ends in the same state;
 *  - likewise 4 threads on batch 4 (4 replicas), on batch 6 (3 replicas: the
 *    largest divisor of the batch up to the thread count) and on batch 2
 *    (2 replicas whose ops run on 2 threads each, a nested team);
 *  - a batch of 3 does not split over 2: the plain step runs, bit for bit;
 *  - a model freed and built again (the trainer reloads a checkpoint after
 *    non-finite steps) is picked up by the same replicas: the step after it
 *    equals a fresh run's, bit for bit;
 *  - a replica whose step fails (a stereo item without partner in the second
 *    half) releases the other instead of leaving it waiting in a sum: the
 *    step returns -1 and the error names the cause.
 */
#include "nn/graph.h"
#include "nn/param.h"
#include "tests/check.h"
#include "train/bench/bench.h"
#include "train/loop/step_replicas.h"
#include <math.h>
#include <omp.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#define W 128
#define H 64

typedef struct outcome {
    nj_step_result r;
    float **grads, **bufs;  /* copies per parameter / buffer */
    nj_rng rng;
    int rc;
    char err[512];
} outcome;

static float *copy_floats(const float *p, size_t n)
{
    float *c = malloc(sizeof(float) * n);
    if (c) memcpy(c, p, sizeof(float) * n);
    return c;
}

static void outcome_free(outcome *o, const nj_model *m)
{
    for (int i = 0; o->grads && i < m->params.count; i++) free(o->grads[i]);
    for (int i = 0; o->bufs && i < m->buffers.count; i++) free(o->bufs[i]);
    free(o->grads);
    free(o->bufs);
}

/* One step from a fresh model (seeded) and fresh noise generator; threads 1
 * (plain step) or T replicas. */
static void run_step(int threads, const nj_bench_batch *bb, const nj_train_config *cfg, outcome *o)
{
    memset(o, 0, sizeof *o);
    nj_model m;
    char err[256];
    if (nj_model_init(&m, &cfg->model, err, sizeof err)) {
        snprintf(o->err, sizeof o->err, "model: %s", err);
        o->rc = -1;
        return;
    }
    nj_graph *g = nj_graph_new((size_t)16 << 20);
    nj_step_replicas *s = threads > 1 ? nj_step_replicas_new(threads, (size_t)16 << 20, err, sizeof err) : NULL;
    nj_rng_seed(&o->rng, 11);
    omp_set_num_threads(threads);
    nj_params_zero_grad(&m.params);
    o->rc = nj_step_replicas_run(s, g, &m, cfg, &bb->b, &o->rng, &o->r);
    omp_set_num_threads(1);
    if (o->rc) snprintf(o->err, sizeof o->err, "%s", nj_graph_error(g));
    o->grads = calloc((size_t)m.params.count, sizeof *o->grads);
    o->bufs = calloc((size_t)m.buffers.count, sizeof *o->bufs);
    for (int i = 0; i < m.params.count; i++)
        o->grads[i] = copy_floats(m.params.items[i]->grad, nj_param_numel(m.params.items[i]));
    for (int i = 0; i < m.buffers.count; i++)
        o->bufs[i] = copy_floats(m.buffers.items[i]->data, nj_param_numel(m.buffers.items[i]));
    nj_step_replicas_free(s);
    nj_graph_free(g);
    nj_model_free(&m);
}

/* Largest |a − b| over a tensor relative to its largest |a|. */
static double rel_diff(const float *a, const float *b, size_t n)
{
    double d = 0, s = 1e-30;
    for (size_t i = 0; i < n; i++) {
        d = fmax(d, fabs((double)a[i] - b[i]));
        s = fmax(s, fabs((double)a[i]));
    }
    return d / s;
}

static void compare(const char *what, const outcome *ref, const outcome *got, const nj_model *m)
{
    char name[160];
    snprintf(name, sizeof name, "%s: the step runs", what);
    if (!check(ref->rc == 0 && got->rc == 0, name, "plain rc %d (%s), replicas rc %d (%s)", ref->rc, ref->err,
               got->rc, got->err))
        return;
    double dl = fabs((double)ref->r.loss - got->r.loss) / fabs((double)ref->r.loss);
    double dp = fabs((double)ref->r.photometric - got->r.photometric) / fabs((double)ref->r.photometric);
    double dm = fabs((double)ref->r.mask_fraction - got->r.mask_fraction);
    snprintf(name, sizeof name, "%s: loss, photometric part and mask share equal the plain step's", what);
    check(dl < 1e-5 && dp < 1e-5 && dm < 1e-6, name, "loss %.8g vs %.8g, photometric %.8g vs %.8g, mask %.7f vs %.7f",
          ref->r.loss, got->r.loss, ref->r.photometric, got->r.photometric, ref->r.mask_fraction,
          got->r.mask_fraction);
    /* conv biases followed by batch norm have a gradient of exactly 0 in
     * exact arithmetic (the norm removes the mean): both sides must be
     * rounding-small there, relative to the largest gradient of the model */
    double top = 0;
    for (int i = 0; i < m->params.count; i++)
        for (size_t j = 0; j < nj_param_numel(m->params.items[i]); j++) top = fmax(top, fabs(ref->grads[i][j]));
    double worst = 0, zero = 0;
    int wi = 0;
    for (int i = 0; i < m->params.count; i++) {
        size_t n = nj_param_numel(m->params.items[i]);
        double big = 0;
        for (size_t j = 0; j < n; j++) big = fmax(big, fabs(ref->grads[i][j]));
        if (big < 1e-6 * top) {
            for (size_t j = 0; j < n; j++) zero = fmax(zero, fabs(got->grads[i][j]) / top);
            continue;
        }
        double d = rel_diff(ref->grads[i], got->grads[i], n);
        if (d > worst) worst = d, wi = i;
    }
    printf("#  %s: worst gradient difference %.3g (%s), zero-gradient tensors %.3g, loss %.3g\n", what, worst,
           m->params.items[wi]->name, zero, dl);
    snprintf(name, sizeof name, "%s: every parameter gradient equals the plain step's", what);
    check(worst < 1e-4 && zero < 1e-5, name, "worst %s: %.3g of its largest |gradient|; zero-gradient tensors "
          "up to %.3g of the largest gradient", m->params.items[wi]->name, worst, zero);
    double bw = 0;
    for (int i = 0; i < m->buffers.count; i++)
        for (size_t j = 0; j < nj_param_numel(m->buffers.items[i]); j++)
            bw = fmax(bw, fabs((double)ref->bufs[i][j] - got->bufs[i][j]));
    snprintf(name, sizeof name, "%s: batch-norm running statistics equal the plain step's", what);
    check(bw < 1e-5, name, "largest difference %.3g", bw);
    snprintf(name, sizeof name, "%s: the noise generator ends where the plain step leaves it", what);
    check(!memcmp(&ref->rng, &got->rng, sizeof ref->rng), name, "states differ");
}

/* The plain step against `threads` threads on a batch of n. */
static void equal_case(const char *what, int n, int threads, const nj_train_config *cfg, nj_model *shape)
{
    nj_bench_batch bb;
    if (!check(nj_bench_batch_make(&bb, n, H, W, 7) == 0, "bench batch", "out of memory for %d items", n)) return;
    outcome ref, got;
    run_step(1, &bb, cfg, &ref);
    run_step(threads, &bb, cfg, &got);
    compare(what, &ref, &got, shape);
    outcome_free(&ref, shape);
    outcome_free(&got, shape);
    nj_bench_batch_free(&bb);
}

static void test_equal(const nj_train_config *cfg, nj_model *shape)
{
    equal_case("2 threads, batch 4: 2 replicas of 2 items", 4, 2, cfg, shape);
    equal_case("4 threads, batch 4: 4 replicas of 1 item", 4, 4, cfg, shape);
    equal_case("4 threads, batch 6: 3 replicas of 2 items", 6, 4, cfg, shape);
    equal_case("4 threads, batch 2: 2 replicas of 1 item, 2 threads each", 2, 4, cfg, shape);
}

static void test_uneven(const nj_train_config *cfg, nj_model *shape)
{
    nj_bench_batch bb;
    if (!check(nj_bench_batch_make(&bb, 3, H, W, 9) == 0, "bench batch of 3", "out of memory")) return;
    nj_model m;
    char err[256];
    nj_model_init(&m, &cfg->model, err, sizeof err);
    nj_step_replicas *s = nj_step_replicas_new(2, (size_t)16 << 20, err, sizeof err);
    check(s && !nj_step_replicas_fit(s, &bb.b), "a batch of 3 does not split over 2 replicas", "%s",
          s ? "fits" : err);
    nj_step_replicas_free(s);
    nj_model_free(&m);
    outcome plain, two;
    run_step(1, &bb, cfg, &plain);
    run_step(2, &bb, cfg, &two);
    int same = plain.rc == 0 && two.rc == 0 && plain.r.loss == two.r.loss;
    for (int i = 0; same && i < shape->params.count; i++)
        same = !memcmp(plain.grads[i], two.grads[i], sizeof(float) * nj_param_numel(shape->params.items[i]));
    check(same, "batch of 3 with 2 threads: the plain step, bit for bit", "loss %.8g vs %.8g", plain.r.loss,
          two.r.loss);
    outcome_free(&plain, shape);
    outcome_free(&two, shape);
    nj_bench_batch_free(&bb);
}

/* One replica step of a fresh model (seed as configured) on s; the loss. */
static float step_with(nj_step_replicas *s, nj_model *m, nj_graph *g, const nj_train_config *cfg,
                       const nj_bench_batch *bb, int *rc)
{
    nj_rng rng;
    nj_rng_seed(&rng, 11);
    nj_step_result r;
    nj_graph_reset(g);
    nj_params_zero_grad(&m->params);
    omp_set_num_threads(2);
    *rc = nj_step_replicas_run(s, g, m, cfg, &bb->b, &rng, &r);
    omp_set_num_threads(1);
    return r.loss;
}

static void test_rebind(const nj_train_config *cfg)
{
    nj_bench_batch bb;
    if (!check(nj_bench_batch_make(&bb, 4, H, W, 7) == 0, "bench batch for the reload", "out of memory")) return;
    nj_model m;
    char err[256];
    nj_model_init(&m, &cfg->model, err, sizeof err);
    nj_graph *g = nj_graph_new((size_t)16 << 20);
    nj_step_replicas *s = nj_step_replicas_new(2, (size_t)16 << 20, err, sizeof err);
    int rc1, rc2;
    float first = step_with(s, &m, g, cfg, &bb, &rc1);
    nj_model_free(&m);
    nj_model_init(&m, &cfg->model, err, sizeof err); /* new parameter records, same initial values */
    float again = step_with(s, &m, g, cfg, &bb, &rc2);
    check(s && rc1 == 0 && rc2 == 0 && first == again,
          "replicas pick up a model built again: the same step, bit for bit", "rc %d %d, loss %.8g vs %.8g", rc1,
          rc2, first, again);
    nj_step_replicas_free(s);
    nj_graph_free(g);
    nj_model_free(&m);
    nj_bench_batch_free(&bb);
}

/* Stereo on, item 3 (replica 1's second) without partner: replica 1 fails in
 * the middle of the step while replica 0 goes on to the loss's sums. */
static void test_failure(const nj_train_config *base)
{
    nj_train_config cfg = *base;
    cfg.stereo = 1;
    nj_bench_batch bb;
    if (!check(nj_bench_batch_make(&bb, 4, H, W, 7) == 0, "bench batch for the failure", "out of memory")) return;
    int has[4] = {1, 1, 1, 0};
    bb.b.stereo = 1;
    bb.b.partner = bb.b.partner_in = bb.b.target;
    for (int i = 0; i < 4; i++) {
        bb.b.stereo_tx[i] = -0.1f;
        bb.b.has_partner[i] = has[i];
    }
    alarm(120); /* a replica left waiting would hang the test: fail it instead */
    outcome o;
    run_step(2, &bb, &cfg, &o);
    alarm(0);
    check(o.rc == -1 && strstr(o.err, "has no stereo partner"),
          "a failing replica releases the other; the error names the cause", "rc %d, error '%s'", o.rc, o.err);
    nj_model m;
    char err[256];
    nj_model_init(&m, &cfg.model, err, sizeof err);
    outcome_free(&o, &m);
    nj_model_free(&m);
    bb.b.partner = bb.b.partner_in = NULL;   /* aliased the target: not the batch's own */
    nj_bench_batch_free(&bb);
}

int main(void)
{
    nj_train_config cfg;
    nj_bench_config(&cfg, W, H, 4);
    nj_model shape;
    char err[256];
    if (!check(nj_model_init(&shape, &cfg.model, err, sizeof err) == 0, "default model", "%s", err))
        return test_exit();
    test_equal(&cfg, &shape);
    test_uneven(&cfg, &shape);
    test_rebind(&cfg);
    test_failure(&cfg);
    nj_model_free(&shape);
    return test_exit();
}

/* train/loop/train_memory.c — the trainer's memory need (train/loop/memneed.h), stated
 * before the big allocations and checked against what the process may use.
 *
 * The step arena is measured, not modelled: probe steps on blank frames at
 * the smallest sizes the architecture allows, P pixels (side 2^(stages+1)) at
 * batch 2 and 3 and 2P pixels (twice as wide) at batch 2, fit
 *     arena(B, pixels) = c0 + c1·B·pixels + c2·pixels
 * (c0: per-thread weight-gradient partials and other fixed scratch; c2:
 * per-thread scratch that grows with the image but not the batch), and
 * evaluate it at the configured batch and resolution.  Every activation,
 * gradient and scratch buffer of a step comes from the arena, so the probe
 * follows the code as it changes.  The probes leave the model as they found
 * it (batch-norm statistics restored, gradients zeroed). */
#include "train/loop/step_replicas.h"
#include "train/loop/trainer.h"
#include "train/loop/memneed.h"
#include "train/loop/step.h"
#include <math.h>
#include <omp.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define MIB (1024.0 * 1024.0)
#define GALLERY_FRAMES 3                   /* report_gallery.c's MAX_FRAMES */
/* Address space a run reserves beyond its resident need: thread stacks,
 * per-thread malloc arenas, OpenBLAS buffers, arena chunk rounding.
 * Measured (VmPeak − VmSize at the estimate − resident need): 280–440 MiB
 * for 1–4 threads, about the same for a 4 MiB and a 160 MiB step arena. */
#define VIRT_EXTRA (512.0 * MIB)
/* Resident memory first touched after the estimate whatever the size: thread
 * stacks, BLAS work buffers, building the report.  Measured 6–9 MiB on a run
 * with 16k parameters and a 4 MiB arena. */
#define RUNTIME_EXTRA (8.0 * MIB)

/* The training loader (workers > 0: its slots and every worker decoding one
 * frame at a time) or the validation and gallery loaders (workers = 0: one
 * worker, prefetch 2). */
static double loader_bytes(const nj_trainer *t, int batch, int jitter, int workers)
{
    const nj_train_config *c = &t->cfg;
    int nsrc = t->ntrain > 0 ? t->train[0].nsrc : 0, stereo = 0, maxw = 0, maxh = 0, prefetch = 2;
    for (int i = 0; i < t->ntrain; i++) stereo |= t->train[i].stereo;
    for (int s = 0; s < t->ds.nseq; s++) {
        if (t->ds.seq[s].width > maxw) maxw = t->ds.seq[s].width;
        if (t->ds.seq[s].height > maxh) maxh = t->ds.seq[s].height;
    }
    if (workers > 0) workers = nj_trainer_loader_workers(t, &prefetch);
    else workers = 1;
    int images = 1 + nsrc + stereo, lens = 0;
    for (int s = 0; s < t->ds.nseq; s++) lens |= t->ds.seq[s].undistort != NULL;
    double slots = (prefetch + 1.0) * batch * images * 3.0 * c->width * c->height * 4.0 * (jitter ? 2 : 1);
    /* 8-bit decode + float copy, per worker; a lens adds the undistorted float copy */
    double decode = images * 3.0 * maxw * maxh * (lens ? 9.0 : 5.0);
    return slots + workers * decode;
}

/* Base (resident now), parameters, and what may be taken: before the model. */
int nj_trainer_memory_precheck(nj_trainer *t, char *err, size_t errlen)
{
    nj_model_config mc = t->cfg.model;
    mc.pose = t->cfg.video;
    uint64_t np = 0, nbuf = 0;
    nj_model_count(&mc, &np, &nbuf);
    memset(&t->mem, 0, sizeof t->mem);
    t->mem.base = nj_mem_rss(0);
    t->mem.start_vm = nj_mem_vm(0);
    t->mem.params = 16.0 * (double)(np + nbuf);            /* value, grad, Adam m, v */
    t->mem.virt_extra = VIRT_EXTRA;
    t->mem.avail = nj_mem_available(t->mem.virt_extra, &t->mem.limit);
    t->mem.total = t->mem.base + t->mem.params;
    /* every step also holds one weight-gradient partial per thread (conv2d.c) */
    double floor = t->mem.params + 4.0 * (double)np * omp_get_max_threads();
    if (floor > t->mem.avail) {
        snprintf(err, errlen, "memory need: more than %.0f MiB for the parameters alone (available %.0f MiB, "
                 "limited by %s): refusing to start; reduce model.width or model.stages",
                 (t->mem.base + floor) / MIB, (t->mem.base + t->mem.avail) / MIB, t->mem.limit);
        return -1;
    }
    return 0;
}

/* A blank batch of n items at w×h shaped like the run's training batches. */
static int probe_batch(const nj_trainer *t, int n, int h, int w, nj_batch *b)
{
    int nsrc = t->train[0].nsrc, stereo = 0;
    for (int i = 0; i < t->ntrain; i++) stereo |= t->train[i].stereo;
    size_t img = (size_t)3 * h * w;
    int rotated = t->cfg.rotation_pairs > 0;
    if (nj_batch_alloc(b, n, h, w, nsrc, stereo, 0, 0, rotated)) return -1;
    for (size_t i = 0; i < img * n; i++) b->target[i] = 0.25f + 0.5f * (float)((i * 2654435761u) % 1000) / 1000.0f;
    for (size_t i = 0; i < img * n * nsrc; i++) b->sources[i] = b->target[i % (img * n)];
    if (stereo) memcpy(b->partner, b->target, img * n * sizeof(float));
    if (rotated) memcpy(b->rotated, b->target, img * n * sizeof(float));
    for (int i = 0; i < n; i++) {
        b->camera[i] = (nj_camera){0.6f * w, 0.6f * w, 0.5f * (w - 1), 0.5f * (h - 1)};
        b->stereo_tx[i] = -0.1f;
        b->has_partner[i] = stereo;
    }
    return 0;
}

static char probe_error[256];          /* why the last failed probe step failed */

/* Arena bytes of one step (train: forward + backward; else inference), -1 on failure. */
static double probe(nj_trainer *t, int n, int h, int w, int train)
{
    nj_batch b;
    memset(&b, 0, sizeof b);
    nj_graph *g = nj_graph_new((size_t)1 << 20);
    nj_params *bufs = &t->model.buffers;
    size_t nb = nj_params_numel(bufs), k = 0;
    float *saved = malloc((nb ? nb : 1) * sizeof(float));
    double bytes = -1;
    if (g && saved && probe_batch(t, n, h, w, &b) == 0) {
        for (int i = 0; i < bufs->count; k += nj_param_numel(bufs->items[i]), i++)
            memcpy(saved + k, bufs->items[i]->data, nj_param_numel(bufs->items[i]) * sizeof(float));
        nj_graph_set_grad(g, train);
        nj_graph_set_training(g, train);
        nj_rng rng;
        nj_rng_seed(&rng, 1);
        nj_step_result r;
        if (nj_train_step(g, &t->model, &t->cfg, &b, train ? &rng : NULL, train, &r) == 0)
            bytes = (double)nj_arena_peak(nj_graph_arena(g));
        else
            snprintf(probe_error, sizeof probe_error, "%dx%d batch %d: %s", w, h, n, nj_graph_error(g));
        k = 0;
        for (int i = 0; i < bufs->count; k += nj_param_numel(bufs->items[i]), i++)
            memcpy(bufs->items[i]->data, saved + k, nj_param_numel(bufs->items[i]) * sizeof(float));
        nj_params_zero_grad(&t->model.params);
    }
    nj_batch_free(&b);
    if (g) nj_graph_free(g);
    free(saved);
    return bytes;
}

/* The fitted arena (see the header comment) at batch n, or -1.  Probes use
 * batch 2 and 3 (batch normalisation in training needs two values per
 * channel, and the pose net may end at 1×1). */
static double arena_at(nj_trainer *t, int n, int train)
{
    int side = 2 << t->model.cfg.stages;
    double a = probe(t, 2, side, side, train), b = probe(t, 3, side, side, train);
    double c = probe(t, 2, side, 2 * side, train);
    if (a < 0 || b < 0 || c < 0) return -1;
    double p = (double)side * side, pc = (double)t->cfg.width * t->cfg.height;
    double c1 = (b - a) / p, c2 = (c - a) / p - 2 * c1, c0 = a - (2 * c1 + c2) * p;
    if (c2 < 0) c2 = 0;
    double est = c0 + c1 * n * pc + c2 * pc;
    return est > 0 ? est : a;
}

int nj_trainer_memory_check(nj_trainer *t, char *err, size_t errlen)
{
    nj_mem_need *m = &t->mem;
    double step = arena_at(t, t->cfg.batch, 1);
    double gallery = arena_at(t, GALLERY_FRAMES, 0);
    if (step < 0 || gallery < 0) {      /* the run itself will tell what is wrong */
        printf("memory need: unknown (the probe step failed at %s)\n", probe_error);
        fflush(stdout);
        return 0;
    }
    m->arena_per_step = step;
    m->arena = step;
    int validates = t->nval > 0 && t->cfg.validate_every > 0;
    m->loader = loader_bytes(t, t->cfg.batch, 1, 1) + (validates ? loader_bytes(t, t->cfg.batch, 0, 0) : 0);
    m->report = gallery + 16.0 * (double)nj_params_numel(&t->model.params) +
                loader_bytes(t, GALLERY_FRAMES, 0, 0);
    m->total = m->base + m->params + m->arena + m->loader + m->report + RUNTIME_EXTRA;
    if (m->total - m->base > m->avail) {
        snprintf(err, errlen, "memory need: %.0f MiB (available %.0f MiB, limited by %s): refusing to start; "
                 "reduce data.batch, data.width/height or model.width",
                 m->total / MIB, (m->base + m->avail) / MIB, m->limit);
        return -1;
    }
    printf("memory need: %.0f MiB (available %.0f MiB)\n", m->total / MIB, (m->base + m->avail) / MIB);
    fflush(stdout);
    return 0;
}

void nj_trainer_memory_log(nj_trainer *t)
{
    char line[512];
    double peak = nj_mem_rss(1), arena = t->g ? (double)nj_arena_peak(nj_graph_arena(t->g)) : 0;
    arena += (double)nj_step_replicas_arena_peak(t->split);
    snprintf(line, sizeof line, "{\"type\":\"memory\",\"need_mib\":%.2f,\"peak_rss_mib\":%.2f,"
             "\"arena_estimate_mib\":%.3f,\"arena_peak_mib\":%.3f,\"start_vm_mib\":%.2f,\"peak_vm_mib\":%.2f}",
             t->mem.total / MIB, peak / MIB, t->mem.arena_per_step / MIB, arena / MIB, t->mem.start_vm / MIB,
             nj_mem_vm(1) / MIB);
    nj_runlog_json(&t->log, line);
    nj_runlog_say(&t->log, "memory: peak resident %.0f MiB (estimated need %.0f MiB)", peak / MIB, t->mem.total / MIB);
}

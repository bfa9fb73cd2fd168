/* nn/graph.c — tape recording and reverse replay (see graph.h). */
#include "nn/graph.h"
#include "nn/prof.h"
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

struct nj_graph {
    nj_arena *arena;
    nj_op *tape;
    int ntape, cap;
    int grad_on, training, failed;
    nj_replicas replicas;            /* count 0: single process */
    char err[512];
    void *scratch;              /* see nj_graph_scratch */
    size_t scratch_bytes;
    nj_tensor **lazy;           /* this step's tensors whose grad may still be unzeroed */
    int nlazy, lazy_cap;
};

nj_graph *nj_graph_new(size_t arena_chunk_bytes)
{
    nj_graph *g = calloc(1, sizeof *g);
    if (!g) return NULL;
    g->arena = nj_arena_new(arena_chunk_bytes);
    g->cap = 1024;
    g->tape = malloc(sizeof *g->tape * (size_t)g->cap);
    if (!g->arena || !g->tape) { nj_graph_free(g); return NULL; }
    g->grad_on = 1;
    g->training = 1;
    return g;
}

void nj_graph_free(nj_graph *g)
{
    if (!g) return;
    nj_arena_free(g->arena);
    free(g->scratch);
    free(g->lazy);
    free(g->tape);
    free(g);
}

void nj_graph_reset(nj_graph *g)
{
    nj_arena_reset(g->arena);
    g->ntape = 0;
    g->nlazy = 0;
    g->failed = 0;
    g->err[0] = 0;
}

void nj_graph_set_grad(nj_graph *g, int enabled) { g->grad_on = enabled != 0; }
int nj_graph_grad_enabled(const nj_graph *g) { return g->grad_on; }
void nj_graph_set_training(nj_graph *g, int training) { g->training = training != 0; }
int nj_graph_training(const nj_graph *g) { return g->training; }
int nj_graph_failed(const nj_graph *g) { return g->failed; }

void nj_graph_set_replicas(nj_graph *g, const nj_replicas *r)
{
    memset(&g->replicas, 0, sizeof g->replicas);
    if (r && r->count > 1 && r->sum) g->replicas = *r;
}

const nj_replicas *nj_graph_replicas(const nj_graph *g)
{
    return g->replicas.count > 1 && g->training ? &g->replicas : NULL;
}

int nj_graph_replica_sum(nj_graph *g, double *buf, int n, const char *what)
{
    const nj_replicas *r = nj_graph_replicas(g);
    if (!r || n <= 0) return 0;
    if (r->sum(buf, n, r->ctx) == 0) return 0;
    nj_graph_fail(g, "%s: summing over %d processes failed", what, r->count);
    return -1;
}
const char *nj_graph_error(const nj_graph *g) { return g->err; }
nj_arena *nj_graph_arena(nj_graph *g) { return g->arena; }
int nj_graph_ops(const nj_graph *g) { return g->ntape; }

void *nj_graph_fail(nj_graph *g, const char *fmt, ...)
{
    if (g->failed) return NULL;
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(g->err, sizeof g->err, fmt, ap);
    va_end(ap);
    g->failed = 1;
    return NULL;
}

void nj_graph_fail_cause(nj_graph *g, const char *msg)
{
    snprintf(g->err, sizeof g->err, "%s", msg);
    g->failed = 1;
}

void *nj_graph_alloc(nj_graph *g, size_t bytes)
{
    void *p = nj_arena_alloc(g->arena, bytes);
    if (!p) nj_graph_fail(g, "out of memory allocating %zu bytes for one step", bytes);
    return p;
}

void *nj_graph_calloc(nj_graph *g, size_t bytes)
{
    void *p = nj_arena_calloc(g->arena, bytes);
    if (!p) nj_graph_fail(g, "out of memory allocating %zu bytes for one step", bytes);
    return p;
}

void *nj_graph_scratch(nj_graph *g, size_t bytes)
{
    if (bytes > g->scratch_bytes) {
        size_t want = (bytes + 63) / 64 * 64;
        free(g->scratch);
        g->scratch = aligned_alloc(64, want);
        g->scratch_bytes = g->scratch ? want : 0;
        if (!g->scratch) return nj_graph_fail(g, "out of memory allocating %zu bytes of scratch", bytes);
    }
    return g->scratch;
}

void *nj_graph_scratch_zero(nj_graph *g, size_t bytes)
{
    void *p = nj_graph_scratch(g, bytes);
    if (p) memset(p, 0, bytes);
    return p;
}

/* Zeroes n floats; big buffers by all threads (on one thread a big buffer
 * would be a serial stretch). */
static void zero_floats(float *p, size_t n)
{
    enum { SPAN = 1 << 14 };
    if (n < 4 * (size_t)SPAN) {
        memset(p, 0, sizeof(float) * n);
        return;
    }
    long spans = (long)((n + SPAN - 1) / SPAN);
    #pragma omp parallel for schedule(static)
    for (long i = 0; i < spans; i++) {
        size_t a = (size_t)i * SPAN, k = n - a < SPAN ? n - a : SPAN;
        memset(p + a, 0, sizeof(float) * k);
    }
}

/* A new grad buffer is zeroed only when a backward is about to touch it:
 * zeroing every buffer during the forward pass wrote it out to memory once
 * more, and read it back in the backward (measured: ~5 ms of the 2-thread
 * step at 320x96 b4, nothing measurable on 1 thread).  When the list cannot
 * grow, the buffer is zeroed at once. */
static void defer_zero(nj_graph *g, nj_tensor *t)
{
    if (g->nlazy == g->lazy_cap) {
        /* grows during the first step only: later steps allocate the same tensors */
        int cap = g->lazy_cap ? 2 * g->lazy_cap : 1024;
        nj_tensor **l = realloc(g->lazy, sizeof *l * (size_t)cap);
        if (!l) {
            zero_floats(t->grad, nj_numel(t));
            return;
        }
        g->lazy = l;
        g->lazy_cap = cap;
    }
    g->lazy[g->nlazy++] = t;
    t->grad_lazy = 1;
}

/* Zeroes t's grad if it is still unwritten. */
static void settle(nj_tensor *t)
{
    if (t && t->grad_lazy) {
        zero_floats(t->grad, nj_numel(t));
        t->grad_lazy = 0;
    }
}

float *nj_tensor_grad(nj_tensor *t)
{
    settle(t);
    return t->grad;
}

/* After a reverse pass every grad buffer holds its value (zero when nothing
 * reached it), as callers and tests read them. */
static void settle_all(nj_graph *g)
{
    for (int i = 0; i < g->nlazy; i++) settle(g->lazy[i]);
    g->nlazy = 0;
}

nj_tensor *nj_tensor_new(nj_graph *g, int n, int c, int h, int w, int with_grad)
{
    if (n <= 0 || c <= 0 || h <= 0 || w <= 0)
        return nj_graph_fail(g, "tensor shape %dx%dx%dx%d has a non-positive dimension", n, c, h, w);
    nj_tensor *t = nj_graph_alloc(g, sizeof *t);
    if (!t) return NULL;
    t->n = n; t->c = c; t->h = h; t->w = w;
    t->grad = NULL;
    size_t bytes = nj_numel(t) * sizeof(float);
    if (!(t->data = nj_graph_alloc(g, bytes))) return NULL;
    t->grad_lazy = 0;
    if (with_grad && g->grad_on) {
        if (!(t->grad = nj_graph_alloc(g, bytes))) return NULL;
        defer_zero(g, t);
    }
    return t;
}

nj_tensor *nj_tensor_from(nj_graph *g, int n, int c, int h, int w,
                          const float *data, int with_grad)
{
    nj_tensor *t = nj_tensor_new(g, n, c, h, w, with_grad);
    if (t) memcpy(t->data, data, nj_numel(t) * sizeof(float));
    return t;
}

nj_tensor *nj_tensor_wrap(nj_graph *g, int n, int c, int h, int w,
                          float *data, float *grad)
{
    nj_tensor *t = nj_graph_alloc(g, sizeof *t);
    if (!t) return NULL;
    t->n = n; t->c = c; t->h = h; t->w = w;
    t->data = data;
    t->grad = g->grad_on ? grad : NULL;
    t->grad_lazy = 0;
    return t;
}

nj_tensor *nj_op_output(nj_graph *g, int n, int c, int h, int w,
                        nj_tensor *const *in, int nin)
{
    int need = 0;
    for (int k = 0; k < nin; k++) need |= in[k] && in[k]->grad;
    return nj_tensor_new(g, n, c, h, w, need);
}

nj_op *nj_graph_record(nj_graph *g, const char *name, nj_backward_fn bw,
                       nj_tensor *out, nj_tensor *const *in, int nin)
{
    if (!out || !out->grad || !g->grad_on || g->failed) return NULL;
    if (g->ntape == g->cap) {
        /* Grows during the first step only: later steps record the same ops. */
        nj_op *t = realloc(g->tape, sizeof *t * (size_t)g->cap * 2);
        if (!t) return nj_graph_fail(g, "out of memory growing the tape");
        g->tape = t;
        g->cap *= 2;
    }
    nj_op *op = &g->tape[g->ntape++];
    memset(op, 0, sizeof *op);
    op->backward = bw;
    op->name = name;
    op->prof = NULL;
    op->out = out;
    for (int k = 0; k < nin && k < 4; k++) op->in[k] = in[k];
    return op;
}

static int replay(nj_graph *g)
{
    for (int k = g->ntape - 1; k >= 0 && !g->failed; k--) {
        nj_op *op = &g->tape[k];
        settle(op->out);
        for (int i = 0; i < 4; i++) settle(op->in[i]);
        double t0 = nj_prof_start();
        op->backward(g, op);
        if (t0 > 0) nj_prof_stop(op->prof, t0);
    }
    settle_all(g);
    return g->failed ? -1 : 0;
}

int nj_backward_seeded(nj_graph *g, nj_tensor *out, const float *seed)
{
    if (g->failed) return -1;
    if (!out) { nj_graph_fail(g, "backward: output is NULL"); return -1; }
    if (!out->grad) return 0;
    settle(out);
    size_t n = nj_numel(out);
    for (size_t i = 0; i < n; i++) out->grad[i] += seed[i];
    return replay(g);
}

int nj_backward(nj_graph *g, nj_tensor *loss)
{
    if (g->failed) return -1;
    if (!loss) { nj_graph_fail(g, "backward: loss is NULL"); return -1; }
    if (nj_numel(loss) != 1) {
        nj_graph_fail(g, "backward: loss must have one element, got %dx%dx%dx%d",
                      loss->n, loss->c, loss->h, loss->w);
        return -1;
    }
    if (!loss->grad) return 0; /* nothing upstream needs a gradient */
    settle(loss);
    loss->grad[0] += 1.0f;
    return replay(g);
}

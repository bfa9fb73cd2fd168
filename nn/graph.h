/* nn/graph.h — the tape of reverse-mode automatic differentiation.
 *
 * A graph owns one step's arena and tape.  Every op (nn/ops.h) takes the graph
 * as its first argument, allocates its output in the arena and, when gradients
 * are enabled and some input carries a gradient, records a tape entry with its
 * backward function.  nj_backward() seeds d(loss)/d(loss) = 1 and replays the
 * entries in reverse; each backward *accumulates* into its inputs' `grad`.
 *
 * Errors are sticky: an op given bad shapes records a one-line message and
 * returns NULL; every later op given NULL returns NULL too.  Check
 * nj_graph_failed() once after building the expression.
 *
 * Typical step:
 *     nj_graph_reset(g);                 // arena reused, tape cleared
 *     nj_tensor *loss = model_forward(g, ...);
 *     if (nj_graph_failed(g)) report(nj_graph_error(g));
 *     nj_backward(g, loss);              // grads into parameters
 */
#ifndef NJ_GRAPH_H
#define NJ_GRAPH_H
#include "nn/tensor.h"
#include "nn/arena.h"

typedef struct nj_graph nj_graph;
typedef struct nj_op nj_op;
typedef void (*nj_backward_fn)(nj_graph *g, const nj_op *op);

/* One tape entry.  Ops keep what their backward needs in the small fixed
 * fields or in `aux` (arena memory). */
struct nj_op {
    nj_backward_fn backward;
    const char *name;
    nj_tensor *out;
    nj_tensor *in[4];
    float f[6];
    int i[8];
    void *aux;
    const char *prof;   /* profile category of the backward (nn/prof.h); NULL: not timed */
};

nj_graph *nj_graph_new(size_t arena_chunk_bytes);
void nj_graph_free(nj_graph *g);
/* Clears the tape and the error, makes the arena's memory reusable. */
void nj_graph_reset(nj_graph *g);

/* Gradient recording (default on).  Off: ops record nothing, outputs carry no grad. */
void nj_graph_set_grad(nj_graph *g, int enabled);
int nj_graph_grad_enabled(const nj_graph *g);
/* Training mode (default on) selects batch statistics in batch normalisation. */
void nj_graph_set_training(nj_graph *g, int training);
int nj_graph_training(const nj_graph *g);

/* Data-parallel replicas.  When one step's batch is split over several
 * processes (train/loop/dist.h), the ops whose result couples batch items —
 * batch-norm statistics (synchronised batch norm) and loss normalisers —
 * combine their per-process partial sums with `sum`, so every process gets
 * the value a single process would compute on the whole batch.  Replicas take
 * part only in training mode: inference-mode graphs (validation on one
 * process) never communicate.  `sum` adds n doubles in place over all
 * replicas and returns 0, or -1 (the op then fails the graph). */
typedef struct nj_replicas {
    int rank, count;                 /* this process's shard, number of shards */
    int (*sum)(double *buf, int n, void *ctx);
    void *ctx;
} nj_replicas;
/* Installs (a copy of) r, or removes it with NULL or r->count <= 1. */
void nj_graph_set_replicas(nj_graph *g, const nj_replicas *r);
/* The replicas in effect: NULL unless set, count > 1 and in training mode. */
const nj_replicas *nj_graph_replicas(const nj_graph *g);
/* Sums buf over the replicas in effect (no-op without).  Returns 0, or -1
 * with the graph failed naming `what`. */
int nj_graph_replica_sum(nj_graph *g, double *buf, int n, const char *what);

int nj_graph_failed(const nj_graph *g);
const char *nj_graph_error(const nj_graph *g);
/* Records the first error (printf-style); later ones are ignored. Returns NULL
 * so ops can `return nj_graph_fail(...)`. */
void *nj_graph_fail(nj_graph *g, const char *fmt, ...)
    __attribute__((format(printf, 2, 3)));

/* Fails g with msg even when it failed already: for a caller that knows the
 * first failure's cause lies elsewhere (a replica whose failure made this
 * graph's sums fail). */
void nj_graph_fail_cause(nj_graph *g, const char *msg);

nj_arena *nj_graph_arena(nj_graph *g);
/* Arena scratch memory; on exhaustion the graph fails and NULL is returned. */
void *nj_graph_alloc(nj_graph *g, size_t bytes);
void *nj_graph_calloc(nj_graph *g, size_t bytes);

/* Temporary memory for the op now running (forward or backward), 64-byte
 * aligned, uninitialised: valid only until the next nj_graph_scratch call, so
 * one op may hold one scratch block at a time.  One buffer owned by the
 * graph, reused by every op; it grows (a system allocation) only for a
 * request larger than any before, i.e. during the first step.  Keeps per-op
 * working memory (im2col tiles, per-thread partial sums) out of the step's
 * peak.  On exhaustion the graph fails and NULL is returned. */
void *nj_graph_scratch(nj_graph *g, size_t bytes);
/* Same, zero-filled. */
void *nj_graph_scratch_zero(nj_graph *g, size_t bytes);

/* A new tensor in the arena.  Data uninitialised; a grad buffer is attached
 * when with_grad is non-zero and gradients are enabled.  That buffer reads as
 * zero, but it is zeroed lazily: just before the first backward that touches
 * it, and for every buffer at the end of a reverse pass.  Before the reverse
 * pass, read or write it only through nj_tensor_grad(). */
nj_tensor *nj_tensor_new(nj_graph *g, int n, int c, int h, int w, int with_grad);
/* t's grad buffer, zeroed first if it is still unwritten (NULL: no gradient). */
float *nj_tensor_grad(nj_tensor *t);
/* A tensor in the arena holding a copy of `data` (numel floats). */
nj_tensor *nj_tensor_from(nj_graph *g, int n, int c, int h, int w,
                          const float *data, int with_grad);
/* Wraps caller-owned memory (e.g. a parameter) without copying. */
nj_tensor *nj_tensor_wrap(nj_graph *g, int n, int c, int h, int w,
                          float *data, float *grad);

/* For op implementers: output tensor of an op whose inputs are in[0..nin-1];
 * gets a grad buffer iff recording and any input has one. */
nj_tensor *nj_op_output(nj_graph *g, int n, int c, int h, int w,
                        nj_tensor *const *in, int nin);
/* Appends a tape entry when `out` carries a gradient; returns it (or NULL when
 * nothing needs recording — callers then skip saving state). */
nj_op *nj_graph_record(nj_graph *g, const char *name, nj_backward_fn bw,
                       nj_tensor *out, nj_tensor *const *in, int nin);

/* Reverse pass from a 1-element tensor.  Returns 0, or -1 with the error set. */
int nj_backward(nj_graph *g, nj_tensor *loss);

/* Reverse pass seeded with an arbitrary upstream gradient for `out` (numel
 * floats, added to out->grad): computes vector-Jacobian products. */
int nj_backward_seeded(nj_graph *g, nj_tensor *out, const float *seed);

/* Number of tape entries recorded since the last reset. */
int nj_graph_ops(const nj_graph *g);

#endif

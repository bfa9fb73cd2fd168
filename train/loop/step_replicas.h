/* train/loop/step_replicas.h — one training step split over the threads of one
 * process: data-parallel replicas instead of splitting every op.
 *
 * With T threads and a batch of N items, R replicas run side by side, R the
 * largest divisor of N up to T (and 64), each on k = N / R items: replica r runs the
 * whole step (train/loop/step.h) on items [r·k, (r+1)·k) in its own graph, its ops
 * on T / R threads (one thread, or a nested team when the threads outnumber
 * the replicas); the ops that couple batch items (batch-norm statistics, the
 * photometric normaliser, the tie-break noise) combine the replicas' partial
 * sums through nn/graph.h's replica hook, so every replica computes its slice
 * of what one graph computes on the whole batch (the same mechanism as
 * data-parallel processes, train/loop/trainer_dist.h).  When the caller's graph
 * has process replicas of its own, the thread replicas nest inside them:
 * replica r of process p is shard p·R + r of all, and replica 0 (on the
 * calling thread, the one MPI lets communicate) adds the processes' sums to
 * the threads' sum.  Replica 0 uses the model's
 * gradient buffers, the others private ones (made for the first batch, again
 * when the replica count changes or the model is rebuilt); afterwards the
 * model's gradients are the replicas' mean (summed in replica order, so the
 * result depends on R but not on the schedule) and the loss figures are
 * their mean.  Per op, one thread holds every value it needs in its own
 * caches and no op waits for another thread, except at those sums.
 *
 * nj_step_replicas_run falls back to the plain step (op-level threads) when
 * no divisor of the batch from 2 to T exists or the replicas are not set up
 * (T = 1). */
#ifndef NJ_STEP_REPLICAS_H
#define NJ_STEP_REPLICAS_H
#include "train/loop/step.h"

typedef struct nj_step_replicas nj_step_replicas;

/* Replicas for `threads` threads (≥ 2; at most 64 replicas).  The replicas
 * after the first get model-shaped gradient buffers and a graph with arena
 * chunks of arena_chunk bytes at their first step (when the batch, hence the
 * replica count, is known).  NULL with a message in err when out of memory or
 * threads < 2. */
nj_step_replicas *nj_step_replicas_new(int threads, size_t arena_chunk, char *err, size_t errlen);
void nj_step_replicas_free(nj_step_replicas *s);
/* 1 when s is set up and batch b splits into 2 or more replicas. */
int nj_step_replicas_fit(const nj_step_replicas *s, const nj_batch *b);
/* One training step with backward pass, like nj_train_step(g, m, cfg, b, rng,
 * 1, r) (g reset and m's gradients zeroed by the caller): split over the
 * replicas when nj_step_replicas_fit, else the plain step.  Split: g is
 * replica 0's graph; r's disp0 / automask / error are replica 0's slice; rng
 * ends where the plain step leaves it.  Returns 0, or -1 with g's error set. */
int nj_step_replicas_run(nj_step_replicas *s, nj_graph *g, nj_model *m, const nj_train_config *cfg,
                         const nj_batch *b, nj_rng *rng, nj_step_result *r);
/* Arena high-water mark of the replicas' own graphs (bytes, all together). */
size_t nj_step_replicas_arena_peak(const nj_step_replicas *s);

#endif

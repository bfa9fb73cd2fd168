/* nn/prof.h — an optional per-op-kind wall-clock profile of a training step.
 *
 * Off by default: nj_prof_start() then returns 0 and nj_prof_stop() does
 * nothing, so instrumented ops pay one branch.  When enabled (./nightjar bench
 * --profile), the instrumented ops (conv forward, the graph's replay of conv
 * backward, reprojection + bilinear sampling, SSIM) add their elapsed time to
 * their kind's total.  Only the main thread's ops count (they parallelise
 * inside), or replica 0's when a step runs as per-thread replicas, so the
 * totals need no locking. */
#ifndef NJ_PROF_H
#define NJ_PROF_H

typedef enum {
    NJ_PROF_CONV_FWD = 0,
    NJ_PROF_CONV_BWD,
    NJ_PROF_WARP,       /* reprojection and bilinear sampling, forward and backward */
    NJ_PROF_SSIM,       /* SSIM (and the fused photometric error built on it), forward and backward */
    NJ_PROF_KINDS
} nj_prof_kind;

void nj_prof_enable(int on);
/* Zeroes every total. */
void nj_prof_reset(void);
/* A start time (seconds) when profiling, else 0. */
double nj_prof_start(void);
/* Adds now − t0 to kind k's total when profiling. */
void nj_prof_stop(nj_prof_kind k, double t0);
double nj_prof_seconds(nj_prof_kind k);
/* The kind an op's backward belongs to, by the name it was recorded with; -1: none. */
int nj_prof_kind_of(const char *op_name);

#endif

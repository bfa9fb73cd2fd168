/* train/loop/dist.h — the processes of a data-parallel training run.
 *
 * The only module that talks to MPI.  Built with `make MPI=1` (mpicc, NJ_MPI
 * defined) it wraps Open MPI's MPI_COMM_WORLD; the default build compiles the
 * single-process implementation, in which there is one process of rank 0 and
 * every collective is a no-op.  Only the thread that called nj_dist_init may
 * call the rest (MPI_THREAD_FUNNELED); never inside an OpenMP region.
 *
 * Errors: MPI's default handler (errors are fatal) stays in place, so a
 * failed collective or a dead peer ends the whole job through the launcher;
 * the functions still return 0 or -1 for form's sake.
 */
#ifndef NJ_DIST_H
#define NJ_DIST_H
#include <stddef.h>
#include <stdint.h>

/* Starts MPI (no-op without it).  Returns 0 or -1 with a message. */
int nj_dist_init(int *argc, char ***argv, char *err, size_t errlen);
/* Ends MPI after a normal run (no-op without it or when not started). */
void nj_dist_finalize(void);
/* Ends every process of the job with `code` (MPI_Abort); plain exit()
 * without MPI.  For the command layer only. */
void nj_dist_abort(int code) __attribute__((noreturn));

/* 1 when built with MPI support. */
int nj_dist_built(void);
int nj_dist_rank(void);          /* 0..size-1; 0 without MPI */
int nj_dist_size(void);          /* processes; 1 without MPI */
/* The host this process runs on (MPI processor name, or gethostname). */
const char *nj_dist_host(void);

/* In-place sums over all processes. */
int nj_dist_sum_f32(float *buf, size_t n);
int nj_dist_sum_f64(double *buf, int n);
/* In-place element-wise maximum over all processes. */
int nj_dist_max_i64(int64_t *buf, int n);
/* Rank 0's bytes into every other process's buf (any size). */
int nj_dist_bcast(void *buf, size_t bytes);
/* Every process's `bytes` bytes, by rank, into all (size × bytes). */
int nj_dist_allgather(const void *mine, void *all, size_t bytes);

/* Time spent in collectives so far (including waiting for the slowest
 * process): the float sums (the fused gradient all-reduce) and the double
 * sums (batch-norm statistics, loss normalisers), with call counts and the
 * float values summed — for the end-of-run summary and `make bench`. */
typedef struct nj_dist_stats {
    double sum_f32_seconds, sum_f64_seconds;
    long sum_f32_calls, sum_f64_calls;
    double sum_f32_values;
} nj_dist_stats;
void nj_dist_get_stats(nj_dist_stats *s);

#endif

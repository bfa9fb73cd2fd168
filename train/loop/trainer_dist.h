/* train/loop/trainer_dist.h — data-parallel training over the processes of
 * train/loop/dist.h (`mpirun -np N ./nightjar train ...`, built with `make MPI=1`).
 *
 * The run's batch is split over N processes ("ranks"): the config's `batch`
 * is the per-rank batch and the global batch is batch × N.  Every step's
 * samples come from the sample order of that global batch (data/loader.h), and
 * rank r loads items [r·batch, (r+1)·batch).  Rank 0's configuration, model,
 * optimiser state and trainer state (fresh, --init or resumed) are broadcast
 * at the start; each step every rank computes the gradients of its shard,
 * one MPI_Allreduce over a fused buffer (all gradients and the step's loss
 * figures) averages them, and every rank applies the same clipping and Adam
 * update.  Batch-norm statistics and the photometric normaliser are summed
 * across ranks inside the step (nn/graph.h replicas), so N ranks × batch B
 * compute what one process computes with batch N·B, up to float rounding.
 * Only rank 0 writes the log, reports and checkpoints; a checkpoint records
 * N, and resuming with another N is refused (the sample order depends on it).
 *
 * With one process (the default build, or an MPI build started alone) every
 * function here is a no-op returning its input.
 */
#ifndef NJ_TRAINER_DIST_H
#define NJ_TRAINER_DIST_H
#include "train/loop/step.h"
#include "train/loop/trainer.h"

/* First setup step: rank and rank count into t; rank 0's configuration to
 * every rank (each keeps its own dataset path and thread count).  Returns 0
 * or -1 with a message. */
int nj_trainer_dist_begin(nj_trainer *t, char *err, size_t errlen);
/* Collective: 0 when every rank's rc is 0.  Otherwise -1; a rank that failed
 * keeps its message, rank 0 names the failed ranks, the others get "". */
int nj_trainer_dist_agree(nj_trainer *t, int rc, const char *what, char *err, size_t errlen);
/* Collective: refuses (on every rank) when some rank's dataset hash differs
 * from rank 0's, naming the rank and host. */
int nj_trainer_dist_check_data(nj_trainer *t, char *err, size_t errlen);
/* Collective: rank 0's model (architecture, parameters, buffers, Adam
 * moments), trainer state and RNG to every rank (model built where needed);
 * allocates the fused buffer. */
int nj_trainer_dist_share(nj_trainer *t, char *err, size_t errlen);
/* Installs the cross-rank sums on the training graph (nn/graph.h). */
void nj_trainer_dist_graph(nj_trainer *t);
/* Collective, once per step after the backward pass: averages the gradients
 * of the unfrozen parameters and the loss figures of r over the ranks (one
 * all-reduce).  Returns 0 or -1. */
int nj_trainer_dist_average(nj_trainer *t, nj_step_result *r);
/* Collective, once per loop turn: the largest `stop` wish of any rank
 * (0 go on, 1 budget reached, 2 signal), and rank 0's LR schedule horizon,
 * which depends on rank 0's clock, into t->st.schedule_steps. */
int nj_trainer_dist_stop(nj_trainer *t, int stop);
/* For the loop's SIGINT/SIGTERM handler (async-signal-safe): with several
 * ranks, rank 0 writes to stderr that the job is being stopped — Open MPI's
 * launcher sends SIGTERM to every process when one of them dies — and that
 * the run's checkpoints stay valid for --resume.  Nothing when alone. */
void nj_trainer_dist_signal_note(void);
/* Rank 0 of several, after the run: one line with the time per step spent
 * in the gradient all-reduce (and its size) and in the in-step sums. */
void nj_trainer_dist_summary(const nj_trainer *t, long steps);
/* Command layer, after a failed run on several ranks: prints this rank's
 * last message (rank 0's are already on screen) and ends the whole job. */
void nj_trainer_dist_fail(nj_trainer *t, int code) __attribute__((noreturn));

#endif

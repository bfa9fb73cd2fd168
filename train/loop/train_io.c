/* train/loop/train_io.c — what the trainer does when it cannot write: a disk that
 * is full, a folder that became read-only, an I/O error.  The run stops with
 * one line on stderr naming the file and the system's reason, and the last
 * good checkpoint (never pruned or replaced by a failed write: data/atomic.h,
 * nj_trainer_save) is named so the user knows what a --resume will use. */
#include "train/loop/trainer.h"
#include "train/loop/runfiles.h"
#include <stdio.h>

void nj_trainer_write_failed(nj_trainer *t, const char *why)
{
    long steps[1];
    char last[NJ_PATH_MAX + 32] = "none written yet";
    if (nj_run_list_steps(t->dir, steps, 1) > 0) nj_run_step_path(t->dir, steps[0], last, sizeof last);
    if (t->log.line_open) { fputc('\n', stdout); t->log.line_open = 0; }
    fflush(stdout);
    fprintf(stderr, "nightjar train: %s; stopping at step %ld (last good checkpoint: %s)\n", why, t->st.step, last);
    fflush(stderr);
}

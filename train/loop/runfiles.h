/* train/loop/runfiles.h — the files of a run directory:
 *   step-00001234.ckpt   numbered checkpoints (the last `keep_last` are kept)
 *   best.ckpt            best validation photometric loss so far
 *   final.ckpt           written when the run ends
 *   log.jsonl            see runlog.h
 */
#ifndef NJ_RUNFILES_H
#define NJ_RUNFILES_H
#include <stddef.h>

/* Creates `dir` (and parents).  Returns 0 or -1 with a message. */
int nj_run_mkdir(const char *dir, char *err, size_t errlen);
void nj_run_step_path(const char *dir, long step, char *out, size_t len);
/* The newest `max` numbered checkpoints in dir, newest first (steps into
 * out).  Returns the count. */
int nj_run_list_steps(const char *dir, long *out, int max);
/* Deletes numbered checkpoints beyond the newest `keep`. */
void nj_run_prune(const char *dir, int keep);
/* Deletes temporary files that an interrupted atomic write of the run's own
 * files left behind (NAME.XXXXXX.tmp for a step-*.ckpt, best.ckpt,
 * final.ckpt or report.html).  Only one process may train in a run folder.
 * Returns the number removed. */
int nj_run_clean_temps(const char *dir);

#endif

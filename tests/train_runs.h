/* tests/train_runs.h — small training runs for the tests of run behaviours
 * (tests/test_run_files.c, tests/test_run_budget.c, tests/test_eval_pose.c):
 * one tiny synthetic dataset, a small configuration, runs started side by
 * side (one thread each, so two fit the two cores), and readers of what a run
 * leaves behind written here, not with the product's own run-folder code. */
#ifndef NJ_TRAIN_RUNS_H
#define NJ_TRAIN_RUNS_H
#include <stddef.h>
#include <sys/types.h>

/* A fresh temp folder (ref_mkdtemp, TAG in its name) holding DIR/data, the
 * dataset of `nightjar synth --out DIR/data --seed 4 --sequences 3 --frames
 * 12 --size 64x32` (yard-00 train, yard-01 val, yard-02 test; depth and
 * poses).  data gets DIR/data/dataset.json.  Prints a FAIL line and returns
 * -1 when it cannot. */
int tr_setup(const char *tag, char *dir, size_t dlen, char *data, size_t datalen);

/* Writes the small configuration to PATH: 64x32, batch 1, one thread, model
 * width 0.25 with 4 stages and a 0.25-wide 3-stage pose net, seed 3,
 * log_every 1.  RUN, MODEL and OPTIM are JSON members added to those
 * sections (e.g. "\"max_steps\": 4, \"keep_last\": 2"; "" for none); they
 * must not repeat the keys named above.  0 or -1. */
int tr_config(const char *path, const char *run, const char *model, const char *optim);

/* Starts `nightjar ARGS...` (the binary under test, e2e_bin()) with stdout and
 * stderr into LOG; ARGS is a printf format whose result is split at spaces
 * (so paths must not contain any).  Returns the pid, or -1. */
pid_t tr_start(const char *log, const char *fmt, ...) __attribute__((format(printf, 2, 3)));

/* Waits for pid.  guard_s is a hang guard only (a broken budget must not
 * stall the suite), never a timing check: after guard_s seconds the child is
 * killed and -2 returned.  Otherwise the exit status, or 128 + signal. */
int tr_wait(pid_t pid, double guard_s);

/* The last {"type":"end"} record of RUN/log.jsonl: step, "ended" and
 * "elapsed_s".  0, or -1 when there is none. */
typedef struct tr_end {
    long step;
    char ended[96];
    double elapsed;
} tr_end;
int tr_end_record(const char *run, tr_end *e);

/* The {"type":"val"} records of RUN/log.jsonl in file order: their steps
 * and photometric losses (at most max).  Returns the count, -1 without a log. */
int tr_vals(const char *run, long *step, double *photometric, int max);

/* Steps of the numbered checkpoints (files named step-NNNNNNNN.ckpt, 8
 * digits) in RUN, ascending, at most max.  Returns the count. */
int tr_numbered(const char *run, long *steps, int max);

/* The model's motion between consecutive frames IMAGES/000000.png ..
 * IMAGES/%06d.png (nframes of them), through the library (the checkpoint
 * loaded, nj_infer_motion at its training size, as eval runs it; one
 * thread, so compare with `eval --threads 1`), written to
 * OUT as raw little-endian float64, (nframes − 1) × 3 × 4, for
 * tests/ref/eval_pose_ref.py.  0, or -1 with a message. */
int tr_dump_motions(const char *ckpt, const char *images, int nframes, const char *out, char *err, size_t len);
/* The same for frames `gap` apart: motion i maps frame i into frame i + gap,
 * (nframes − gap) × 3 × 4. */
int tr_dump_motions_gap(const char *ckpt, const char *images, int nframes, int gap, const char *out, char *err,
                        size_t len);

/* 1 when the "pose" block of eval's METRICS json matches the REF json of
 * tests/ref/eval_pose_ref.py: the counts exactly, every figure within
 * tol·(1 + |ref|); else 0 with the first difference in why. */
int tr_pose_matches(const char *metrics, const char *ref, double tol, char *why, size_t len);

/* 1 when PATH exists. */
int tr_exists(const char *path);

#endif

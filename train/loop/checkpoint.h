/* train/loop/checkpoint.h — nightjar's own checkpoint file (".ckpt").
 *
 * One file holds everything needed to continue or use a run: the training
 * configuration (JSON text), every parameter and batch-norm buffer by name and
 * shape, the Adam moments and step, the trainer state (step, epoch, RNG
 * state, loader position, best validation value, NaN-recovery count) and a
 * hash of the dataset's file list.  The file ends with a CRC-32 of all bytes
 * before it, so truncation or corruption is detected on load.  Writes are
 * atomic (temporary file, fsync, rename).
 */
#ifndef NJ_CHECKPOINT_H
#define NJ_CHECKPOINT_H
#include "train/loop/config.h"
#include "train/model/model.h"
#include <stdint.h>

typedef struct nj_train_state {
    long step, epoch;
    uint64_t rng[2];            /* trainer RNG (nj_rng state) */
    uint64_t loader_seed;
    long loader_cursor;         /* samples consumed so far */
    double best_val;            /* best validation photometric loss, +inf if none */
    long adam_step;
    int nan_recoveries;
    int resumes;
    double elapsed_seconds;     /* training wall time so far */
    uint64_t dataset_hash;
    long schedule_steps;        /* horizon of the LR schedule, fixed once known */
    float lr_scale;             /* 1, halved at each NaN recovery */
    int ranks;                  /* processes of a data-parallel run (1: single); the
                                   sample order depends on it (train/loop/dist.h) */
} nj_train_state;

/* Writes model (params, buffers, Adam moments), config and state to `path`
 * atomically.  Returns 0 or -1 with a message naming the file. */
int nj_checkpoint_save(const char *path, const nj_model *m, const nj_train_config *cfg,
                       const nj_train_state *st, char *err, size_t errlen);
/* Reads a checkpoint: fills *cfg from the stored config, builds *m with the
 * stored architecture and loads every tensor, fills *st.  Any of cfg/st may be
 * NULL.  Verifies magic, version, CRC, shapes and names; on failure nothing is
 * left allocated and err says what is wrong with which file. */
int nj_checkpoint_load(const char *path, nj_model *m, nj_train_config *cfg,
                       nj_train_state *st, char *err, size_t errlen);
/* Copies parameter values (and buffers) of a loaded checkpoint into an
 * existing model of the same architecture (for --init).  Error if any name
 * or shape differs.  The model also takes the checkpoint's pose output scale
 * (m->cfg.pose_scale), which its pose weights were trained for. */
int nj_checkpoint_init_from(const char *path, nj_model *m, char *err, size_t errlen);

#endif

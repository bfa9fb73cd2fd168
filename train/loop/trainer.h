/* train/loop/trainer.h — the training run: data, model, loop, validation,
 * checkpoints, signals, NaN recovery, health monitoring. */
#ifndef NJ_TRAINER_H
#define NJ_TRAINER_H
#include "data/dataset.h"
#include "data/loader.h"
#include "nn/adam.h"
#include "train/loop/checkpoint.h"
#include "train/loop/config.h"
#include "train/loop/health.h"
#include "train/model/model.h"
#include "train/loop/memneed.h"
#include "train/measure/measure.h"
#include "train/loop/runlog.h"

typedef struct nj_trainer {
    nj_train_config cfg;
    char dir[NJ_PATH_MAX];
    nj_dataset ds;
    nj_data_options dopt;
    nj_sample *train, *val;
    int ntrain, nval;
    nj_loader *loader;
    struct nj_framestore *store; /* data.frame_store: the training frames prepared once (NULL: none) */
    nj_model model;
    int model_ready;
    nj_adam opt;
    nj_graph *g;
    nj_rng rng;
    nj_train_state st;
    nj_health health;
    nj_runlog log;
    double wall0;              /* monotonic seconds at (re)start */
    double elapsed0;           /* st.elapsed_seconds at (re)start */
    double last_ckpt;          /* elapsed seconds at the last checkpoint */
    long last_ckpt_step;
    int bad_steps;             /* consecutive non-finite steps */
    long fault_step;           /* test hook nonfinite=STEP:COUNT (nn/testhook.h): from this step on, */
    int fault_left;            /* the next COUNT losses are replaced by NaN */
    float last_val;
    double t10;                /* elapsed seconds at step 10 (schedule estimate) */
    nj_mem_need mem;           /* memory need, estimated at setup (train_memory.c) */
    int rank, ranks;           /* data-parallel processes (trainer_dist.h); 0 of 1 alone */
    float *fused;              /* gradient all-reduce buffer (ranks > 1) */
    struct nj_step_replicas *split; /* the step as per-thread replicas (several threads, one process) */
    /* Writes the run's report after each validation and at the end; set by
     * the caller (the train command passes the report module's writer, which
     * sits above the loop); NULL: no report.  0, or -1 with a message. */
    int (*write_report)(const char *run_dir, char *err, size_t errlen);
} nj_trainer;

/* Setup (train_setup.c): dataset, samples, model (fresh, --init or resumed),
 * optimiser, loader.  Returns 0 or -1 with a message. */
int nj_trainer_setup(nj_trainer *t, int resume, char *err, size_t errlen);
void nj_trainer_teardown(nj_trainer *t);
/* (Re)starts the batch loader at the current step (after setup or a NaN
 * recovery).  Returns 0 or -1 with a message. */
/* The loader's worker threads for this run, and *prefetch the batches it
 * prepares ahead to keep them all busy (train_setup.c). */
int nj_trainer_loader_workers(const nj_trainer *t, int *prefetch);
int nj_trainer_start_loader(nj_trainer *t, char *err, size_t errlen);
/* Loads the newest readable checkpoint of the run (falling back over
 * truncated or corrupt ones, which are reported).  Returns 0, 1 when there is
 * none, -1 on error. */
int nj_trainer_load_latest(nj_trainer *t, char *err, size_t errlen);
uint64_t nj_dataset_hash(const nj_dataset *ds);

/* Memory (train_memory.c).  Before the model is built: the resident base,
 * the parameters' share and what the process may take; refuses (-1 with a
 * one-line message) when the parameters alone cannot fit. */
int nj_trainer_memory_precheck(nj_trainer *t, char *err, size_t errlen);
/* After the model is built, before the step arena and the loaders: probes the
 * step arena, prints "memory need: X MiB (available Y MiB)" and refuses (-1,
 * one-line message naming the limit) when the need exceeds what is available. */
int nj_trainer_memory_check(nj_trainer *t, char *err, size_t errlen);
/* Appends {"type":"memory",...} (estimate, peak RSS, arena estimate and peak)
 * to the run log and says the peak. */
void nj_trainer_memory_log(nj_trainer *t);

/* A write of the run failed (message "PATH: why"): says so in one line on
 * stderr with the last good checkpoint (train_io.c).  The caller stops. */
void nj_trainer_write_failed(nj_trainer *t, const char *why);

/* The loop (trainer.c).  Returns the process exit code. */
int nj_trainer_run(nj_trainer *t);
/* Writes a numbered checkpoint (and prunes) — also best/final via `name`. */
int nj_trainer_save(nj_trainer *t, const char *name, char *err, size_t errlen);

/* Validation (validate.c) over up to `max_samples` val samples in inference
 * mode: mean photometric loss, and depth metrics where ground truth exists
 * (depth_images = 0 when none).  Returns 0 or -1 with a message. */
typedef struct nj_val_result {
    float photometric;
    int depth_images;
    nj_depth_metrics depth;
} nj_val_result;
int nj_trainer_validate(nj_trainer *t, int max_samples, nj_val_result *res, char *err, size_t errlen);

#endif

/* train/loop/config.h — training configuration: a JSON file with our own keys,
 * validated with one-line errors (unknown key, wrong type, out of range), and
 * command-line overrides on top.
 *
 * File layout (every key optional; defaults from nj_train_config_default):
 * {
 *   "run":   { "name": "yard-night", "seed": 1, "threads": 0, "minutes": 5, "hours": 0,
 *              "max_steps": 0, "log_every": 10, "validate_every": 200,
 *              "checkpoint_minutes": 10, "checkpoint_steps": 0,
 *              "keep_last": 3 },
 *   "data":  { "dataset": "path/to/dataset.json", "width": 320, "height": 96, "batch": 4,
 *              "frame_offsets": [1], "video": true, "stereo": false,
 *              "duplicate_threshold": 0.0, "loader_workers": 0,
 *              "frame_store": false, "frame_store_dir": "",
 *              "augment": { "brightness": 0.2, "contrast": 0.2, "saturation": 0.2,
 *                           "hue": 0.05, "flip": 0.5, "turn_deg": 0,
 *                           "roll_deg": 0 } },
 *   "model": { "stages": 5, "width": 1.0, "scales": 4, "norm": "batch" | "group" | "none",
 *              "head_init": 0.1, "pose_stages": 5, "pose_width": 1.0, "pose_scale": 0.5,
 *              "pose": true, "bn_momentum": 0.1, "depth_range": [0.1, 100] },
 *   "loss":  { "ssim_weight": 0.85, "smoothness": 0.001,
 *              "automask": true, "automask_from_step": 0, "tie_break": 1e-5,
 *              "saturation_guard": 0, "gain_match": false, "automask_widest": false,
 *              "arc_motion": 0, "arc_motion_from_step": 0,
 *              "rotation_pairs": 0, "rotation_pairs_deg": 1, "rotation_pairs_until_step": 0,
 *              "free_space": 0, "free_space_margin": 0.1,
 *              "free_space_reach": 8, "free_space_from_step": 0 },
 *   "optim": { "lr": 1e-4, "lr_min": 1e-6, "warmup_steps": 100, "schedule": "cosine" | "step",
 *              "step_every": 1000, "step_gamma": 0.5, "weight_decay": 0, "grad_clip": 1.0,
 *              "init": "", "freeze_encoder": false }
 * }
 * Relative paths inside the file resolve against the file's folder.
 * data.loader_workers: threads preparing batches, 0 = one per thread of the
 * run (train/loop/train_setup.c says why).  data.frame_store: keep every
 * training frame prepared at the training size in one file
 * (data/framestore.h), in data.frame_store_dir ("" = the run folder).
 * Neither changes a batch.
 * model.depth_range is [near, far]: the depths that disparity 1 and 0 stand
 * for (losses/depth.h), 0 < near < far.
 * "hours" is written back as "minutes"; run.seed also seeds the networks
 * (model.seed).  Loading ends with nj_train_config_check.  Syntax errors read
 * "PATH:LINE:COLUMN: bad JSON near '...'".
 */
#ifndef NJ_CONFIG_H
#define NJ_CONFIG_H
#include "data/dataset.h"
#include "train/model/model.h"
#include "losses/view_synthesis.h"
#include <stddef.h>

#define NJ_PATH_MAX 1024

typedef struct nj_train_config {
    /* run */
    char name[64];
    unsigned seed;
    int threads;              /* 0 = all cores */
    double minutes;           /* time budget; 0 = none */
    long max_steps;           /* step budget; 0 = none (one of the budgets must be set) */
    int log_every, validate_every, keep_last;
    double checkpoint_minutes;
    long checkpoint_steps;    /* also checkpoint every N steps; 0 = only by time */
    /* data */
    char dataset[NJ_PATH_MAX];
    int width, height, batch;
    int offsets[NJ_MAX_OFFSETS], noffsets;
    int video, stereo;
    float duplicate_threshold;
    int loader_workers;       /* 0 = automatic (one per thread) */
    int frame_store;          /* frames prepared once at the training size, in a file */
    char frame_store_dir[NJ_PATH_MAX];   /* its folder; "" = the run folder */
    float brightness, contrast, saturation, hue, flip;
    float turn_deg, roll_deg; /* the pose net's sources turned by a yaw within ±turn_deg and a
                                 roll within ±roll_deg (data/augment.h; the loss undoes it,
                                 train/loop/step.c) */
    /* model and loss */
    nj_model_config model;
    nj_vs_config loss;
    long automask_from;       /* auto-masking (when on) starts at this step; 0 = from the start */
    long arc_motion_from;     /* loss.arc_motion (when on) starts at this step; 0 = from the start */
    float rotation_pairs;     /* weight of the rotation lesson (train/loop/step.c); 0 = off */
    float rotation_pairs_deg; /* its copies turned within ± this per axis (data/augment.h) */
    long rotation_pairs_until;/* the lesson stops at this step; 0 = never */
    float free_space;         /* weight of the free-space hinge (losses/free_space.h); 0 = off */
    float free_space_margin;  /* the bound is the ground's depth along the ray × (1 + this) */
    float free_space_reach;   /* ...where the ground is within this many camera heights */
    long free_space_from;     /* loss.free_space (when on) starts at this step; 0 = from the start */
    /* optimiser */
    float lr, lr_min, step_gamma, weight_decay, grad_clip;
    int warmup_steps, step_every;
    int cosine;               /* 1 cosine, 0 step schedule */
    char init[NJ_PATH_MAX];
    int freeze_encoder;
} nj_train_config;

void nj_train_config_default(nj_train_config *c);
/* Reads and validates `path` on top of the current values of *c.
 * Returns 0, or -1 with "PATH: problem" in err. */
int nj_train_config_load(nj_train_config *c, const char *path, char *err, size_t errlen);
/* Cross-field validation (budgets, sizes divisible by 2^stages, ranges).
 * Returns 0 or -1 with a message. */
int nj_train_config_check(const nj_train_config *c, char *err, size_t errlen);
/* The whole configuration as a JSON text (malloc'd), loadable again by
 * nj_train_config_load_text; used inside checkpoints. */
char *nj_train_config_to_json(const nj_train_config *c);
int nj_train_config_load_text(nj_train_config *c, const char *json, const char *origin,
                              char *err, size_t errlen);
/* The data options the run's samples come from: every frame offset (video
 * runs), stereo, the duplicate threshold (training and the report gallery). */
void nj_train_config_data_options(const nj_train_config *c, nj_data_options *o);
/* Learning rate at `step` (warm-up, then cosine to lr_min or step decay). */
float nj_train_config_lr(const nj_train_config *c, long step, long total_steps);
/* The frame gap whose motion the pose net learnt: the smallest of
 * data.frame_offsets (1 when none is set).  The pose net answers with the
 * motion it learnt for a place, whatever the gap of the pair it is shown
 * (DEVELOPERS.md, "Training recipe"), so eval and map drive it on frames
 * this far apart. */
int nj_train_config_frame_step(const nj_train_config *c);

#endif

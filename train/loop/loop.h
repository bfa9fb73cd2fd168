/* train/loop/loop.h — the training loop's public face: what the commands,
 * evaluation, export, report and bench use of it.
 *
 *   config.h        the run configuration (JSON keys in config_fields.h)
 *   checkpoint.h    checkpoint files: save, load, inspect
 *   runfiles.h      the files of a run folder (numbered, best, final, log)
 *   step.h          one forward/backward pass of the recipe on a batch
 *   step_replicas.h the same step split over thread replicas
 *   dist.h          data-parallel processes (Open MPI when built in)
 *   trainer.h       a whole run: setup, steps, validation, checkpoints
 *   trainer_dist.h  the trainer's side of data-parallel runs
 *
 * Everything else in this folder (health, run log, memory need, CRC-32,
 * safetensors reading for --init, ...) is the loop's own. */
#ifndef NJ_LOOP_H
#define NJ_LOOP_H
#include "train/loop/config.h"
#include "train/loop/checkpoint.h"
#include "train/loop/runfiles.h"
#include "train/loop/step.h"
#include "train/loop/step_replicas.h"
#include "train/loop/dist.h"
#include "train/loop/trainer.h"
#include "train/loop/trainer_dist.h"
#endif

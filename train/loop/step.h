/* train/loop/step.h — one forward/backward pass of the training recipe on a batch:
 * depth net on the (jittered) target, pose net on each (jittered) frame pair,
 * view-synthesis loss on the clean images, backward into the parameters. */
#ifndef NJ_STEP_H
#define NJ_STEP_H
#include "data/loader.h"
#include "train/loop/config.h"
#include "train/model/model.h"

typedef struct nj_step_result {
    float loss, photometric, smoothness;
    float mask_fraction;        /* share of pixels the auto-mask keeps */
    float saturated;            /* share of scale-0 sigmoid outputs within 0.001 of 0 or 1 */
    float translation;          /* mean |t| of the predicted poses (0 without video) */
    float rotation_lesson;      /* the rotation lesson's error (loss.rotation_pairs; 0 when off) */
    float free_space;           /* share of bounded pixels beyond the ground (loss.free_space; 0 when off) */
    /* The pose net's mean |t| per frame of gap at the smallest and at the
     * widest frame offset (0 with fewer than two offsets).  Their ratio is the
     * log's "gap": ~1 when the pose net measures the gap, 1/(widest/smallest)
     * when it gives every gap the same motion (DEVELOPERS.md, stop 38). */
    float pace_near, pace_far;
    nj_tensor *disp0;           /* scale-0 disparity (arena; valid until the next reset) */
    nj_tensor *automask, *error;
} nj_step_result;

/* The loss figures of r that data-parallel shares average (loss,
 * photometric, smoothness, mask_fraction, saturated, translation, rotation_lesson,
 * free_space, pace_near, pace_far): pointers into r, NJ_STEP_FIGURES of them. */
enum { NJ_STEP_FIGURES = 10 };

/* Arena chunk size of a training step's graph (and of each replica's, train/loop/step_replicas.h). */
#define NJ_STEP_ARENA_CHUNK ((size_t)64 << 20)
void nj_step_figures(nj_step_result *r, float *out[NJ_STEP_FIGURES]);

/* The configuration of training step `step`: cfg itself, or *tmp holding cfg
 * with the loss terms that wait for a later step (loss.automask_from_step,
 * loss.arc_motion_from_step, loss.free_space_from_step) or have ended
 * (loss.rotation_pairs_until_step)
 * switched off. */
const nj_train_config *nj_step_config(const nj_train_config *cfg, long step, nj_train_config *tmp);

/* Builds the step in g (reset first by the caller).  With backward != 0 runs
 * the reverse pass (gradients accumulate into the model's parameters).
 * rng: tie-break noise source, or NULL.  Returns 0 or -1 with g's error set. */
int nj_train_step(nj_graph *g, nj_model *m, const nj_train_config *cfg, const nj_batch *b,
                  nj_rng *rng, int backward, nj_step_result *r);

#endif

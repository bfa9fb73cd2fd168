/* data/loader.h — training batches prepared ahead by worker threads.
 *
 * The samples of step s are a deterministic function of (seed, s): position
 * p = s·batch + i walks through epochs of N samples, epoch e = p / N being a
 * Fisher–Yates shuffle seeded by (seed, e); augmentation parameters of item i
 * of step s come from an RNG seeded by (seed, s, i).  So a loader created with
 * start_step = s (resume) yields exactly the batches a fresh one yields from
 * step s on, whatever the number of workers.
 *
 * Each item: the target, its temporal sources and its stereo partner, decoded,
 * resized to the training size (area filter when shrinking), intrinsics
 * scaled to match; then, seeded, a horizontal flip of all its frames (cx
 * mirrored, partner side swapped — see augment.h), then, only on the
 * network-input copies, with turn_deg / roll_deg a seeded turn of each source
 * frame, and a colour jitter.
 */
#ifndef NJ_LOADER_H
#define NJ_LOADER_H
#include "data/batch.h"
#include "data/dataset.h"
#include <stdint.h>

typedef struct nj_loader_config {
    int width, height;       /* training size */
    int batch;
    uint64_t seed;
    long start_step;         /* first step produced (resume) */
    int workers;             /* threads preparing batch items (1..64) */
    int prefetch;            /* batches prepared ahead (1..64); to keep W workers busy on
                                batches of n items it needs ceil(W / n) or more */
    int jitter;              /* colour jitter on the network-input copies */
    float brightness, contrast, saturation, hue;   /* jitter ranges (see augment.h) */
    float flip_prob;         /* probability of a horizontal flip per item */
    float turn_deg;          /* each source's input copy turned by a yaw drawn uniformly in
                                ±turn_deg degrees (data/augment.h); 0 = off */
    float roll_deg;          /* ... and by a roll drawn uniformly in ±roll_deg; 0 = off */
    int rotated;             /* each item's rotated copy (batch.h `rotated`, augment.h), turned
                                within ±rotated_deg degrees per axis; drawn after everything else */
    float rotated_deg;       /* (degrees) */
    long rotated_until;      /* no copies from this step on (the lesson has ended); 0 = never */
    /* Data-parallel shard: the loader yields items [shard_first, shard_first +
     * shard_count) of each step's batch of `batch` items — the same samples and
     * augmentation those items have in an unsharded loader.  shard_count 0:
     * the whole batch. */
    int shard_first, shard_count;
    /* Frames at the training size prepared once (NULL: every frame is decoded
     * and resized when an item needs it).  Must outlive the loader; its size
     * must be width × height. */
    const struct nj_framestore *store;
} nj_loader_config;

/* 320x240, batch 4, seed 1, workers 1, prefetch 2, jitter on with ranges
 * 0.2/0.2/0.2/0.05, flip probability 0.5, no turn, no shard, no frame store. */
void nj_loader_config_default(nj_loader_config *c);

/* nj_batch: data/batch.h */

typedef struct nj_loader nj_loader;

/* Starts the workers.  `samples` is copied; `ds` must outlive the loader.
 * Returns NULL with a message in err on bad configuration. */
nj_loader *nj_loader_create(const nj_dataset *ds, const nj_sample *samples, int nsamples,
                            const nj_loader_config *c, char *err, size_t errlen);
/* The batch of the next step (blocks until ready).  It stays valid until the
 * next call or nj_loader_destroy.  NULL on failure (e.g. an image that became
 * unreadable), with the one-line message in err; the step is then skipped. */
const nj_batch *nj_loader_next(nj_loader *L, char *err, size_t errlen);
void nj_loader_destroy(nj_loader *L);

/* The sample indices of step `step` (batch of them into out). */
void nj_loader_step_samples(uint64_t seed, long step, int batch, int nsamples, int *out);

#endif

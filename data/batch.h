/* data/batch.h — one step's training batch: images, intrinsics and the
 * per-item facts the loss needs.  Built only by nj_batch_alloc (the loader's
 * slots, the trainer's memory probe, the bench's synthetic batch) and
 * nj_batch_view (a replica's share), so its layout is written down once. */
#ifndef NJ_BATCH_H
#define NJ_BATCH_H
#include "nn/geom/camera.h"

typedef struct nj_batch {
    long step;
    int n, w, h;
    int nsrc;                /* temporal sources per item (2 per frame offset, or 0) */
    int stereo;              /* partner arrays present (some item has a partner) */
    /* Clean images, for the loss (planar RGB in [0,1]): */
    float *target;           /* n×3×h×w */
    float *sources;          /* n×nsrc×3×h×w: source j of item i at (i·nsrc + j)·3·h·w; j=2i is t−k_i, j=2i+1 is t+k_i */
    float *partner;          /* n×3×h×w, or NULL when !stereo */
    /* The same images with the item's colour jitter (and the sources' turn),
     * for the network input (they alias the clean arrays when neither is on): */
    float *target_in, *sources_in, *partner_in;
    float *turn;             /* n×nsrc×3: the rotation vector (radians) the network-input copy
                                of source j of item i was turned by (data/augment.h), at
                                (i·nsrc + j)·3; the clean source is as recorded.  NULL when
                                nothing is turned */
    float *rotated;          /* n×3×h×w: item i's target_in turned about the camera centre by
                                rotated_by, with a gain and sensor noise (nj_rotated_copy,
                                data/augment.h): beside target_in, a pair with no translation
                                and a known rotation for the pose net (loss.rotation_pairs);
                                NULL when off */
    float *rotated_by;       /* n×3: that rotation vector (radians); NULL when off */
    nj_camera *camera;       /* n: intrinsics at w×h (after flip) */
    float *stereo_tx;        /* n: x of the target→partner transform, for nj_pose_stereo:
                                −baseline normally, +baseline after a flip; 0 without partner */
    int *has_partner;        /* n */
    int *flipped;            /* n */
    int *sample;             /* n: indices into the loader's sample list */
} nj_batch;

/* Allocates every array of a batch of n items at w×h with nsrc temporal
 * sources, partner arrays when `stereo`, separate network-input copies when
 * `jitter` (else they alias the clean images; sources_in is separate when
 * `turn` too), `turn` when `turn` and the rotated copies when `rotated`.
 * Everything is zeroed.  0, or -1 when out of memory (nothing held). */
int nj_batch_alloc(nj_batch *b, int n, int h, int w, int nsrc, int stereo, int jitter, int turn, int rotated);
/* Frees what nj_batch_alloc allocated; b is zeroed. */
void nj_batch_free(nj_batch *b);
/* Items [i0, i0 + k) of b, as a view into b's arrays (nothing copied). */
void nj_batch_view(const nj_batch *b, int i0, int k, nj_batch *out);

#endif

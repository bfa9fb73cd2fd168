/* data/loader_item.h — preparing one batch item (internal to the loader). */
#ifndef NJ_LOADER_ITEM_H
#define NJ_LOADER_ITEM_H
#include "data/loader.h"

/* Fills item i of b from sample s of ds for step `step` (decode, resize,
 * flip, jitter — see loader.h).  Returns 0, or -1 with "PATH: why" in err. */
int nj_loader_item(const nj_dataset *ds, const nj_sample *s, const nj_loader_config *c,
                   long step, int i, nj_batch *b, char *err, size_t errlen);
/* The frame at training size: frame `frame` of sequence q (right = 1: its
 * stereo partner) decoded and resized to W×H into dst (3×H×W floats); *sw,
 * *sh get the on-disk size.  The one producer of these pixels: the loader
 * calls it for every frame, or the frame store (framestore.h) stores its
 * output once.  Returns 0, or -1 with "PATH: why" in err. */
int nj_loader_frame(const nj_sequence *q, int right, int frame, int W, int H, float *dst, int *sw, int *sh,
                    char *err, size_t errlen);
/* Version of the pixels nj_loader_frame computes: raise it whenever they
 * change (decoding, resizing, anything added before the resize), so frame
 * stores written before are rebuilt.  (What a dataset's "camera" block
 * changes is covered by the store's key already.) */
#define NJ_FRAME_PIXELS_VERSION 1
/* The seed of item i of step `step` (splitmix-style mixing). */
uint64_t nj_loader_item_seed(uint64_t seed, long step, int i);

#endif

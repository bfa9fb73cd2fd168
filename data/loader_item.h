/* data/loader_item.h — preparing one batch item (internal to the loader). */
#ifndef NJ_LOADER_ITEM_H
#define NJ_LOADER_ITEM_H
#include "data/loader.h"

/* Fills item i of b from sample s of ds for step `step` (decode, resize,
 * flip, jitter — see loader.h).  Returns 0, or -1 with "PATH: why" in err. */
int nj_loader_item(const nj_dataset *ds, const nj_sample *s, const nj_loader_config *c,
                   long step, int i, nj_batch *b, char *err, size_t errlen);
/* The seed of item i of step `step` (splitmix-style mixing). */
uint64_t nj_loader_item_seed(uint64_t seed, long step, int i);

#endif

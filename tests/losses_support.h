/* tests/losses_support.h — shared plumbing of the losses/ reference tests:
 * run one mode of tests/ref/losses_ref.py into a fresh folder and load its
 * arrays as graph tensors. */
#ifndef NJ_LOSSES_SUPPORT_H
#define NJ_LOSSES_SUPPORT_H
#include "nn/graph.h"
#include <stddef.h>

/* Makes a temp folder and runs the reference script's MODE into it.
 * Returns 0, or -1 after printing a FAIL line named `name`. */
int losses_ref_run(const char *mode, char *dir, size_t len, const char *name);
/* dir/NAME.npy as an arena tensor (rank < 4 left-padded with 1s); NULL after
 * a FAIL line when it cannot be read. */
nj_tensor *losses_ref_tensor(nj_graph *g, const char *dir, const char *name, int with_grad);

#endif

/* tests/gradcheck.h — finite-difference gradient check for any op.
 *
 * The op is built by a callback from freshly made input tensors.  The check
 * takes the scalar L = sum(out * r) for a fixed random r (accumulated in
 * double), gets analytic dL/din from one backward pass seeded with r, and
 * compares every input element (or a seeded sample of 400 when an input is
 * larger) with the central difference (L(x+e) - L(x-e)) / 2e.
 *
 * Tolerance: the forward runs in float32, so L carries a rounding error of
 * about 1e-7·Σ|out·r|; divided by 2e that is the noise floor of the estimate.
 * An element passes when |analytic - numeric| <= atol + rtol·|numeric|.
 * Defaults (used when a field is 0): eps 1e-3, rtol 1e-2, atol 1e-3 —
 * comfortably above that floor for the small shapes the tests use, far below
 * the size of any real gradient bug (wrong index, missing term, wrong sign).
 */
#ifndef NJ_GRADCHECK_H
#define NJ_GRADCHECK_H
#include "nn/graph.h"

typedef nj_tensor *(*gc_build)(nj_graph *g, nj_tensor *const *in, void *ctx);

typedef struct gc_spec {
    int nin;            /* number of inputs (1..4) */
    int shape[4][4];    /* n, c, h, w of each input */
    float lo, hi;       /* inputs drawn uniformly from [lo, hi] (default -1, 1) */
    float eps, rtol, atol;
    unsigned seed;
    int no_grad[4];     /* non-zero: that input gets no gradient (e.g. a mask) */
} gc_spec;

/* Runs the check and reports one PASS/FAIL line named `name`.
 * Returns 1 on pass. */
int gradcheck(const char *name, gc_build build, void *ctx, const gc_spec *spec);

/* Deterministic uniform floats in [lo, hi) for test data. */
void test_fill_uniform(float *x, size_t n, float lo, float hi, unsigned seed);

#endif

/* losses/ssim_kernel.h — the SSIM arithmetic on one image plane, shared by the
 * SSIM op (ssim.c) and the fused photometric error (photometric.c).
 *
 * The plane is reflection-padded once into scratch, so every window is nine
 * direct loads and the loops over a row vectorise.  Window statistics use two
 * passes (box-filter means, then centred second moments over the nine taps),
 * which avoids the float32 cancellation of E[x²] − μ² in flat regions.
 *
 * Backward in gather form: with per-pixel coefficients (k = ∂L/∂S / 9)
 *   C0a = k(∂S/∂μx − 2·∂S/∂σx²·μx − ∂S/∂σxy·μy),   C1 = 2k·∂S/∂σx² (= 2k·∂S/∂σy²),
 *   C0b = k(∂S/∂μy − 2·∂S/∂σy²·μy − ∂S/∂σxy·μx),   C2 = k·∂S/∂σxy,
 * a padded position P receives Σ over the windows covering it of
 * C0a + a_P·C1 + b_P·C2 (3×3 box sums of the zero-extended coefficient maps),
 * and the padded gradient folds back onto the plane through the reflection. */
#ifndef NJ_SSIM_KERNEL_H
#define NJ_SSIM_KERNEL_H
#include "nn/graph.h"
#include <stddef.h>

/* Checks a pair of images for an SSIM-based op named `op`: same shape, at
 * least 2×2 (reflection padding).  Returns 1, or 0 with the graph failed. */
int nj_ssim_pair_ok(nj_graph *g, const nj_tensor *a, const nj_tensor *b, const char *op);

/* Floats of scratch one call needs for an H×W plane. */
size_t nj_ssim_scratch_floats(int H, int W);
/* s = SSIM map of planes a, b (H, W ≥ 2). */
void nj_ssim_plane_forward(const float *a, const float *b, int H, int W, float *s, float *scratch);
/* ga += (∂S/∂a)ᵀ gs and gb += (∂S/∂b)ᵀ gs; either may be NULL. */
void nj_ssim_plane_backward(const float *a, const float *b, const float *gs, int H, int W,
                            float *ga, float *gb, float *scratch);

#endif

/* losses/photometric.h — image similarity for view synthesis.
 *
 * SSIM (Wang et al. 2004) on 3×3 uniform windows with reflection padding, the
 * small-window form used in self-supervised depth work, C1 = 0.01², C2 = 0.03²
 * for images in [0, 1]:
 *   SSIM = (2μxμy + C1)(2σxy + C2) / ((μx² + μy² + C1)(σx² + σy² + C2))
 * with population (biased) window statistics.
 *
 * Photometric error (Godard et al. 2017):
 *   pe = α·clamp((1 − SSIM)/2, 0, 1) + (1 − α)·|a − b|, averaged over colour
 *   channels, α = 0.85 by default.
 */
#ifndef NJ_PHOTOMETRIC_H
#define NJ_PHOTOMETRIC_H
#include "nn/graph.h"

#define NJ_SSIM_C1 (0.01f * 0.01f)
#define NJ_SSIM_C2 (0.03f * 0.03f)

/* Per-pixel, per-channel SSIM map, same shape as a and b (N×C×H×W, H,W ≥ 2). */
nj_tensor *nj_ssim(nj_graph *g, nj_tensor *a, nj_tensor *b);
/* Per-pixel photometric error N×1×H×W. */
nj_tensor *nj_photometric_error(nj_graph *g, nj_tensor *a, nj_tensor *b, float alpha);

#endif

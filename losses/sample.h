/* losses/sample.h — differentiable bilinear sampling at pixel coordinates.
 *
 * out(n,c,v,u) = bilinear interpolation of img(n,c,·,·) at (x, y) =
 * coords(n,0,v,u), coords(n,1,v,u), in pixels (centres at integers).
 * Border clamp: x is clamped to [0, W−1] and y to [0, H−1] first, and a
 * clamped coordinate gets zero gradient — the behaviour of PyTorch's
 * grid_sample(mode="bilinear", padding_mode="border", align_corners=True).
 * Gradients flow to the image and to the coordinates.
 */
#ifndef NJ_SAMPLE_H
#define NJ_SAMPLE_H
#include "nn/graph.h"

/* img: N×C×H×W, coords: N×2×Ho×Wo → N×C×Ho×Wo. */
nj_tensor *nj_sample_bilinear(nj_graph *g, nj_tensor *img, nj_tensor *coords);

#endif

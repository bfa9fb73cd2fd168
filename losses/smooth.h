/* losses/smooth.h — edge-aware disparity smoothness (Godard et al. 2017).
 *
 *   L = mean |∂x d*|·exp(−mean_c|∂x I|) + mean |∂y d*|·exp(−mean_c|∂y I|)
 * with forward differences, d* = d / mean_{H,W}(d) (mean-normalised per
 * sample, Godard et al. 2019), each mean over all difference positions.
 */
#ifndef NJ_SMOOTH_H
#define NJ_SMOOTH_H
#include "nn/graph.h"

/* disp: N×1×H×W (raw; normalised inside), img: N×C×H×W at the same size
 * (no gradient taken through it).  Returns a 1×1×1×1 loss. */
nj_tensor *nj_edge_smoothness(nj_graph *g, nj_tensor *disp, nj_tensor *img);

#endif

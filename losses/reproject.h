/* losses/reproject.h — where each target pixel lands in a source view.
 *
 * For target pixel (u, v) with depth d:  P = d·K⁻¹[u v 1]ᵀ,  Q = R·P + t,
 * (x, y) = (fx·Qx/Qz + cx, fy·Qy/Qz + cy) in the source image's pixels.
 * Differentiable w.r.t. depth and the pose [R|t].
 */
#ifndef NJ_REPROJECT_H
#define NJ_REPROJECT_H
#include "nn/graph.h"
#include "nn/geom/camera.h"

/* Points closer than this (along the source camera's z) count as behind it. */
#define NJ_MIN_Z 1e-3f

/* depth: N×1×H×W, T: N×1×3×4 (target → source), cams: N intrinsics at H×W
 * (the source shares them).  Returns N×2×H×W coordinates (channel 0 = x,
 * 1 = y).  When `valid` is non-NULL it receives a gradient-free N×1×H×W mask:
 * 1 where the point is in front of the source camera (Qz > NJ_MIN_Z) and
 * lands inside [0, W−1]×[0, H−1], else 0.  Points behind the camera are
 * projected with Qz = NJ_MIN_Z and pass no gradient. */
nj_tensor *nj_reproject(nj_graph *g, nj_tensor *depth, nj_tensor *T,
                        const nj_camera *cams, nj_tensor **valid);

#endif

/* losses/depth.h — network disparity to depth.
 *
 * The depth net's sigmoid output s ∈ (0, 1) is read as inverse depth inside
 * the model's depth range [near, far] (model.depth_range):
 *   inverse depth = 1/far + (1/near − 1/far)·s,   depth = 1/(inverse depth),
 * so s = 0 is `far` and s = 1 is `near` (interpolation in inverse depth keeps
 * the resolution where the near field needs it).
 */
#ifndef NJ_DEPTH_H
#define NJ_DEPTH_H
#include "nn/graph.h"

/* The depths that disparity 1 and disparity 0 stand for; valid when 0 < near < far. */
typedef struct nj_depth_range {
    float near, far;
} nj_depth_range;

/* Depth of a tensor of sigmoid outputs; fails the graph for an invalid range. */
nj_tensor *nj_depth_from_disparity(nj_graph *g, nj_tensor *sigmoid_out, nj_depth_range r);
/* The same map on plain floats (inference, export, evaluation). */
float nj_depth_from_disparity_value(float s, nj_depth_range r);
/* Inverse: the sigmoid output that gives `depth`. */
float nj_disparity_from_depth_value(float depth, nj_depth_range r);
/* Non-zero when 0 < near < far (NaN fails). */
int nj_depth_range_ok(nj_depth_range r);

#endif

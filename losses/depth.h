/* losses/depth.h — network disparity to depth.
 *
 * The depth net's sigmoid output s ∈ (0, 1) is read as inverse depth between
 * the configured range: disp = 1/max_depth + (1/min_depth − 1/max_depth)·s,
 * depth = 1/disp (inverse-depth interpolation), so s = 0 is max_depth and
 * s = 1 is min_depth.
 */
#ifndef NJ_DEPTH_H
#define NJ_DEPTH_H
#include "nn/graph.h"

nj_tensor *nj_disp_to_depth(nj_graph *g, nj_tensor *sigmoid_out, float min_depth, float max_depth);
/* The same map on plain floats (inference, export, evaluation). */
float nj_disp_to_depth_value(float s, float min_depth, float max_depth);
/* Inverse: the sigmoid output that gives `depth`. */
float nj_depth_to_disp_value(float depth, float min_depth, float max_depth);

#endif

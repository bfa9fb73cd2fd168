/* losses/depth.c — inverse-depth interpolation between a depth range. */
#include "losses/depth.h"
#include "nn/ops.h"

nj_tensor *nj_disp_to_depth(nj_graph *g, nj_tensor *s, float min_depth, float max_depth)
{
    if (!s || nj_graph_failed(g)) return NULL;
    if (!(min_depth > 0) || !(max_depth > min_depth))
        return nj_graph_fail(g, "disp_to_depth: need 0 < min_depth < max_depth, got %g and %g",
                             min_depth, max_depth);
    float lo = 1.0f / max_depth, hi = 1.0f / min_depth;
    nj_tensor *one = nj_tensor_new(g, 1, 1, 1, 1, 0);
    if (!one) return NULL;
    one->data[0] = 1.0f;
    return nj_div(g, one, nj_affine(g, s, hi - lo, lo));
}

float nj_disp_to_depth_value(float s, float min_depth, float max_depth)
{
    float lo = 1.0f / max_depth, hi = 1.0f / min_depth;
    return 1.0f / (lo + (hi - lo) * s);
}

float nj_depth_to_disp_value(float depth, float min_depth, float max_depth)
{
    float lo = 1.0f / max_depth, hi = 1.0f / min_depth;
    return (1.0f / depth - lo) / (hi - lo);
}

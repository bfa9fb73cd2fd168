/* losses/depth.c — inverse-depth interpolation inside a depth range. */
#include "losses/depth.h"
#include "nn/ops.h"

int nj_depth_range_ok(nj_depth_range r)
{
    return r.near > 0 && r.far > r.near;
}

nj_tensor *nj_depth_from_disparity(nj_graph *g, nj_tensor *s, nj_depth_range r)
{
    if (!s || nj_graph_failed(g)) return NULL;
    if (!nj_depth_range_ok(r))
        return nj_graph_fail(g, "depth_from_disparity: need 0 < near < far, got near %g and far %g", r.near, r.far);
    float lo = 1.0f / r.far, hi = 1.0f / r.near;
    nj_tensor *one = nj_tensor_new(g, 1, 1, 1, 1, 0);
    if (!one) return NULL;
    one->data[0] = 1.0f;
    return nj_div(g, one, nj_affine(g, s, hi - lo, lo));
}

float nj_depth_from_disparity_value(float s, nj_depth_range r)
{
    float lo = 1.0f / r.far, hi = 1.0f / r.near;
    return 1.0f / (lo + (hi - lo) * s);
}

float nj_disparity_from_depth_value(float depth, nj_depth_range r)
{
    float lo = 1.0f / r.far, hi = 1.0f / r.near;
    return (1.0f / depth - lo) / (hi - lo);
}

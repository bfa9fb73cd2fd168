/* losses/free_space.c — the free-space hinge (losses/free_space.h), forward
 * and backward side by side.  Gradient check: tests/test_grad_losses.c;
 * against PyTorch autograd and OpenCV's rays: tests/test_losses_ref.c (mode
 * free_space of tests/ref/losses_ref.py); from a scene's own ground:
 * tests/test_recipe_options.c. */
#include "losses/free_space.h"

/* The bounded pixels' count and hinge sum; *viol the count beyond the bound. */
static double hinge_forward(const nj_tensor *d, float lo, float span, const float *bound, size_t *count,
                            size_t *viol)
{
    size_t n = nj_numel(d), k = 0, v = 0;
    double total = 0;
    for (size_t i = 0; i < n; i++) {
        if (!(bound[i] > 0)) continue;
        k++;
        double e = 1.0 - (lo + span * d->data[i]) / bound[i];
        if (e > 0) {
            total += e;
            v++;
        }
    }
    *count = k;
    *viol = v;
    return total;
}

static void hinge_backward(nj_graph *g, const nj_op *op)
{
    (void)g;
    nj_tensor *d = op->in[0];
    if (!d->grad || op->i[0] == 0) return;
    const float *bound = op->aux;
    float lo = op->f[0], span = op->f[1], k = (float)op->i[0], go = op->out->grad[0];
    size_t n = nj_numel(d);
    for (size_t i = 0; i < n; i++)
        if (bound[i] > 0 && lo + span * d->data[i] < bound[i]) d->grad[i] -= go * span / (bound[i] * k);
}

nj_tensor *nj_free_space_loss(nj_graph *g, nj_tensor *disp, nj_depth_range r, const float *bound,
                              float *violating)
{
    if (!disp || nj_graph_failed(g)) return NULL;
    if (disp->c != 1 || !bound) return nj_graph_fail(g, "free_space: need an N×1×H×W disparity and its bounds");
    if (!nj_depth_range_ok(r))
        return nj_graph_fail(g, "free_space: need 0 < near < far, got near %g and far %g", r.near, r.far);
    float lo = 1.0f / r.far, span = 1.0f / r.near - lo;
    nj_tensor *in[1] = {disp};
    nj_tensor *out = nj_op_output(g, 1, 1, 1, 1, in, 1);
    if (!out) return NULL;
    size_t k, v;
    double total = hinge_forward(disp, lo, span, bound, &k, &v);
    out->data[0] = k ? (float)(total / (double)k) : 0.0f;
    if (violating) *violating = k ? (float)v / (float)k : 0.0f;
    nj_op *op = nj_graph_record(g, "free_space", hinge_backward, out, in, 1);
    if (op) {
        op->f[0] = lo;
        op->f[1] = span;
        op->i[0] = (int)k;
        op->aux = (void *)bound;
    }
    return out;
}

void nj_ground_bound(const double n[3], double dist, nj_camera cam, int w, int h, float margin, float reach,
                     float *rays, float *bound)
{
    size_t k = (size_t)w * h;
    float *rx = rays, *ry = rays + k;
    nj_camera_rays(cam, w, h, rx, ry);
    for (size_t p = 0; p < k; p++) {
        double nd = n[0] * rx[p] + n[1] * ry[p] + n[2];
        bound[p] = dist > 0 && nd > 0 && nd * reach >= 1.0 ? (float)(nd / (dist * (1.0 + margin))) : 0.0f;
    }
}

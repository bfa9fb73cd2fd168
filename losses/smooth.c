/* losses/smooth.c — edge-aware smoothness: fused difference/weight kernel on
 * the mean-normalised disparity (normalisation via graph ops). */
#include "losses/smooth.h"
#include "nn/ops.h"
#include <math.h>

/* exp(−mean_c |I(p) − I(q)|) for pixels p, q of sample n. */
static float edge_weight(const nj_tensor *img, int n, size_t p, size_t q)
{
    size_t plane = (size_t)img->h * img->w;
    const float *base = img->data + (size_t)n * img->c * plane;
    float s = 0;
    for (int c = 0; c < img->c; c++) s += fabsf(base[c * plane + p] - base[c * plane + q]);
    return expf(-s / (float)img->c);
}

static float sgn(float x) { return (float)((x > 0) - (x < 0)); }

/* |d(p) − d(q)|·w(p, q) summed over horizontal and vertical neighbours, each
 * direction divided by its number of differences. */
static double smooth_forward(const nj_tensor *d, const nj_tensor *img)
{
    int N = d->n, H = d->h, W = d->w;
    size_t plane = (size_t)H * W;
    double nx = (double)N * H * (W - 1), ny = (double)N * (H - 1) * W, total = 0;
    #pragma omp parallel for collapse(2) reduction(+ : total) schedule(static)
    for (int n = 0; n < N; n++)
        for (int v = 0; v < H; v++) {
            const float *dr = d->data + n * plane;
            for (int u = 0; u < W; u++) {
                size_t p = (size_t)v * W + u;
                if (u + 1 < W) total += fabsf(dr[p + 1] - dr[p]) * edge_weight(img, n, p, p + 1) / nx;
                if (v + 1 < H) total += fabsf(dr[p + W] - dr[p]) * edge_weight(img, n, p, p + W) / ny;
            }
        }
    return total;
}

/* Gradient of one difference term |d(q) − d(p)|·w with respect to d(p). */
static float term_grad(const float *dr, const nj_tensor *img, int n, size_t p, size_t q)
{
    return -sgn(dr[q] - dr[p]) * edge_weight(img, n, p, q);
}

/* Gather form: each pixel sums the terms it takes part in, so no writes race. */
static void smooth_backward(const nj_tensor *d, const nj_tensor *img, float *gd, float go)
{
    int N = d->n, H = d->h, W = d->w;
    size_t plane = (size_t)H * W;
    float kx = W > 1 ? (float)(go / ((double)N * H * (W - 1))) : 0;
    float ky = H > 1 ? (float)(go / ((double)N * (H - 1) * W)) : 0;
    #pragma omp parallel for collapse(2) schedule(static)
    for (int n = 0; n < N; n++)
        for (int v = 0; v < H; v++) {
            const float *dr = d->data + n * plane;
            for (int u = 0; u < W; u++) {
                size_t p = (size_t)v * W + u;
                float gx = 0, gy = 0;
                if (u + 1 < W) gx += term_grad(dr, img, n, p, p + 1);
                if (u > 0) gx += term_grad(dr, img, n, p, p - 1);
                if (v + 1 < H) gy += term_grad(dr, img, n, p, p + W);
                if (v > 0) gy += term_grad(dr, img, n, p, p - W);
                gd[n * plane + p] += kx * gx + ky * gy;
            }
        }
}

static void edge_backward(nj_graph *g, const nj_op *op)
{
    (void)g;
    if (op->in[0]->grad) smooth_backward(op->in[0], op->in[1], op->in[0]->grad, op->out->grad[0]);
}

/* The fused part: L on an already normalised disparity. */
static nj_tensor *edge_term(nj_graph *g, nj_tensor *dn, nj_tensor *img)
{
    nj_tensor *in[2] = {dn, img};
    nj_tensor *out = nj_op_output(g, 1, 1, 1, 1, in, 1);
    if (!out) return NULL;
    out->data[0] = (float)smooth_forward(dn, img);
    nj_graph_record(g, "edge_smoothness", edge_backward, out, in, 2);
    return out;
}

nj_tensor *nj_edge_smoothness(nj_graph *g, nj_tensor *disp, nj_tensor *img)
{
    if (!disp || !img || nj_graph_failed(g)) return NULL;
    if (disp->c != 1 || disp->n != img->n || disp->h != img->h || disp->w != img->w)
        return nj_graph_fail(g, "edge_smoothness: disparity %dx%dx%dx%d does not match image %dx%dx%dx%d",
                             disp->n, disp->c, disp->h, disp->w, img->n, img->c, img->h, img->w);
    nj_tensor *mean = nj_mean(g, disp, NJ_AXIS_H | NJ_AXIS_W);
    nj_tensor *dn = nj_div(g, disp, nj_affine(g, mean, 1.0f, 1e-7f));
    return edge_term(g, dn, img);
}

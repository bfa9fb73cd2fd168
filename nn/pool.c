/* nn/pool.c — average pooling: 3×3 window with stride 1 and no padding (the
 * local means of SSIM-style losses), and the global mean over H×W. */
#include "nn/ops.h"

#define PAR_ELEMS 32768

static void avgpool3_backward(nj_graph *g, const nj_op *op)
{
    (void)g;
    const nj_tensor *x = op->in[0], *y = op->out;
    if (!x->grad) return;
    int planes = x->n * x->c, w = x->w, oh = y->h, ow = y->w;
    #pragma omp parallel for if (nj_numel(x) > PAR_ELEMS)
    for (int p = 0; p < planes; p++) {
        const float *dy = y->grad + (size_t)p * oh * ow;
        float *dx = x->grad + (size_t)p * x->h * w;
        for (int i = 0; i < oh; i++)
            for (int j = 0; j < ow; j++) {
                float v = dy[i * ow + j] * (1.0f / 9.0f);
                for (int a = 0; a < 3; a++) {
                    float *r = dx + (size_t)(i + a) * w + j;
                    r[0] += v; r[1] += v; r[2] += v;
                }
            }
    }
}

nj_tensor *nj_avgpool3(nj_graph *g, nj_tensor *x)
{
    if (!x || nj_graph_failed(g)) return NULL;
    if (x->h < 3 || x->w < 3)
        return nj_graph_fail(g, "avgpool3: x %dx%dx%dx%d is smaller than the 3x3 window",
                             x->n, x->c, x->h, x->w);
    nj_tensor *in[1] = {x};
    nj_tensor *y = nj_op_output(g, x->n, x->c, x->h - 2, x->w - 2, in, 1);
    if (!y) return NULL;
    int planes = x->n * x->c, w = x->w, oh = y->h, ow = y->w;
    #pragma omp parallel for if (nj_numel(x) > PAR_ELEMS)
    for (int p = 0; p < planes; p++) {
        const float *src = x->data + (size_t)p * x->h * w;
        float *dst = y->data + (size_t)p * oh * ow;
        for (int i = 0; i < oh; i++)
            for (int j = 0; j < ow; j++) {
                float s = 0;
                for (int a = 0; a < 3; a++) {
                    const float *r = src + (size_t)(i + a) * w + j;
                    s += r[0] + r[1] + r[2];
                }
                dst[i * ow + j] = s * (1.0f / 9.0f);
            }
    }
    nj_graph_record(g, "avgpool3", avgpool3_backward, y, in, 1);
    return y;
}

static void global_avgpool_backward(nj_graph *g, const nj_op *op)
{
    (void)g;
    const nj_tensor *x = op->in[0], *y = op->out;
    if (!x->grad) return;
    size_t hw = (size_t)x->h * x->w;
    int planes = x->n * x->c;
    #pragma omp parallel for if (nj_numel(x) > PAR_ELEMS)
    for (int p = 0; p < planes; p++) {
        float v = y->grad[p] / (float)hw, *dx = x->grad + (size_t)p * hw;
        for (size_t i = 0; i < hw; i++) dx[i] += v;
    }
}

nj_tensor *nj_global_avgpool(nj_graph *g, nj_tensor *x)
{
    if (!x || nj_graph_failed(g)) return NULL;
    nj_tensor *in[1] = {x};
    nj_tensor *y = nj_op_output(g, x->n, x->c, 1, 1, in, 1);
    if (!y) return NULL;
    size_t hw = (size_t)x->h * x->w;
    int planes = x->n * x->c;
    #pragma omp parallel for if (nj_numel(x) > PAR_ELEMS)
    for (int p = 0; p < planes; p++) {
        const float *src = x->data + (size_t)p * hw;
        double s = 0;
        for (size_t i = 0; i < hw; i++) s += src[i];
        y->data[p] = (float)(s / (double)hw);
    }
    nj_graph_record(g, "global_avgpool", global_avgpool_backward, y, in, 1);
    return y;
}

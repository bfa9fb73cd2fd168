/* nn/upsample.c — nearest-neighbour ×2 upsampling: every input pixel becomes a
 * 2×2 block; the backward sums each block's gradient. */
#include "nn/ops.h"

#define PAR_ELEMS 32768

static void upsample2_backward(nj_graph *g, const nj_op *op)
{
    (void)g;
    const nj_tensor *x = op->in[0], *y = op->out;
    if (!x->grad) return;
    int planes = x->n * x->c, h = x->h, w = x->w, ow = y->w;
    #pragma omp parallel for if (nj_numel(y) > PAR_ELEMS)
    for (int p = 0; p < planes; p++) {
        const float *dy = y->grad + (size_t)p * y->h * ow;
        float *dx = x->grad + (size_t)p * h * w;
        for (int i = 0; i < h; i++) {
            const float *r0 = dy + (size_t)(2 * i) * ow, *r1 = r0 + ow;
            for (int j = 0; j < w; j++)
                dx[i * w + j] += r0[2 * j] + r0[2 * j + 1] + r1[2 * j] + r1[2 * j + 1];
        }
    }
}

nj_tensor *nj_upsample2(nj_graph *g, nj_tensor *x)
{
    if (!x || nj_graph_failed(g)) return NULL;
    nj_tensor *in[1] = {x};
    nj_tensor *y = nj_op_output(g, x->n, x->c, 2 * x->h, 2 * x->w, in, 1);
    if (!y) return NULL;
    int planes = x->n * x->c, h = x->h, w = x->w, ow = y->w;
    #pragma omp parallel for if (nj_numel(y) > PAR_ELEMS)
    for (int p = 0; p < planes; p++) {
        const float *src = x->data + (size_t)p * h * w;
        float *dst = y->data + (size_t)p * y->h * ow;
        for (int i = 0; i < h; i++) {
            float *r0 = dst + (size_t)(2 * i) * ow, *r1 = r0 + ow;
            for (int j = 0; j < w; j++) {
                float v = src[i * w + j];
                r0[2 * j] = r0[2 * j + 1] = r1[2 * j] = r1[2 * j + 1] = v;
            }
        }
    }
    nj_graph_record(g, "upsample2", upsample2_backward, y, in, 1);
    return y;
}

/* nn/slice.c — channels [c0, c0+count) of a tensor; the backward adds the
 * gradient back into those channels. */
#include "nn/ops.h"
#include <string.h>

static void slice_backward(nj_graph *g, const nj_op *op)
{
    (void)g;
    const nj_tensor *x = op->in[0], *y = op->out;
    if (!x->grad) return;
    size_t hw = (size_t)x->h * x->w, len = (size_t)y->c * hw;
    int c0 = op->i[0];
    #pragma omp parallel for if (nj_numel(y) > 65536)
    for (int n = 0; n < x->n; n++) {
        float *dx = x->grad + ((size_t)n * x->c + (size_t)c0) * hw;
        const float *dy = y->grad + (size_t)n * len;
        for (size_t i = 0; i < len; i++) dx[i] += dy[i];
    }
}

nj_tensor *nj_slice_channels(nj_graph *g, nj_tensor *x, int c0, int count)
{
    if (!x || nj_graph_failed(g)) return NULL;
    if (c0 < 0 || count < 1 || c0 > x->c - count)
        return nj_graph_fail(g, "slice_channels: channels [%d, %d) out of range for x %dx%dx%dx%d",
                             c0, c0 + count, x->n, x->c, x->h, x->w);
    nj_tensor *in[1] = {x};
    nj_tensor *y = nj_op_output(g, x->n, count, x->h, x->w, in, 1);
    if (!y) return NULL;
    size_t hw = (size_t)x->h * x->w, len = (size_t)count * hw;
    for (int n = 0; n < x->n; n++)
        memcpy(y->data + (size_t)n * len, x->data + ((size_t)n * x->c + (size_t)c0) * hw,
               len * sizeof(float));
    nj_op *op = nj_graph_record(g, "slice_channels", slice_backward, y, in, 1);
    if (op) op->i[0] = c0;
    return y;
}

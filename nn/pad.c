/* nn/pad.c — reflection padding by p on all four sides (the edge pixel is not
 * repeated, as in PyTorch's ReflectionPad2d); the backward folds the border's
 * gradient back onto the pixels it was copied from. */
#include "nn/ops.h"

static inline int reflect_index(int i, int n)
{
    return i < 0 ? -i : (i >= n ? 2 * (n - 1) - i : i);
}

static void reflect_pad_backward(nj_graph *g, const nj_op *op)
{
    (void)g;
    const nj_tensor *x = op->in[0], *y = op->out;
    if (!x->grad) return;
    int p = op->i[0], planes = x->n * x->c;
    #pragma omp parallel for if (nj_numel(y) > 32768)
    for (int q = 0; q < planes; q++) {
        const float *dy = y->grad + (size_t)q * y->h * y->w;
        float *dx = x->grad + (size_t)q * x->h * x->w;
        for (int i = 0; i < y->h; i++) {
            float *row = dx + (size_t)reflect_index(i - p, x->h) * x->w;
            for (int j = 0; j < y->w; j++) row[reflect_index(j - p, x->w)] += dy[(size_t)i * y->w + j];
        }
    }
}

nj_tensor *nj_reflect_pad(nj_graph *g, nj_tensor *x, int p)
{
    if (!x || nj_graph_failed(g)) return NULL;
    if (p < 0 || p >= x->h || p >= x->w)
        return nj_graph_fail(g, "reflect_pad: pad %d needs 0 <= pad < H and < W for x %dx%dx%dx%d",
                             p, x->n, x->c, x->h, x->w);
    nj_tensor *in[1] = {x};
    nj_tensor *y = nj_op_output(g, x->n, x->c, x->h + 2 * p, x->w + 2 * p, in, 1);
    if (!y) return NULL;
    int planes = x->n * x->c;
    #pragma omp parallel for if (nj_numel(y) > 32768)
    for (int q = 0; q < planes; q++) {
        const float *src = x->data + (size_t)q * x->h * x->w;
        float *dst = y->data + (size_t)q * y->h * y->w;
        for (int i = 0; i < y->h; i++) {
            const float *row = src + (size_t)reflect_index(i - p, x->h) * x->w;
            for (int j = 0; j < y->w; j++) dst[(size_t)i * y->w + j] = row[reflect_index(j - p, x->w)];
        }
    }
    nj_op *op = nj_graph_record(g, "reflect_pad", reflect_pad_backward, y, in, 1);
    if (op) op->i[0] = p;
    return y;
}

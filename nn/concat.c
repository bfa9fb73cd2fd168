/* nn/concat.c — channel concatenation [a; b] of two tensors with equal N, H, W;
 * the backward hands each input its block of channels. */
#include "nn/ops.h"
#include <string.h>

/* dst planes of one sample: [a's channels | b's channels]. */
static void concat_backward(nj_graph *g, const nj_op *op)
{
    (void)g;
    const nj_tensor *a = op->in[0], *b = op->in[1], *y = op->out;
    size_t hw = (size_t)y->h * y->w, na = (size_t)a->c * hw, nb = (size_t)b->c * hw;
    #pragma omp parallel for if (nj_numel(y) > 65536)
    for (int n = 0; n < y->n; n++) {
        const float *dy = y->grad + (size_t)n * (na + nb);
        if (a->grad) {
            float *da = a->grad + (size_t)n * na;
            for (size_t i = 0; i < na; i++) da[i] += dy[i];
        }
        if (b->grad) {
            float *db = b->grad + (size_t)n * nb;
            for (size_t i = 0; i < nb; i++) db[i] += dy[na + i];
        }
    }
}

nj_tensor *nj_concat(nj_graph *g, nj_tensor *a, nj_tensor *b)
{
    if (!a || !b || nj_graph_failed(g)) return NULL;
    if (a->n != b->n || a->h != b->h || a->w != b->w)
        return nj_graph_fail(g, "concat: a %dx%dx%dx%d and b %dx%dx%dx%d differ in N, H or W",
                             a->n, a->c, a->h, a->w, b->n, b->c, b->h, b->w);
    nj_tensor *in[2] = {a, b};
    nj_tensor *y = nj_op_output(g, a->n, a->c + b->c, a->h, a->w, in, 2);
    if (!y) return NULL;
    size_t hw = (size_t)a->h * a->w, na = (size_t)a->c * hw, nb = (size_t)b->c * hw;
    #pragma omp parallel for schedule(static) if (nj_numel(y) > 65536)
    for (int k = 0; k < 2 * a->n; k++) {
        int n = k / 2;
        float *dst = y->data + (size_t)n * (na + nb);
        if (k % 2 == 0) memcpy(dst, a->data + (size_t)n * na, na * sizeof(float));
        else memcpy(dst + na, b->data + (size_t)n * nb, nb * sizeof(float));
    }
    nj_graph_record(g, "concat", concat_backward, y, in, 2);
    return y;
}

/* nn/tensor.h — the one tensor type of nightjar.
 *
 * A tensor is float32, 4-D, NCHW (batch, channels, height, width), dense and
 * C-ordered: element (n,c,y,x) lives at ((n*C + c)*H + y)*W + x.  Lower-rank
 * values use size-1 dimensions (a scalar is 1x1x1x1, a per-channel vector is
 * 1xCx1x1).  `grad` is NULL when no gradient flows to the tensor; otherwise it
 * has the same shape as `data` and backward passes accumulate into it.
 * `grad_lazy` is 1 while a graph-allocated grad buffer is still unwritten: the
 * graph zeroes it just before the first backward that touches it (nn/graph.h).
 */
#ifndef NJ_TENSOR_H
#define NJ_TENSOR_H
#include <stddef.h>

typedef struct nj_tensor {
    int n, c, h, w;
    float *data;
    float *grad;
    int grad_lazy;
} nj_tensor;

static inline size_t nj_numel(const nj_tensor *t)
{
    return (size_t)t->n * (size_t)t->c * (size_t)t->h * (size_t)t->w;
}

static inline int nj_same_shape(const nj_tensor *a, const nj_tensor *b)
{
    return a->n == b->n && a->c == b->c && a->h == b->h && a->w == b->w;
}

#endif

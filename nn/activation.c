/* nn/activation.c — pointwise nonlinearities: ReLU, ELU (Clevert et al. 2016,
 * alpha = 1) and the logistic sigmoid, each with its backward pass.
 * Backwards read the saved output where that is enough (ELU, sigmoid) and the
 * input otherwise (ReLU), and accumulate into the input gradient. */
#include "nn/ops.h"
#include "nn/elu.h"
#include <math.h>

/* Below this many elements a loop runs on one thread. */
enum { PAR_MIN = 1 << 14 };

static void relu_backward(nj_graph *g, const nj_op *op)
{
    (void)g;
    const nj_tensor *x = op->in[0], *y = op->out;
    if (!x->grad) return;
    const float *xd = x->data, *gy = y->grad;
    float *gx = x->grad;
    long n = (long)nj_numel(x);
    #pragma omp parallel for schedule(static) if (n > PAR_MIN)
    for (long i = 0; i < n; i++)
        gx[i] += xd[i] > 0.0f ? gy[i] : 0.0f;
}

nj_tensor *nj_relu(nj_graph *g, nj_tensor *x)
{
    if (!x || nj_graph_failed(g)) return NULL;
    nj_tensor *in[1] = {x};
    nj_tensor *y = nj_op_output(g, x->n, x->c, x->h, x->w, in, 1);
    if (!y) return NULL;
    const float *xd = x->data;
    float *yd = y->data;
    long n = (long)nj_numel(x);
    #pragma omp parallel for schedule(static) if (n > PAR_MIN)
    for (long i = 0; i < n; i++)
        yd[i] = xd[i] > 0.0f ? xd[i] : 0.0f;
    nj_graph_record(g, "relu", relu_backward, y, in, 1);
    return y;
}

/* d elu/dx = 1 for x > 0, exp(x) = y + 1 otherwise. */
static void elu_backward(nj_graph *g, const nj_op *op)
{
    (void)g;
    const nj_tensor *x = op->in[0], *y = op->out;
    if (!x->grad) return;
    const float *xd = x->data, *yd = y->data, *gy = y->grad;
    float *gx = x->grad;
    long n = (long)nj_numel(x);
    #pragma omp parallel for simd schedule(static) if (n > PAR_MIN)
    for (long i = 0; i < n; i++)
        gx[i] += xd[i] > 0.0f ? gy[i] : gy[i] * (yd[i] + 1.0f);
}

nj_tensor *nj_elu(nj_graph *g, nj_tensor *x)
{
    if (!x || nj_graph_failed(g)) return NULL;
    nj_tensor *in[1] = {x};
    nj_tensor *y = nj_op_output(g, x->n, x->c, x->h, x->w, in, 1);
    if (!y) return NULL;
    const float *xd = x->data;
    float *yd = y->data;
    long n = (long)nj_numel(x);
    #pragma omp parallel for simd schedule(static) if (n > PAR_MIN)
    for (long i = 0; i < n; i++)
        yd[i] = nj_elu_value(xd[i]);
    nj_graph_record(g, "elu", elu_backward, y, in, 1);
    return y;
}

/* d sigmoid/dx = y (1 - y). */
static void sigmoid_backward(nj_graph *g, const nj_op *op)
{
    (void)g;
    const nj_tensor *x = op->in[0], *y = op->out;
    if (!x->grad) return;
    const float *yd = y->data, *gy = y->grad;
    float *gx = x->grad;
    long n = (long)nj_numel(x);
    #pragma omp parallel for schedule(static) if (n > PAR_MIN)
    for (long i = 0; i < n; i++)
        gx[i] += gy[i] * yd[i] * (1.0f - yd[i]);
}

/* exp is only ever taken of a non-positive number, so it cannot overflow
 * and large negative inputs give tiny positive results rather than NaN. */
static inline float stable_sigmoid(float x)
{
    if (x >= 0.0f) return 1.0f / (1.0f + expf(-x));
    float e = expf(x);
    return e / (1.0f + e);
}

nj_tensor *nj_sigmoid(nj_graph *g, nj_tensor *x)
{
    if (!x || nj_graph_failed(g)) return NULL;
    nj_tensor *in[1] = {x};
    nj_tensor *y = nj_op_output(g, x->n, x->c, x->h, x->w, in, 1);
    if (!y) return NULL;
    const float *xd = x->data;
    float *yd = y->data;
    long n = (long)nj_numel(x);
    #pragma omp parallel for schedule(static) if (n > PAR_MIN)
    for (long i = 0; i < n; i++)
        yd[i] = stable_sigmoid(xd[i]);
    nj_graph_record(g, "sigmoid", sigmoid_backward, y, in, 1);
    return y;
}

/* nn/unary.c — pointwise math: exp, log, |x|, sqrt, clamp and s*x + t, each
 * with its backward pass (accumulating into the input gradient).  Domain
 * errors follow IEEE/PyTorch behaviour: log of a non-positive number gives
 * -inf or NaN, sqrt(0) has an infinite derivative. */
#include "nn/ops.h"
#include <math.h>

/* Below this many elements a loop runs on one thread. */
enum { PAR_MIN = 1 << 14 };

/* Output of the same shape as x, or NULL. */
static nj_tensor *like(nj_graph *g, nj_tensor *x, nj_tensor **in)
{
    in[0] = x;
    return nj_op_output(g, x->n, x->c, x->h, x->w, in, 1);
}

/* ---- exp: d/dx = y ---------------------------------------------------- */
static void exp_backward(nj_graph *g, const nj_op *op)
{
    (void)g;
    const nj_tensor *x = op->in[0], *y = op->out;
    if (!x->grad) return;
    const float *yd = y->data, *gy = y->grad;
    float *gx = x->grad;
    long n = (long)nj_numel(x);
    #pragma omp parallel for schedule(static) if (n > PAR_MIN)
    for (long i = 0; i < n; i++) gx[i] += gy[i] * yd[i];
}

nj_tensor *nj_exp(nj_graph *g, nj_tensor *x)
{
    if (!x || nj_graph_failed(g)) return NULL;
    nj_tensor *in[1];
    nj_tensor *y = like(g, x, in);
    if (!y) return NULL;
    const float *xd = x->data;
    float *yd = y->data;
    long n = (long)nj_numel(x);
    #pragma omp parallel for schedule(static) if (n > PAR_MIN)
    for (long i = 0; i < n; i++) yd[i] = expf(xd[i]);
    nj_graph_record(g, "exp", exp_backward, y, in, 1);
    return y;
}

/* ---- log: d/dx = 1/x -------------------------------------------------- */
static void log_backward(nj_graph *g, const nj_op *op)
{
    (void)g;
    const nj_tensor *x = op->in[0], *y = op->out;
    if (!x->grad) return;
    const float *xd = x->data, *gy = y->grad;
    float *gx = x->grad;
    long n = (long)nj_numel(x);
    #pragma omp parallel for schedule(static) if (n > PAR_MIN)
    for (long i = 0; i < n; i++) gx[i] += gy[i] / xd[i];
}

nj_tensor *nj_log(nj_graph *g, nj_tensor *x)
{
    if (!x || nj_graph_failed(g)) return NULL;
    nj_tensor *in[1];
    nj_tensor *y = like(g, x, in);
    if (!y) return NULL;
    const float *xd = x->data;
    float *yd = y->data;
    long n = (long)nj_numel(x);
    #pragma omp parallel for schedule(static) if (n > PAR_MIN)
    for (long i = 0; i < n; i++) yd[i] = logf(xd[i]);
    nj_graph_record(g, "log", log_backward, y, in, 1);
    return y;
}

/* ---- abs: d/dx = sign(x), 0 at 0 -------------------------------------- */
static void abs_backward(nj_graph *g, const nj_op *op)
{
    (void)g;
    const nj_tensor *x = op->in[0], *y = op->out;
    if (!x->grad) return;
    const float *xd = x->data, *gy = y->grad;
    float *gx = x->grad;
    long n = (long)nj_numel(x);
    #pragma omp parallel for schedule(static) if (n > PAR_MIN)
    for (long i = 0; i < n; i++)
        gx[i] += xd[i] > 0.0f ? gy[i] : (xd[i] < 0.0f ? -gy[i] : 0.0f);
}

nj_tensor *nj_abs(nj_graph *g, nj_tensor *x)
{
    if (!x || nj_graph_failed(g)) return NULL;
    nj_tensor *in[1];
    nj_tensor *y = like(g, x, in);
    if (!y) return NULL;
    const float *xd = x->data;
    float *yd = y->data;
    long n = (long)nj_numel(x);
    #pragma omp parallel for schedule(static) if (n > PAR_MIN)
    for (long i = 0; i < n; i++) yd[i] = fabsf(xd[i]);
    nj_graph_record(g, "abs", abs_backward, y, in, 1);
    return y;
}

/* ---- sqrt: d/dx = 1 / (2 y) ------------------------------------------- */
static void sqrt_backward(nj_graph *g, const nj_op *op)
{
    (void)g;
    const nj_tensor *x = op->in[0], *y = op->out;
    if (!x->grad) return;
    const float *yd = y->data, *gy = y->grad;
    float *gx = x->grad;
    long n = (long)nj_numel(x);
    #pragma omp parallel for schedule(static) if (n > PAR_MIN)
    for (long i = 0; i < n; i++) gx[i] += gy[i] * 0.5f / yd[i];
}

nj_tensor *nj_sqrt(nj_graph *g, nj_tensor *x)
{
    if (!x || nj_graph_failed(g)) return NULL;
    nj_tensor *in[1];
    nj_tensor *y = like(g, x, in);
    if (!y) return NULL;
    const float *xd = x->data;
    float *yd = y->data;
    long n = (long)nj_numel(x);
    #pragma omp parallel for schedule(static) if (n > PAR_MIN)
    for (long i = 0; i < n; i++) yd[i] = sqrtf(xd[i]);
    nj_graph_record(g, "sqrt", sqrt_backward, y, in, 1);
    return y;
}

/* ---- clamp: gradient passes where lo <= x <= hi ----------------------- */
static void clamp_backward(nj_graph *g, const nj_op *op)
{
    (void)g;
    const nj_tensor *x = op->in[0], *y = op->out;
    if (!x->grad) return;
    const float *xd = x->data, *gy = y->grad;
    const float lo = op->f[0], hi = op->f[1];
    float *gx = x->grad;
    long n = (long)nj_numel(x);
    #pragma omp parallel for schedule(static) if (n > PAR_MIN)
    for (long i = 0; i < n; i++)
        gx[i] += (xd[i] >= lo && xd[i] <= hi) ? gy[i] : 0.0f;
}

nj_tensor *nj_clamp(nj_graph *g, nj_tensor *x, float lo, float hi)
{
    if (!x || nj_graph_failed(g)) return NULL;
    if (!(lo <= hi))
        return nj_graph_fail(g, "clamp: lower bound %g exceeds upper bound %g", lo, hi);
    nj_tensor *in[1];
    nj_tensor *y = like(g, x, in);
    if (!y) return NULL;
    const float *xd = x->data;
    float *yd = y->data;
    long n = (long)nj_numel(x);
    #pragma omp parallel for schedule(static) if (n > PAR_MIN)
    for (long i = 0; i < n; i++)
        yd[i] = xd[i] < lo ? lo : (xd[i] > hi ? hi : xd[i]);
    nj_op *op = nj_graph_record(g, "clamp", clamp_backward, y, in, 1);
    if (op) { op->f[0] = lo; op->f[1] = hi; }
    return y;
}

/* ---- affine: s*x + t, d/dx = s ---------------------------------------- */
static void affine_backward(nj_graph *g, const nj_op *op)
{
    (void)g;
    const nj_tensor *x = op->in[0], *y = op->out;
    if (!x->grad) return;
    const float *gy = y->grad;
    const float s = op->f[0];
    float *gx = x->grad;
    long n = (long)nj_numel(x);
    #pragma omp parallel for schedule(static) if (n > PAR_MIN)
    for (long i = 0; i < n; i++) gx[i] += s * gy[i];
}

nj_tensor *nj_affine(nj_graph *g, nj_tensor *x, float s, float t)
{
    if (!x || nj_graph_failed(g)) return NULL;
    nj_tensor *in[1];
    nj_tensor *y = like(g, x, in);
    if (!y) return NULL;
    const float *xd = x->data;
    float *yd = y->data;
    long n = (long)nj_numel(x);
    #pragma omp parallel for schedule(static) if (n > PAR_MIN)
    for (long i = 0; i < n; i++) yd[i] = s * xd[i] + t;
    nj_op *op = nj_graph_record(g, "affine", affine_backward, y, in, 1);
    if (op) op->f[0] = s;
    return y;
}

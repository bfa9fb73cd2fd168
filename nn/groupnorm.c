/* nn/groupnorm.c — group normalisation (Wu & He 2018): the channels are split
 * into `groups` equal groups; each (sample, group) is normalised with its own
 * mean and biased variance over its channels and pixels, then scaled and
 * shifted per channel by gamma and beta.  The backward pass computes dx per
 * (sample, group) and the gamma/beta gradients per channel in a separate
 * loop, so every thread writes only elements it owns. */
#include "nn/ops.h"
#include <math.h>

/* Below this many elements a loop runs on one thread. */
enum { PAR_MIN = 1 << 14 };

/* Mean and 1/sqrt(var + eps) of `len` contiguous values (two passes, double). */
static void group_stats(const float *p, size_t len, float eps, float *mean, float *invstd)
{
    double s = 0, q = 0;
    for (size_t i = 0; i < len; i++) s += p[i];
    const double mu = s / (double)len;
    for (size_t i = 0; i < len; i++) q += (p[i] - mu) * (p[i] - mu);
    *mean = (float)mu;
    *invstd = (float)(1.0 / sqrt(q / (double)len + eps));
}

/* Normalises group q (= n * groups + group) into y. */
static void group_forward(const nj_tensor *x, const nj_tensor *gamma, const nj_tensor *beta,
                          nj_tensor *y, int groups, int q, const float *stats)
{
    const int cpg = x->c / groups, c0 = q % groups * cpg;
    const size_t hw = (size_t)x->h * x->w;
    const size_t base = ((size_t)(q / groups) * x->c + c0) * hw;
    const float mean = stats[2 * q], invstd = stats[2 * q + 1];
    for (int j = 0; j < cpg; j++) {
        const float alpha = gamma->data[c0 + j] * invstd;
        const float shift = beta->data[c0 + j] - mean * alpha;
        const float *p = x->data + base + (size_t)j * hw;
        float *o = y->data + base + (size_t)j * hw;
        for (size_t i = 0; i < hw; i++) o[i] = p[i] * alpha + shift;
    }
}

/* dx for group q: with g = gy * gamma and xhat the normalised input,
 * dx = invstd * (g - mean(g) - xhat * mean(g * xhat)). */
static void group_backward_x(const nj_op *op, int q)
{
    const nj_tensor *x = op->in[0], *gamma = op->in[1], *y = op->out;
    const float *stats = op->aux;
    const int groups = op->i[0], cpg = x->c / groups, c0 = q % groups * cpg;
    const size_t hw = (size_t)x->h * x->w;
    const size_t base = ((size_t)(q / groups) * x->c + c0) * hw;
    const float mean = stats[2 * q], invstd = stats[2 * q + 1];
    double sg = 0, sgx = 0;
    for (int j = 0; j < cpg; j++) {
        const float gm = gamma->data[c0 + j];
        const float *p = x->data + base + (size_t)j * hw, *gy = y->grad + base + (size_t)j * hw;
        for (size_t i = 0; i < hw; i++) {
            const float gi = gy[i] * gm;
            sg += gi;
            sgx += gi * ((p[i] - mean) * invstd);
        }
    }
    const double m = (double)cpg * (double)hw;
    const float mg = (float)(sg / m), mgx = (float)(sgx / m);
    for (int j = 0; j < cpg; j++) {
        const float gm = gamma->data[c0 + j];
        const size_t off = base + (size_t)j * hw;
        const float *p = x->data + off, *gy = y->grad + off;
        float *gx = x->grad + off;
        for (size_t i = 0; i < hw; i++)
            gx[i] += invstd * (gy[i] * gm - mg - (p[i] - mean) * invstd * mgx);
    }
}

/* gamma and beta gradients of channel c, summed over samples and pixels. */
static void channel_backward_affine(const nj_op *op, int c)
{
    const nj_tensor *x = op->in[0], *gamma = op->in[1], *beta = op->in[2], *y = op->out;
    const float *stats = op->aux;
    const int groups = op->i[0], grp = c / (x->c / groups);
    const size_t hw = (size_t)x->h * x->w;
    double sg = 0, sgx = 0;
    for (int n = 0; n < x->n; n++) {
        const int q = n * groups + grp;
        const float mean = stats[2 * q], invstd = stats[2 * q + 1];
        const size_t off = ((size_t)n * x->c + c) * hw;
        const float *p = x->data + off, *gy = y->grad + off;
        for (size_t i = 0; i < hw; i++) {
            sg += gy[i];
            sgx += gy[i] * ((p[i] - mean) * invstd);
        }
    }
    if (gamma->grad) gamma->grad[c] += (float)sgx;
    if (beta->grad) beta->grad[c] += (float)sg;
}

static void groupnorm_backward(nj_graph *g, const nj_op *op)
{
    (void)g;
    const nj_tensor *x = op->in[0], *gamma = op->in[1], *beta = op->in[2];
    const int nq = x->n * op->i[0];
    const long total = (long)nj_numel(x);
    if (x->grad) {
        #pragma omp parallel for schedule(static) if (total > PAR_MIN)
        for (int q = 0; q < nq; q++) group_backward_x(op, q);
    }
    if (gamma->grad || beta->grad) {
        #pragma omp parallel for schedule(static) if (total > PAR_MIN)
        for (int c = 0; c < x->c; c++) channel_backward_affine(op, c);
    }
}

static int is_channel_vector(const nj_tensor *t, int c)
{
    return t->n == 1 && t->c == c && t->h == 1 && t->w == 1;
}

nj_tensor *nj_groupnorm(nj_graph *g, nj_tensor *x, int groups,
                        nj_tensor *gamma, nj_tensor *beta, float eps)
{
    if (!x || !gamma || !beta || nj_graph_failed(g)) return NULL;
    if (groups < 1 || x->c % groups)
        return nj_graph_fail(g, "groupnorm: %d groups do not divide the %d channels of x %dx%dx%dx%d",
                             groups, x->c, x->n, x->c, x->h, x->w);
    if (!is_channel_vector(gamma, x->c) || !is_channel_vector(beta, x->c))
        return nj_graph_fail(g, "groupnorm: gamma %dx%dx%dx%d and beta %dx%dx%dx%d must be 1x%dx1x1 for x %dx%dx%dx%d",
                             gamma->n, gamma->c, gamma->h, gamma->w, beta->n, beta->c, beta->h,
                             beta->w, x->c, x->n, x->c, x->h, x->w);
    nj_tensor *in[3] = {x, gamma, beta};
    nj_tensor *y = nj_op_output(g, x->n, x->c, x->h, x->w, in, 3);
    const int nq = x->n * groups;
    float *stats = nj_graph_alloc(g, sizeof(float) * 2 * (size_t)nq); /* mean, invstd */
    if (!y || !stats) return NULL;
    const size_t len = (size_t)(x->c / groups) * x->h * x->w;
    #pragma omp parallel for schedule(static) if ((long)nj_numel(x) > PAR_MIN)
    for (int q = 0; q < nq; q++) {
        const int n = q / groups, grp = q % groups;
        const float *p = x->data + ((size_t)n * x->c + (size_t)grp * (x->c / groups)) * x->h * x->w;
        group_stats(p, len, eps, &stats[2 * q], &stats[2 * q + 1]);
        group_forward(x, gamma, beta, y, groups, q, stats);
    }
    nj_op *op = nj_graph_record(g, "groupnorm", groupnorm_backward, y, in, 3);
    if (op) { op->i[0] = groups; op->f[0] = eps; op->aux = stats; }
    return y;
}

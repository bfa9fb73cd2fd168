/* nn/batchnorm.c — batch normalisation (Ioffe & Szegedy 2015) over N, H, W per
 * channel, following torch.nn.BatchNorm2d: training mode normalises with the
 * batch mean and biased variance and updates the running statistics as
 * run = (1 - momentum) * run + momentum * stat with the unbiased variance;
 * inference mode normalises with the running statistics.  Both modes have a
 * full backward for x, gamma and beta.  Threads own whole channels, so the
 * per-channel reductions of forward and backward are race-free.  With
 * data-parallel replicas (nn/graph.h) training mode is synchronised batch
 * norm: statistics and the backward's per-channel means span every
 * process's share of the batch, so N processes on B/N items each compute
 * what one process computes on B items.
 * nj_batchnorm_elu() is ELU(batchnorm(x)) as one op: one output tensor instead
 * of two, the ELU's derivative taken from the output inside the batch-norm
 * backward (values bit-identical to the two separate ops).
 * nj_batchnorm_fold() merges an inference-mode batch norm into a conv. */
#include "nn/ops.h"
#include "nn/elu.h"
#include <math.h>

/* Below this many elements a loop runs on one thread. */
enum { PAR_MIN = 1 << 14 };

/* Σ p[i] and Σ (p[i] − mu)² over n elements, in double (vectorised: the
 * lanes hold partial sums, so the order differs from a serial loop only at
 * double rounding). */
static void row_sums(const float *p, size_t n, double mu, double *s, double *q)
{
    double a = 0, b = 0;
    #pragma omp simd reduction(+:a, b)
    for (size_t i = 0; i < n; i++) {
        const double d = (double)p[i] - mu;
        a += p[i];
        b += d * d;
    }
    *s += a;
    *q += b;
}

/* Mean and biased variance of channel c over N, H, W (two passes: the mean,
 * then squared deviations from it). */
static void channel_stats(const nj_tensor *x, int c, double *mean, double *var)
{
    const size_t hw = (size_t)x->h * x->w;
    double s = 0, q = 0, unused = 0;
    for (int n = 0; n < x->n; n++)
        row_sums(x->data + ((size_t)n * x->c + c) * hw, hw, 0.0, &s, &unused);
    const double m = (double)x->n * (double)hw, mu = s / m;
    double s2 = 0;
    for (int n = 0; n < x->n; n++)
        row_sums(x->data + ((size_t)n * x->c + c) * hw, hw, mu, &s2, &q);
    *mean = mu;
    *var = q / m;
}

/* y = x * alpha + shift (then ELU when elu) on channel c of every sample. */
static void channel_affine(const nj_tensor *x, nj_tensor *y, int c, float alpha, float shift, int elu)
{
    const size_t hw = (size_t)x->h * x->w;
    for (int n = 0; n < x->n; n++) {
        const size_t off = ((size_t)n * x->c + c) * hw;
        const float *p = x->data + off;
        float *q = y->data + off;
        if (elu) {
            #pragma omp simd
            for (size_t i = 0; i < hw; i++) q[i] = nj_elu_value(p[i] * alpha + shift);
        } else {
            for (size_t i = 0; i < hw; i++) q[i] = p[i] * alpha + shift;
        }
    }
}

/* Σ gz and Σ gz·xhat over n elements, gz = gy (through the ELU when elu), in
 * double (vectorised). */
static void grad_sums(const float *p, const float *yd, const float *gy, size_t n, int elu,
                      float mean, float invstd, double *sg, double *sgx)
{
    double a = 0, b = 0;
    if (elu) {
        #pragma omp simd reduction(+:a, b)
        for (size_t i = 0; i < n; i++) {
            const float gz = nj_elu_grad_from_output(yd[i], gy[i]);
            a += gz;
            b += gz * ((p[i] - mean) * invstd);
        }
    } else {
        #pragma omp simd reduction(+:a, b)
        for (size_t i = 0; i < n; i++) {
            a += gy[i];
            b += gy[i] * ((p[i] - mean) * invstd);
        }
    }
    *sg += a;
    *sgx += b;
}

/* Per channel: sums of gy and gy * xhat over this process's batch. */
static void channel_sums(const nj_op *op, int c, double *sg_out, double *sgx_out)
{
    const nj_tensor *x = op->in[0];
    const float *stats = op->aux;
    const float mean = stats[c], invstd = stats[x->c + c];
    const size_t hw = (size_t)x->h * x->w;
    double sg = 0, sgx = 0;
    for (int n = 0; n < x->n; n++) {
        const size_t off = ((size_t)n * x->c + c) * hw;
        grad_sums(x->data + off, op->out->data + off, op->out->grad + off, hw, op->i[1], mean,
                  invstd, &sg, &sgx);
    }
    *sg_out = sg;
    *sgx_out = sgx;
}

/* gamma/beta grads from the local sums; when x needs it,
 * dx = gamma * invstd * (gy - [training] (mg + xhat * mgx)) with mg, mgx the
 * means of gy and gy * xhat over the whole (possibly distributed) batch. */
static void channel_apply(const nj_op *op, int c, double sg, double sgx, float mg, float mgx)
{
    const nj_tensor *x = op->in[0], *gamma = op->in[1], *beta = op->in[2];
    const float *stats = op->aux;
    const float mean = stats[c], invstd = stats[x->c + c];
    const size_t hw = (size_t)x->h * x->w;
    if (gamma->grad) gamma->grad[c] += (float)sgx;
    if (beta->grad) beta->grad[c] += (float)sg;
    if (!x->grad) return;
    const float k = gamma->data[c] * invstd;
    if (!op->i[0]) mg = mgx = 0.0f;
    for (int n = 0; n < x->n; n++) {
        const size_t off = ((size_t)n * x->c + c) * hw;
        const float *p = x->data + off, *yd = op->out->data + off, *gy = op->out->grad + off;
        float *gx = x->grad + off;
        if (op->i[1]) {
            #pragma omp simd
            for (size_t i = 0; i < hw; i++)
                gx[i] += k * (nj_elu_grad_from_output(yd[i], gy[i]) - mg - (p[i] - mean) * invstd * mgx);
        } else {
            #pragma omp simd
            for (size_t i = 0; i < hw; i++)
                gx[i] += k * (gy[i] - mg - (p[i] - mean) * invstd * mgx);
        }
    }
}

static void channel_backward(const nj_op *op, int c)
{
    const nj_tensor *x = op->in[0];
    const double m = (double)x->n * (double)x->h * x->w;
    double sg, sgx;
    channel_sums(op, c, &sg, &sgx);
    channel_apply(op, c, sg, sgx, (float)(sg / m), (float)(sgx / m));
}

/* Synchronised batch norm backward: the means of gy and gy * xhat are taken
 * over every replica's batch (one sum of 2C + 1 values). */
static void synced_backward(nj_graph *g, const nj_op *op)
{
    const nj_tensor *x = op->in[0];
    const int C = x->c;
    double *loc = nj_graph_alloc(g, sizeof(double) * (4 * (size_t)C + 1));
    if (!loc) return;
    double *all = loc + 2 * C;
    #pragma omp parallel for schedule(static) if ((long)nj_numel(x) > PAR_MIN)
    for (int c = 0; c < C; c++) channel_sums(op, c, &loc[c], &loc[C + c]);
    for (int i = 0; i < 2 * C; i++) all[i] = loc[i];
    all[2 * C] = (double)x->n * (double)x->h * x->w;
    if (nj_graph_replica_sum(g, all, 2 * C + 1, "batchnorm backward")) return;
    const double M = all[2 * C];
    #pragma omp parallel for schedule(static) if ((long)nj_numel(x) > PAR_MIN)
    for (int c = 0; c < C; c++)
        channel_apply(op, c, loc[c], loc[C + c], (float)(all[c] / M), (float)(all[C + c] / M));
}

static void batchnorm_backward(nj_graph *g, const nj_op *op)
{
    if (op->i[2]) { synced_backward(g, op); return; }
    const nj_tensor *x = op->in[0];
    #pragma omp parallel for schedule(static) if ((long)nj_numel(x) > PAR_MIN)
    for (int c = 0; c < x->c; c++) channel_backward(op, c);
}

/* Synchronised batch statistics: mean and biased variance per channel over
 * every replica's batch, from per-replica sums of x and x² in double (one
 * sum of 2C + 1 values per layer: each is a synchronisation point).
 * Returns 2C doubles (means, variances) in the arena and the total count in
 * *M, or NULL with the graph failed. */
static double *synced_stats(nj_graph *g, const nj_tensor *x, double *M)
{
    const int C = x->c;
    const size_t hw = (size_t)x->h * x->w;
    double *st = nj_graph_alloc(g, sizeof(double) * (2 * (size_t)C + 1));
    if (!st) return NULL;
    #pragma omp parallel for schedule(static) if ((long)nj_numel(x) > PAR_MIN)
    for (int c = 0; c < C; c++) {
        double s = 0, q = 0;
        for (int n = 0; n < x->n; n++) {
            const float *p = x->data + ((size_t)n * x->c + c) * hw;
            for (size_t i = 0; i < hw; i++) {
                s += p[i];
                q += (double)p[i] * p[i];
            }
        }
        st[c] = s;
        st[C + c] = q;
    }
    st[2 * C] = (double)x->n * (double)hw;
    if (nj_graph_replica_sum(g, st, 2 * C + 1, "batchnorm statistics")) return NULL;
    *M = st[2 * C];
    for (int c = 0; c < C; c++) {
        const double mu = st[c] / *M, var = st[C + c] / *M - mu * mu;
        st[c] = mu;
        st[C + c] = var > 0 ? var : 0;
    }
    return st;
}

static int is_channel_vector(const nj_tensor *t, int c)
{
    return t->n == 1 && t->c == c && t->h == 1 && t->w == 1;
}

static nj_tensor *batchnorm_op(nj_graph *g, nj_tensor *x, nj_tensor *gamma, nj_tensor *beta,
                               float *run_mean, float *run_var, float momentum, float eps, int elu)
{
    if (!x || !gamma || !beta || nj_graph_failed(g)) return NULL;
    if (!is_channel_vector(gamma, x->c) || !is_channel_vector(beta, x->c))
        return nj_graph_fail(g, "batchnorm: gamma %dx%dx%dx%d and beta %dx%dx%dx%d must be 1x%dx1x1 for x %dx%dx%dx%d",
                             gamma->n, gamma->c, gamma->h, gamma->w, beta->n, beta->c, beta->h,
                             beta->w, x->c, x->n, x->c, x->h, x->w);
    if (!run_mean || !run_var)
        return nj_graph_fail(g, "batchnorm: running statistics are NULL for x %dx%dx%dx%d",
                             x->n, x->c, x->h, x->w);
    const int training = nj_graph_training(g);
    double m = (double)x->n * x->h * x->w;
    if (training && m < 2)
        return nj_graph_fail(g, "batchnorm: training needs more than one value per channel, x is %dx%dx%dx%d",
                             x->n, x->c, x->h, x->w);
    nj_tensor *in[3] = {x, gamma, beta};
    nj_tensor *y = nj_op_output(g, x->n, x->c, x->h, x->w, in, 3);
    float *stats = nj_graph_alloc(g, sizeof(float) * 2 * (size_t)x->c); /* mean, invstd */
    if (!y || !stats) return NULL;
    const int synced = training && nj_graph_replicas(g) != NULL;
    const double *gstat = synced ? synced_stats(g, x, &m) : NULL;
    if (synced && !gstat) return NULL;
    #pragma omp parallel for schedule(static) if ((long)nj_numel(x) > PAR_MIN)
    for (int c = 0; c < x->c; c++) {
        double mean = run_mean[c], var = run_var[c];
        if (training) {
            if (gstat) { mean = gstat[c]; var = gstat[x->c + c]; }
            else channel_stats(x, c, &mean, &var);
            run_mean[c] = (float)(momentum * mean + (1.0 - momentum) * run_mean[c]);
            run_var[c] = (float)(momentum * var * m / (m - 1) + (1.0 - momentum) * run_var[c]);
        }
        const double invstd = 1.0 / sqrt(var + eps), alpha = gamma->data[c] * invstd;
        stats[c] = (float)mean;
        stats[x->c + c] = (float)invstd;
        channel_affine(x, y, c, (float)alpha, (float)(beta->data[c] - mean * alpha), elu);
    }
    nj_op *op = nj_graph_record(g, elu ? "batchnorm_elu" : "batchnorm", batchnorm_backward, y, in, 3);
    if (op) { op->i[0] = training; op->i[1] = elu; op->i[2] = synced; op->f[0] = eps; op->aux = stats; }
    return y;
}

nj_tensor *nj_batchnorm(nj_graph *g, nj_tensor *x, nj_tensor *gamma, nj_tensor *beta,
                        float *run_mean, float *run_var, float momentum, float eps)
{
    return batchnorm_op(g, x, gamma, beta, run_mean, run_var, momentum, eps, 0);
}

nj_tensor *nj_batchnorm_elu(nj_graph *g, nj_tensor *x, nj_tensor *gamma, nj_tensor *beta,
                            float *run_mean, float *run_var, float momentum, float eps)
{
    return batchnorm_op(g, x, gamma, beta, run_mean, run_var, momentum, eps, 1);
}

void nj_batchnorm_fold(float *w, float *b, int cout, int per_out,
                       const float *gamma, const float *beta,
                       const float *run_mean, const float *run_var, float eps)
{
    for (int o = 0; o < cout; o++) {
        const double scale = gamma[o] / sqrt((double)run_var[o] + eps);
        float *wo = w + (size_t)o * (size_t)per_out;
        for (int i = 0; i < per_out; i++) wo[i] = (float)(wo[i] * scale);
        b[o] = (float)((b[o] - run_mean[o]) * scale + beta[o]);
    }
}

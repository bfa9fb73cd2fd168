/* tests/test_replicas.c — data-parallel replicas of a graph (nn/graph.h)
 * without MPI: two threads, each with its own graph and half of a batch of 4,
 * sum through a barrier-based callback.  Synchronised batch norm must give
 * what one graph computes on the whole batch:
 *  - outputs and running statistics (on both replicas) equal the single graph's;
 *  - with upstream gradients G split between the replicas (so their losses
 *    add up to the single graph's), dx equals the single graph's dx slice and
 *    the replicas' gamma/beta gradients add up to the single graph's;
 *  - inference mode never calls the sum, and the single-graph path is
 *    untouched by replicas being absent. */
#include "nn/graph.h"
#include "nn/ops.h"
#include "nn/rng.h"
#include "tests/check.h"
#include <math.h>
#include <pthread.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

enum { N = 4, C = 3, H = 6, W = 7, HALF = N / 2 };
#define HW (H * W)

typedef struct hub {
    pthread_barrier_t bar;
    double *slot[2];
    int calls;
} hub;

typedef struct replica {
    hub *h;
    int rank;
    const float *x, *gamma, *beta, *G;    /* whole-batch inputs */
    float y[HALF * C * HW], dx[HALF * C * HW], dgamma[C], dbeta[C];
    float run_mean[C], run_var[C];
    int failed;
} replica;

/* In-place sum over the two replicas: publish, add in rank order, write back. */
static int hub_sum(double *buf, int n, void *ctx)
{
    replica *r = ctx;
    hub *h = r->h;
    double *tmp = malloc(sizeof(double) * (size_t)n);
    if (!tmp) return -1;
    h->slot[r->rank] = buf;
    pthread_barrier_wait(&h->bar);
    for (int i = 0; i < n; i++) tmp[i] = h->slot[0][i] + h->slot[1][i];
    if (r->rank == 0) h->calls++;
    pthread_barrier_wait(&h->bar);
    memcpy(buf, tmp, sizeof(double) * (size_t)n);
    free(tmp);
    return 0;
}

/* Batch norm forward + seeded backward on items [first, first + n). */
static int run_bn(nj_graph *g, int n, const float *x, const float *gamma, const float *beta, const float *G,
                  float *y, float *dx, float *dgamma, float *dbeta, float *rm, float *rv)
{
    float gam[C], bet[C];
    memcpy(gam, gamma, sizeof gam);
    memcpy(bet, beta, sizeof bet);
    memset(dgamma, 0, sizeof(float) * C);
    memset(dbeta, 0, sizeof(float) * C);
    nj_tensor *xt = nj_tensor_from(g, n, C, H, W, x, 1);
    nj_tensor *gt = nj_tensor_wrap(g, 1, C, 1, 1, gam, dgamma), *bt = nj_tensor_wrap(g, 1, C, 1, 1, bet, dbeta);
    nj_tensor *yt = nj_batchnorm(g, xt, gt, bt, rm, rv, 0.1f, 1e-5f);
    if (!yt || nj_backward_seeded(g, yt, G)) return -1;
    memcpy(y, yt->data, sizeof(float) * (size_t)n * C * HW);
    memcpy(dx, xt->grad, sizeof(float) * (size_t)n * C * HW);
    return 0;
}

static void *replica_main(void *arg)
{
    replica *r = arg;
    nj_graph *g = nj_graph_new(1 << 20);
    nj_replicas rep = {.rank = r->rank, .count = 2, .sum = hub_sum, .ctx = r};
    nj_graph_set_replicas(g, &rep);
    size_t off = (size_t)r->rank * HALF * C * HW;
    r->failed = !g || run_bn(g, HALF, r->x + off, r->gamma, r->beta, r->G + off, r->y, r->dx, r->dgamma,
                             r->dbeta, r->run_mean, r->run_var);
    nj_graph_free(g);
    return NULL;
}

static double max_rel(const float *a, const float *b, size_t n)
{
    double d = 0, m = 1e-30;
    for (size_t i = 0; i < n; i++) {
        if (!(fabs((double)a[i] - b[i]) <= d)) d = fabs((double)a[i] - b[i]);
        if (fabs(a[i]) > m) m = fabs(a[i]);
    }
    return d / m;
}

int main(void)
{
    static float x[N * C * HW], G[N * C * HW], y[N * C * HW], dx[N * C * HW];
    float gamma[C], beta[C], dgamma[C], dbeta[C], rm[C] = {0}, rv[C] = {1, 1, 1};
    nj_rng rng;
    nj_rng_seed(&rng, 9);
    for (int i = 0; i < N * C * HW; i++) {
        x[i] = (float)(nj_rng_normal(&rng) * (1 + i % 3) + 0.5 * (i / (C * HW)));   /* items differ in mean */
        G[i] = (float)nj_rng_normal(&rng);
    }
    for (int c = 0; c < C; c++) { gamma[c] = 0.5f + 0.3f * c; beta[c] = 0.1f * c; }

    nj_graph *g = nj_graph_new(1 << 20);
    int ok = g && run_bn(g, N, x, gamma, beta, G, y, dx, dgamma, dbeta, rm, rv) == 0;
    nj_graph_free(g);
    if (!check(ok, "replicas: single-graph reference", "batchnorm failed")) return test_exit();

    hub h;
    memset(&h, 0, sizeof h);
    pthread_barrier_init(&h.bar, NULL, 2);
    replica r[2];
    pthread_t th[2];
    for (int k = 0; k < 2; k++) {
        memset(&r[k], 0, sizeof r[k]);
        r[k] = (replica){.h = &h, .rank = k, .x = x, .gamma = gamma, .beta = beta, .G = G};
        for (int c = 0; c < C; c++) { r[k].run_mean[c] = 0; r[k].run_var[c] = 1; }
        pthread_create(&th[k], NULL, replica_main, &r[k]);
    }
    for (int k = 0; k < 2; k++) pthread_join(th[k], NULL);
    pthread_barrier_destroy(&h.bar);
    if (!check(!r[0].failed && !r[1].failed && h.calls == 2, "replicas: two replicas run synchronised batch norm",
               "failed %d/%d, %d sums (want 2: forward statistics, backward means)", r[0].failed, r[1].failed,
               h.calls))
        return test_exit();

    const size_t half = (size_t)HALF * C * HW;
    double ey = fmax(max_rel(y, r[0].y, half), max_rel(y + half, r[1].y, half));
    double edx = fmax(max_rel(dx, r[0].dx, half), max_rel(dx + half, r[1].dx, half));
    float sg[C], sb[C];
    for (int c = 0; c < C; c++) { sg[c] = r[0].dgamma[c] + r[1].dgamma[c]; sb[c] = r[0].dbeta[c] + r[1].dbeta[c]; }
    double egb = fmax(max_rel(dgamma, sg, C), max_rel(dbeta, sb, C));
    double erun = 0;
    for (int k = 0; k < 2; k++) erun = fmax(erun, fmax(max_rel(rm, r[k].run_mean, C), max_rel(rv, r[k].run_var, C)));
    check(ey <= 1e-5, "replicas: 2 x batch 2 batch-norm outputs == batch 4", "max rel %.3g", ey);
    check(erun <= 1e-5, "replicas: running mean and variance on each replica == batch 4's", "max rel %.3g", erun);
    check(edx <= 1e-5, "replicas: dx of each replica == the batch-4 dx slice", "max rel %.3g", edx);
    check(egb <= 1e-5, "replicas: gamma/beta gradients add up to batch 4's", "max rel %.3g", egb);

    /* without synchronisation the halves would differ: the test can fail */
    float ylocal[HALF * C * HW], d1[HALF * C * HW], d2[C], d3[C], m1[C] = {0}, v1[C] = {1, 1, 1};
    g = nj_graph_new(1 << 20);
    ok = g && run_bn(g, HALF, x, gamma, beta, G, ylocal, d1, d2, d3, m1, v1) == 0;
    nj_graph_free(g);
    double eloc = ok ? max_rel(y, ylocal, half) : 0;
    check(eloc > 1e-2, "replicas: per-replica statistics alone would differ (the check is sensitive)",
          "max rel %.3g", eloc);

    /* inference mode: no sums */
    nj_graph *gi = nj_graph_new(1 << 20);
    replica dummy = {.h = &h, .rank = 0};
    nj_replicas rep = {.rank = 0, .count = 2, .sum = hub_sum, .ctx = &dummy};
    nj_graph_set_replicas(gi, &rep);
    nj_graph_set_training(gi, 0);
    int before = h.calls;
    nj_tensor *xt = nj_tensor_from(gi, HALF, C, H, W, x, 0);
    nj_tensor *gt = nj_tensor_from(gi, 1, C, 1, 1, gamma, 0), *bt = nj_tensor_from(gi, 1, C, 1, 1, beta, 0);
    nj_tensor *yi = nj_batchnorm(gi, xt, gt, bt, rm, rv, 0.1f, 1e-5f);
    check(yi && h.calls == before && nj_graph_replicas(gi) == NULL, "replicas: inference mode never synchronises",
          "%d sums", h.calls - before);
    nj_graph_free(gi);
    return test_exit();
}

/* tests/test_replicas.c — data-parallel replicas of a graph (nn/graph.h)
 * without MPI: two threads, each with its own graph and half of a batch of 4,
 * sum through a barrier-based callback.  Synchronised batch norm must give
 * what one graph computes on the whole batch:
 *  - outputs and running statistics (on both replicas) equal the single graph's;
 *  - with upstream gradients G split between the replicas (so their losses
 *    add up to the single graph's), dx equals the single graph's dx slice and
 *    the replicas' gamma/beta gradients add up to the single graph's;
 *  - inference mode never calls the sum;
 *  - the view-synthesis loss (auto-masking with tie-break noise, pixels
 *    leaving the view): the replicas' mean loss equals the single graph's,
 *    each replica's disparity gradient is its slice of the single graph's
 *    times the replica count (its loss is count × its share), the masks are
 *    the single graph's slices and every RNG ends in the single graph's state. */
#include "losses/pose.h"
#include "losses/view_synthesis.h"
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

/* What the sum callback needs; first member of each replica's struct. */
typedef struct member {
    hub *h;
    int rank;
} member;

typedef struct replica {
    member who;
    const float *x, *gamma, *beta, *G;    /* whole-batch inputs */
    float y[HALF * C * HW], dx[HALF * C * HW], dgamma[C], dbeta[C];
    float run_mean[C], run_var[C];
    int failed;
} replica;

/* In-place sum over the two replicas: publish, add in rank order, write back. */
static int hub_sum(double *buf, int n, void *ctx)
{
    member *r = ctx;
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
    nj_replicas rep = {.rank = r->who.rank, .count = 2, .sum = hub_sum, .ctx = &r->who};
    nj_graph_set_replicas(g, &rep);
    size_t off = (size_t)r->who.rank * HALF * C * HW;
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

/* ---- the view-synthesis loss ---- */

enum { LH = 16, LW = 24, LHW = LH * LW };

typedef struct loss_inputs {
    float tgt[N * 3 * LHW], src[N * 3 * LHW], disp[N * LHW], tx[N];
    nj_camera cams[N];
} loss_inputs;

typedef struct loss_result {
    float total, dgrad[N * LHW], mask[N * LHW];
    nj_rng rng;
    int failed;
} loss_result;

/* Loss of items [first, first + n) with auto-masking and tie-break noise
 * from an RNG seeded 77; the disparity gradient and mask into res. */
static void run_loss(nj_graph *g, const loss_inputs *li, int first, int n, loss_result *res)
{
    nj_tensor *tgt = nj_tensor_from(g, n, 3, LH, LW, li->tgt + (size_t)first * 3 * LHW, 0);
    nj_tensor *src = nj_tensor_from(g, n, 3, LH, LW, li->src + (size_t)first * 3 * LHW, 0);
    nj_tensor *disp = nj_tensor_from(g, n, 1, LH, LW, li->disp + (size_t)first * LHW, 1);
    nj_vs_config cfg;
    nj_vs_config_default(&cfg);
    cfg.automask = 1;
    cfg.tie_break = 1e-3f;       /* large enough to decide some ties */
    nj_rng_seed(&res->rng, 77);
    nj_vs_input in = {.target = tgt, .sources = {src}, .poses = {nj_pose_stereo(g, n, li->tx + first)},
                      .nsources = 1, .cams = li->cams + first, .disp = {disp}, .nscales = 1,
                      .depth_range = {0.1f, 100.0f}, .rng = &res->rng};
    nj_vs_output out;
    res->failed = nj_view_synthesis_loss(g, &cfg, &in, &out) || nj_backward(g, out.total);
    if (res->failed) return;
    res->total = out.total->data[0];
    memcpy(res->dgrad, disp->grad, sizeof(float) * (size_t)n * LHW);
    memcpy(res->mask, out.automask->data, sizeof(float) * (size_t)n * LHW);
}

typedef struct loss_replica {
    member who;
    const loss_inputs *li;
    loss_result res;
} loss_replica;

static void *loss_replica_main(void *arg)
{
    loss_replica *r = arg;
    nj_graph *g = nj_graph_new(8 << 20);
    nj_replicas rep = {.rank = r->who.rank, .count = 2, .sum = hub_sum, .ctx = &r->who};
    if (g) nj_graph_set_replicas(g, &rep);
    if (g) run_loss(g, r->li, r->who.rank * HALF, HALF, &r->res);
    else r->res.failed = 1;
    nj_graph_free(g);
    return NULL;
}

static void test_loss(void)
{
    static loss_inputs li;
    static loss_result ref;
    static loss_replica lr[2];
    nj_rng rng;
    nj_rng_seed(&rng, 31);
    for (int i = 0; i < N * 3 * LHW; i++) {
        li.tgt[i] = (float)nj_rng_uniform(&rng);
        int row = (i / LW) % LH;
        li.src[i] = row < 4 ? li.tgt[i] : (float)nj_rng_uniform(&rng);   /* static rows: auto-masked */
    }
    for (int i = 0; i < N * LHW; i++) li.disp[i] = (float)(0.01 + 0.2 * nj_rng_uniform(&rng));
    for (int k = 0; k < N; k++) {
        li.tx[k] = -0.05f * (k + 1);      /* items leave the view by different amounts */
        li.cams[k] = (nj_camera){20.0f, 20.0f, (LW - 1) / 2.0f, (LH - 1) / 2.0f};
    }
    nj_graph *g = nj_graph_new(8 << 20);
    if (g) run_loss(g, &li, 0, N, &ref);
    nj_graph_free(g);
    if (!check(g && !ref.failed, "replicas: view-synthesis loss reference", "loss failed")) return;
    hub h;
    memset(&h, 0, sizeof h);
    pthread_barrier_init(&h.bar, NULL, 2);
    pthread_t th[2];
    for (int k = 0; k < 2; k++) {
        lr[k].who = (member){&h, k};
        lr[k].li = &li;
        pthread_create(&th[k], NULL, loss_replica_main, &lr[k]);
    }
    for (int k = 0; k < 2; k++) pthread_join(th[k], NULL);
    pthread_barrier_destroy(&h.bar);
    if (!check(!lr[0].res.failed && !lr[1].res.failed, "replicas: view-synthesis loss on two replicas", "failed"))
        return;
    const size_t half = (size_t)HALF * LHW;
    double mean = 0.5 * ((double)lr[0].res.total + lr[1].res.total);
    double el = fabs(mean - ref.total) / fabs(ref.total);
    float twice[N * LHW];
    for (size_t i = 0; i < (size_t)N * LHW; i++) twice[i] = 2 * ref.dgrad[i];
    double eg = fmax(max_rel(twice, lr[0].res.dgrad, half), max_rel(twice + half, lr[1].res.dgrad, half));
    int masks = !memcmp(ref.mask, lr[0].res.mask, half * 4) && !memcmp(ref.mask + half, lr[1].res.mask, half * 4);
    int rngs = !memcmp(&ref.rng, &lr[0].res.rng, sizeof ref.rng) && !memcmp(&ref.rng, &lr[1].res.rng, sizeof ref.rng);
    double used0 = 0, used1 = 0;
    for (size_t i = 0; i < half; i++) { used0 += lr[0].res.mask[i]; used1 += lr[1].res.mask[i]; }
    printf("   (pixels used: %g and %g of %zu per replica)\n", used0, used1, half);
    check(el <= 1e-5 && used0 != used1, "replicas: mean of the replicas' losses == the whole batch's loss",
          "relative error %.3g (pixels used %g vs %g: must differ for the check to mean something)", el, used0, used1);
    check(eg <= 1e-5, "replicas: disparity gradients == 2 x the whole batch's slices", "max rel %.3g", eg);
    check(masks && rngs, "replicas: auto-masks (with tie-break noise) and RNG end states == the whole batch's",
          "masks %s, rng %s", masks ? "same" : "differ", rngs ? "same" : "differ");
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
        r[k] = (replica){.who = {&h, k}, .x = x, .gamma = gamma, .beta = beta, .G = G};
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
    member dummy = {&h, 0};
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
    test_loss();
    return test_exit();
}

/* bench/bench_losses.c — time of the view-synthesis loss (forward+backward,
 * 96×320, batch 4, 2 sources × 4 scales, auto-mask, smoothness) next to the
 * time of the networks it trains (depth net + 2 pose pairs, forward+backward)
 * at the same size.  Median of 5 runs after one warm-up.  Not a test. */
#include "losses/pose.h"
#include "losses/view_synthesis.h"
#include "nn/ops.h"
#include "train/model/model.h"
#include <omp.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

enum { N = 4, H = 96, W = 320, RUNS = 5 };

static int cmp(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

static void fill(nj_rng *r, float *x, size_t n, float lo, float hi)
{
    for (size_t i = 0; i < n; i++) x[i] = lo + (hi - lo) * (float)nj_rng_uniform(r);
}

static double time_loss(nj_graph *g, nj_rng *r, float *imgs)
{
    nj_graph_reset(g);
    size_t isz = (size_t)N * 3 * H * W;
    nj_camera cams[N];
    for (int i = 0; i < N; i++) cams[i] = (nj_camera){0.58f * W, 1.92f * H, W / 2.0f, H / 2.0f};
    nj_vs_input in = {.target = nj_tensor_wrap(g, N, 3, H, W, imgs, NULL), .nsources = 2,
                      .cams = cams, .nscales = 4, .depth_range = {NJ_MODEL_DEPTH_NEAR, NJ_MODEL_DEPTH_FAR},
                      .rng = r};
    for (int s = 0; s < 2; s++) {
        in.sources[s] = nj_tensor_wrap(g, N, 3, H, W, imgs + (s + 1) * isz, NULL);
        nj_tensor *v = nj_tensor_new(g, N, 6, 1, 1, 1);
        fill(r, v->data, 6 * N, -0.02f, 0.02f);
        in.poses[s] = nj_pose_from_vec(g, v);
    }
    for (int s = 0; s < 4; s++) {
        nj_tensor *d = nj_tensor_new(g, N, 1, H >> s, W >> s, 1);
        fill(r, d->data, nj_numel(d), 0.05f, 0.3f);
        in.disp[s] = d;
    }
    nj_vs_config cfg;
    nj_vs_config_default(&cfg);
    nj_vs_output out;
    double t0 = omp_get_wtime();
    if (nj_view_synthesis_loss(g, &cfg, &in, &out) || nj_backward(g, out.total)) {
        fprintf(stderr, "bench_losses: %s\n", nj_graph_error(g));
        exit(1);
    }
    return omp_get_wtime() - t0;
}

static double time_nets(nj_graph *g, nj_model *m, float *imgs)
{
    nj_graph_reset(g);
    size_t isz = (size_t)N * 3 * H * W;
    double t0 = omp_get_wtime();
    nj_tensor *tgt = nj_tensor_wrap(g, N, 3, H, W, imgs, NULL), *disp[4];
    nj_depth_forward(g, m, tgt, disp);
    nj_tensor *loss = nj_sum(g, disp[0], NJ_AXIS_ALL);
    for (int s = 1; s < 4; s++) loss = nj_add(g, loss, nj_sum(g, disp[s], NJ_AXIS_ALL));
    for (int s = 0; s < 2; s++) {
        nj_tensor *src = nj_tensor_wrap(g, N, 3, H, W, imgs + (s + 1) * isz, NULL);
        loss = nj_add(g, loss, nj_sum(g, nj_pose_forward(g, m, tgt, src, NULL), NJ_AXIS_ALL));
    }
    if (nj_backward(g, loss)) { fprintf(stderr, "bench_losses: %s\n", nj_graph_error(g)); exit(1); }
    return omp_get_wtime() - t0;
}

int main(void)
{
    int threads = nj_threads_init(0);
    nj_rng r;
    nj_rng_seed(&r, 3);
    size_t isz = (size_t)N * 3 * H * W;
    float *imgs = malloc(3 * isz * sizeof(float));
    fill(&r, imgs, 3 * isz, 0, 1);
    nj_model_config mc;
    nj_model_config_default(&mc);
    nj_model m;
    char err[256];
    if (nj_model_init(&m, &mc, err, sizeof err)) { fprintf(stderr, "%s\n", err); return 1; }
    nj_graph *g = nj_graph_new((size_t)256 << 20);
    double tl[RUNS], tn[RUNS];
    time_loss(g, &r, imgs);
    time_nets(g, &m, imgs);
    for (int k = 0; k < RUNS; k++) {
        tl[k] = time_loss(g, &r, imgs);
        tn[k] = time_nets(g, &m, imgs);
    }
    qsort(tl, RUNS, sizeof *tl, cmp);
    qsort(tn, RUNS, sizeof *tn, cmp);
    printf("case=view-synthesis loss %dx%d batch %d, 2 sources x 4 scales, threads=%d\n", W, H, N, threads);
    printf("loss_fwd_bwd_ms=%.1f\n", tl[RUNS / 2] * 1e3);
    printf("nets_fwd_bwd_ms=%.1f   (depth net + 2 pose pairs, default architecture)\n", tn[RUNS / 2] * 1e3);
    printf("loss_share=%.2f\n", tl[RUNS / 2] / (tl[RUNS / 2] + tn[RUNS / 2]));
    nj_graph_free(g);
    nj_model_free(&m);
    free(imgs);
    return 0;
}

/* bench/bench_nn.c — convolution speed against the plain GEMM it is built on.
 *
 * Case: 32→32 channels, 3×3 kernel, stride 1, pad 1 (reflection), 96×320,
 * batch 4, two threads.  Forward + backward (dx and dW) counts
 * 3 × 2·N·Cout·Cin·9·H·W flops.
 *
 * Baseline (measured in the same run): the three GEMMs of that conv on whole
 * samples — Y = W·col, dcol = Wᵀ·dY, dW += dY·colᵀ with col already built —
 * run by single-threaded OpenBLAS inside an OpenMP parallel region of two
 * threads that splits the batch (two samples per thread), as the conv splits
 * its (sample, band) work.  The two are timed alternately, 2 warm-up rounds
 * then 7 timed rounds, and each figure is the median.  Output: plain
 * key=value lines.
 */
#include "nn/ops.h"
#include <cblas.h>
#include <omp.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#define N 4
#define CIN 32
#define COUT 32
#define H 96
#define W 320
#define K (CIN * 9)
#define P (H * W)
#define WARMUP 2
#define RUNS 7

static double now(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return ts.tv_sec + ts.tv_nsec * 1e-9;
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

static double median(double *t, int n)
{
    qsort(t, (size_t)n, sizeof *t, cmp_double);
    return n % 2 ? t[n / 2] : 0.5 * (t[n / 2 - 1] + t[n / 2]);
}

static void fill(float *x, size_t n, unsigned seed)
{
    for (size_t i = 0; i < n; i++) {
        seed = seed * 1664525u + 1013904223u;
        x[i] = (float)((seed >> 8) * (1.0 / 16777216.0)) - 0.5f;
    }
}

typedef struct gemm_bufs { float *w, *col, *y, *dy, *dcol, *dw; } gemm_bufs;

/* One forward+backward worth of whole-sample GEMMs; each thread owns its samples. */
static void gemm_pass(const gemm_bufs *B)
{
    #pragma omp parallel num_threads(2)
    {
        int t = omp_get_thread_num();
        float *dw = B->dw + (size_t)t * COUT * K;
        #pragma omp for schedule(static)
        for (int n = 0; n < N; n++) {
            const float *col = B->col + (size_t)t * K * P;
            float *dcol = B->dcol + (size_t)t * K * P;
            float *y = B->y + (size_t)n * COUT * P, *dy = B->dy + (size_t)n * COUT * P;
            cblas_sgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, COUT, P, K,
                        1.0f, B->w, K, col, P, 0.0f, y, P);
            cblas_sgemm(CblasRowMajor, CblasTrans, CblasNoTrans, K, P, COUT,
                        1.0f, B->w, K, dy, P, 0.0f, dcol, P);
            cblas_sgemm(CblasRowMajor, CblasNoTrans, CblasTrans, COUT, K, P,
                        1.0f, dy, P, col, P, 1.0f, dw, K);
        }
    }
}

static void gemm_setup(gemm_bufs *B)
{
    B->w = malloc(sizeof(float) * COUT * K);
    B->col = malloc(sizeof(float) * 2 * K * P);
    B->dcol = malloc(sizeof(float) * 2 * K * P);
    B->y = malloc(sizeof(float) * N * COUT * P);
    B->dy = malloc(sizeof(float) * N * COUT * P);
    B->dw = calloc(2 * COUT * K, sizeof(float));
    fill(B->w, COUT * K, 1);
    fill(B->col, 2 * (size_t)K * P, 2);
    fill(B->dy, (size_t)N * COUT * P, 3);
}

static void gemm_free(gemm_bufs *B)
{
    free(B->w); free(B->col); free(B->dcol); free(B->y); free(B->dy); free(B->dw);
}

typedef struct conv_bufs {
    float *x, *dx, *w, *dw, *seed, b[COUT], db[COUT];
    nj_graph *g;
} conv_bufs;

static void conv_setup(conv_bufs *C)
{
    size_t nx = (size_t)N * CIN * P, nw = (size_t)COUT * K, ny = (size_t)N * COUT * P;
    C->x = malloc(sizeof(float) * nx);
    C->dx = calloc(nx, sizeof(float));
    C->w = malloc(sizeof(float) * nw);
    C->dw = calloc(nw, sizeof(float));
    C->seed = malloc(sizeof(float) * ny);
    fill(C->x, nx, 4);
    fill(C->w, nw, 5);
    fill(C->b, COUT, 6);
    memset(C->db, 0, sizeof C->db);
    for (size_t i = 0; i < ny; i++) C->seed[i] = 1.0f;
    C->g = nj_graph_new((size_t)64 << 20);
}

static void conv_free(conv_bufs *C)
{
    nj_graph_free(C->g);
    free(C->x); free(C->dx); free(C->w); free(C->dw); free(C->seed);
}

/* Conv forward, then backward seeded with ones, through the graph as in training. */
static void conv_pass(conv_bufs *C)
{
    nj_graph *g = C->g;
    nj_graph_reset(g);
    nj_tensor *xt = nj_tensor_wrap(g, N, CIN, H, W, C->x, C->dx);
    nj_tensor *wt = nj_tensor_wrap(g, COUT, CIN, 3, 3, C->w, C->dw);
    nj_tensor *bt = nj_tensor_wrap(g, 1, COUT, 1, 1, C->b, C->db);
    nj_tensor *y = nj_conv2d(g, xt, wt, bt, 1, 1, NJ_PAD_REFLECT);
    if (nj_backward_seeded(g, y, C->seed) != 0) {
        fprintf(stderr, "bench_nn: conv failed: %s\n", nj_graph_error(g));
        exit(1);
    }
}

int main(void)
{
    int threads = nj_threads_init(2);
    double flops = 3.0 * 2.0 * N * COUT * (double)CIN * 9 * H * W;
    gemm_bufs B;
    conv_bufs C;
    gemm_setup(&B);
    conv_setup(&C);
    /* Alternate the two so that both see the same machine load. */
    double tg[RUNS], tc[RUNS];
    for (int r = 0; r < WARMUP + RUNS; r++) {
        double t0 = now();
        gemm_pass(&B);
        double t1 = now();
        conv_pass(&C);
        double t2 = now();
        if (r >= WARMUP) { tg[r - WARMUP] = t1 - t0; tc[r - WARMUP] = t2 - t1; }
    }
    gemm_free(&B);
    conv_free(&C);
    double mg = median(tg, RUNS), mc = median(tc, RUNS);
    double gg = flops / mg * 1e-9, gc = flops / mc * 1e-9;
    printf("case=conv3x3 reflect-pad1 cin=%d cout=%d h=%d w=%d batch=%d threads=%d runs=%d\n",
           CIN, COUT, H, W, N, threads, RUNS);
    printf("sgemm_method=2 OpenMP threads splitting the batch, single-threaded OpenBLAS sgemm per sample "
           "(forward, dcol and dW GEMMs of the conv)\n");
    printf("sgemm_seconds=%.4f\n", mg);
    printf("sgemm_gflops=%.2f\n", gg);
    printf("conv_fwd_bwd_seconds=%.4f\n", mc);
    printf("conv_fwd_bwd_gflops=%.2f\n", gc);
    printf("ratio=%.3f\n", gc / gg);
    return 0;
}

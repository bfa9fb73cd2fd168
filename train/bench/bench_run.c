/* train/bench/bench_run.c — `./nightjar bench`: times the default training step
 * (see bench.h) and ends with the line
 *     ms_per_step=X peak_rss_mb=Y gflops=Z
 * (median step time after warm-up, peak resident set of the process, conv
 * FLOPs of a step divided by the median step time).  Before it: OpenBLAS
 * sgemm GFLOP/s measured the way convs call it (one single-threaded sgemm per
 * OpenMP thread), and with --profile the time shares of conv forward, conv
 * backward, warping, SSIM and the rest.  With --paced every step (warm-up
 * included) waits for a line on standard input and is followed by a line
 * `step_ms=X`, and the closing figures wait for one more line or the end of
 * the input, so that a driver can alternate two implementations step by step
 * (bench/side_by_side.py).  peak_rss_mb is the peak over the steps (read
 * before the sgemm measurement allocates its buffers). */
#include "train/bench/bench.h"
#include "nn/prof.h"
#include "train/loop/loop.h"
#include <cblas.h>
#include <math.h>
#include <omp.h>
#include <stdio.h>
#include <stdlib.h>
#include <sys/resource.h>

/* One step as the trainer runs it: zero grads, forward + backward (split over
 * the threads as replicas when rep is set, see train/loop/step_replicas.h), clip,
 * Adam. */
static int one_step(nj_graph *g, nj_step_replicas *rep, nj_model *m, const nj_train_config *cfg,
                    const nj_batch *b, nj_rng *rng, nj_adam *opt, double *seconds, float *loss)
{
    double t0 = omp_get_wtime();
    nj_graph_reset(g);
    nj_params_zero_grad(&m->params);
    nj_step_result r;
    if (nj_step_replicas_run(rep, g, m, cfg, b, rng, &r)) return -1;
    nj_adam_step_scaled(opt, &m->params, nj_clip_factor(nj_params_grad_norm(&m->params), cfg->grad_clip));
    *seconds = omp_get_wtime() - t0;
    *loss = r.loss;
    return 0;
}

/* Reads one line of standard input (--paced); -1 at its end. */
static int wait_line(void)
{
    int c;
    while ((c = getchar()) != EOF)
        if (c == '\n') return 0;
    return -1;
}

/* User + system CPU seconds of the process so far. */
static double cpu_seconds(void)
{
    struct rusage ru;
    getrusage(RUSAGE_SELF, &ru);
    return ru.ru_utime.tv_sec + ru.ru_stime.tv_sec + 1e-6 * (ru.ru_utime.tv_usec + ru.ru_stime.tv_usec);
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

/* sgemm GFLOP/s with one single-threaded sgemm per thread, conv-like shape. */
static double sgemm_gflops(void)
{
    enum { M = 64, K = 576, P = 2048 };
    int T = omp_get_max_threads();
    float *buf = calloc((size_t)T * (M * K + K * P + M * P), sizeof(float));
    if (!buf) return 0;
    for (size_t i = 0; i < (size_t)T * (M * K + K * P); i++) buf[i] = (float)(i % 17) * 0.01f;
    int reps = 0;
    double t0 = omp_get_wtime(), dt;
    do {
        #pragma omp parallel
        {
            float *w = buf + (size_t)omp_get_thread_num() * (M * K + K * P + M * P);
            for (int r = 0; r < 4; r++)
                cblas_sgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, M, P, K, 1.0f, w, K,
                            w + M * K, P, 0.0f, w + M * K + K * P, P);
        }
        reps += 4;
        dt = omp_get_wtime() - t0;
    } while (dt < 0.5);
    free(buf);
    return 2.0 * M * K * P * (double)reps * T / dt * 1e-9;
}

static void print_profile(double total, double conv_flops_total)
{
    /* the categories the ops registered (nn/prof.h), in order of first use */
    double rest = total;
    printf("profile (share of step time):");
    for (int k = 0; k < nj_prof_count(); k++) {
        double s = nj_prof_seconds(k);
        rest -= s;
        printf(" %s=%.1f%%", nj_prof_name(k), 100 * s / total);
    }
    printf(" rest=%.1f%%\n", 100 * rest / total);
    double conv = nj_prof_seconds_of("conv_forward") + nj_prof_seconds_of("conv_backward");
    printf("conv_gflops=%.2f (conv FLOPs over time inside conv forward+backward)\n",
           conv > 0 ? conv_flops_total / conv * 1e-9 : 0.0);
}

void nj_bench_options_default(nj_bench_options *o)
{
    *o = (nj_bench_options){.w = 320, .h = 96, .batch = 4, .threads = 0, .steps = 10, .warmup = 3};
}

int nj_bench_run(const nj_bench_options *a, char *err, size_t errlen)
{
    int threads = nj_threads_init(a->threads);
    nj_train_config cfg;
    nj_bench_config(&cfg, a->w, a->h, a->batch);
    nj_model m;
    if (nj_model_init(&m, &cfg.model, err, errlen)) return -1;
    if (!nj_model_size_ok(&m, a->h, a->w)) {
        snprintf(err, errlen, "--size %dx%d: width and height must be multiples of %d (at least %d)", a->w, a->h,
                 1 << m.cfg.stages, 2 << m.cfg.stages);
        nj_model_free(&m);
        return NJ_BENCH_BAD_SIZE;
    }
    nj_bench_batch bb = {0};
    nj_graph *g = nj_graph_new(NJ_STEP_ARENA_CHUNK);
    double *t = malloc(sizeof(double) * (size_t)a->steps);
    nj_step_replicas *rep = NULL;
    int rc = 0;
    if (!g || !t || nj_bench_batch_make(&bb, a->batch, a->h, a->w, 7)) {
        snprintf(err, errlen, "out of memory");
        rc = -1;
    } else if (threads > 1 && !(rep = nj_step_replicas_new(threads, NJ_STEP_ARENA_CHUNK, err, errlen))) {
        rc = -1;
    }
    if (rc) goto done;
    nj_adam opt;
    nj_adam_init(&opt, cfg.lr);
    nj_rng rng;
    nj_rng_seed(&rng, 11);
    double flops = nj_bench_conv_flops(&m, a->h, a->w, a->batch, 2);
    printf("bench: %dx%d batch %d, %d thread%s; depth+pose nets (%zu parameters), 2 sources x %d scales, "
           "auto-mask, smoothness, clipping, Adam\n", a->w, a->h, a->batch, threads, threads == 1 ? "" : "s",
           nj_params_numel(&m.params), m.cfg.scales);
    printf("conv_gflop_per_step=%.3f (forward + backward)\n", flops * 1e-9);
    float loss = 0;
    double cpu0 = 0;
    for (int i = 0; i < a->warmup + a->steps && !rc; i++) {
        if (a->paced && wait_line()) {
            snprintf(err, errlen, "--paced: standard input ended before step %d", i + 1);
            rc = -1;
            break;
        }
        if (i == a->warmup) { nj_prof_enable(a->profile); nj_prof_reset(); cpu0 = cpu_seconds(); }
        double s;
        if (one_step(g, rep, &m, &cfg, &bb.b, &rng, &opt, &s, &loss)) {
            snprintf(err, errlen, "step failed: %s", nj_graph_error(g));
            rc = -1;
        } else if (i >= a->warmup) t[i - a->warmup] = s;
        if (a->paced && !rc) {
            printf("step_ms=%.2f\n", s * 1e3);
            fflush(stdout);
        }
    }
    nj_prof_enable(0);
    double cpu = cpu_seconds() - cpu0;
    /* the peak of training, before the sgemm measurement's own buffers */
    struct rusage ru;
    getrusage(RUSAGE_SELF, &ru);
    /* --paced: the closing figures (the sgemm rate) wait until the driver is
     * done with the other implementation, so that nothing runs beside them */
    if (a->paced && !rc) wait_line();
    if (!rc) {
        double total = 0;
        for (int i = 0; i < a->steps; i++) total += t[i];
        qsort(t, (size_t)a->steps, sizeof *t, cmp_double);
        double med = a->steps % 2 ? t[a->steps / 2] : 0.5 * (t[a->steps / 2 - 1] + t[a->steps / 2]);
        printf("step_ms: min %.1f median %.1f max %.1f over %d steps after %d warm-up; last loss %.5f\n",
               t[0] * 1e3, med * 1e3, t[a->steps - 1] * 1e3, a->steps, a->warmup, loss);
        /* CPU time is less disturbed than wall time when other jobs share the cores */
        printf("cpu_ms_per_step=%.1f (user + system, all threads)\n", cpu / a->steps * 1e3);
        if (a->profile) print_profile(total, flops * a->steps);
        printf("arena_peak_mb=%.1f (activations, gradients and saved state of one step%s)\n",
               (nj_arena_peak(nj_graph_arena(g)) + nj_step_replicas_arena_peak(rep)) / 1048576.0,
               nj_step_replicas_fit(rep, &bb.b) ? ", all replicas" : "");
        printf("sgemm_gflops=%.2f (OpenBLAS, one single-threaded 64x576x2048 sgemm per thread)\n", sgemm_gflops());
        printf("ms_per_step=%.1f peak_rss_mb=%.1f gflops=%.2f\n", med * 1e3, ru.ru_maxrss / 1024.0,
               flops / med * 1e-9);
    }
done:
    free(t);
    nj_step_replicas_free(rep);
    nj_graph_free(g);
    nj_bench_batch_free(&bb);
    nj_model_free(&m);
    return rc;
}


/* bench/bench_export.c — `make bench-export`: the C code emitted by `nightjar
 * export --format c` (f32 and int8) beside OpenCV's DNN module (one thread) on
 * the same model's ONNX, at 320x96 for the default architecture (5 stages,
 * width 1, batch norm; untrained weights: speed does not depend on them;
 * int8 calibrated on 4 synthetic frames).
 *
 * The three run side by side in one process tree, in rounds whose order
 * rotates (f32, int8, OpenCV; int8, OpenCV, f32; ...), each round the fastest
 * of RUNS single-frame runs (CPU time), so that the speed swings of a shared
 * machine hit all three alike; the table gives the median over rounds of the
 * times and of the per-round ratios f32/OpenCV and int8/f32.  The f32 path's GFLOP/s (multiply-adds x 2
 * of the exported graph, head 0 only, as ONNX counts them) is set against
 * OpenBLAS sgemm on one thread timed in this process between the rounds.
 * Also: code (.text), weights (.rodata) and scratch of each object, and the
 * aarch64 object size.  Run from the repository root.  Not a test. */
#include "data/image.h"
#include "train/loop/checkpoint.h"
#include "train/model/infer.h"
#include <cblas.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <unistd.h>

#define BW 320
#define BH 96
#define ROUNDS 5
#define RUNS 15
#define DRIVER "tests/ref/export_driver.c"
#define CV_SCRIPT "bench/export_cv.py"
#define FLAGS "-std=c99 -O3 -march=native"

static char dir[] = "/tmp/nj_bench_export_XXXXXX";

static int sh(const char *cmd)
{
    fflush(stdout);
    int rc = system(cmd);
    return rc == 0 ? 0 : -1;
}

static double read_double(const char *path, const char *key)
{
    FILE *f = fopen(path, "r");
    char line[256];
    double v = NAN;
    size_t n = strlen(key);
    while (f && fgets(line, sizeof line, f))
        if (!strncmp(line, key, n)) v = atof(line + n);
    if (f) fclose(f);
    return v;
}

static int make_model(nj_model *m, nj_train_config *cfg)
{
    char path[128], err[512];
    nj_train_state st;
    memset(&st, 0, sizeof st);
    st.best_val = INFINITY;
    nj_train_config_default(cfg);
    cfg->width = BW;
    cfg->height = BH;
    if (nj_model_init(m, &cfg->model, err, sizeof err)) {
        fprintf(stderr, "bench_export: %s\n", err);
        return -1;
    }
    snprintf(path, sizeof path, "%s/default.ckpt", dir);
    if (nj_checkpoint_save(path, m, cfg, &st, err, sizeof err)) {
        fprintf(stderr, "bench_export: %s\n", err);
        return -1;
    }
    return 0;
}

/* Multiply-adds x 2 of the exported graph (encoder, decoder, head 0). */
static double export_flops(const nj_model *m)
{
    double f = 0;
    int h = BH, w = BW;
    for (int i = 0; i < m->cfg.stages; i++) {
        const nj_unit *a = &m->units[m->enc[i][0]], *b = &m->units[m->enc[i][1]];
        h /= 2;
        w /= 2;
        f += 2.0 * h * w * (a->cout * a->cin * a->k * a->k + b->cout * b->cin * b->k * b->k);
    }
    for (int i = m->cfg.stages - 1; i >= 0; i--) {
        const nj_unit *a = &m->units[m->dec[i][0]], *b = &m->units[m->dec[i][1]];
        f += 2.0 * h * w * a->cout * a->cin * a->k * a->k;
        h *= 2;
        w *= 2;
        f += 2.0 * h * w * b->cout * b->cin * b->k * b->k;
    }
    const nj_unit *hd = &m->units[m->head[0]];
    return f + 2.0 * h * w * hd->cout * hd->cin * hd->k * hd->k;
}

/* 4 synthetic frames (calibration) and the first one as raw RGB (the timed input). */
static int make_data(void)
{
    char cmd[1024];
    snprintf(cmd, sizeof cmd, "./nightjar synth --out %s/data --frames 4 --sequences 1 --size %dx%d --seed 5 > /dev/null",
             dir, BW, BH);
    if (sh(cmd)) return -1;
    snprintf(cmd, sizeof cmd, "sed -i 's/\"test\"/\"train\"/; s/\"val\"/\"train\"/' %s/data/dataset.json", dir);
    if (sh(cmd)) return -1;
    nj_image im = {0, 0, NULL};
    char path[256], err[256];
    snprintf(path, sizeof path, "%s/data/yard-00/cam0/000001.png", dir);
    if (nj_image_load(path, &im, err, sizeof err) || im.w != BW || im.h != BH) {
        fprintf(stderr, "bench_export: %s\n", err);
        nj_image_free(&im);
        return -1;
    }
    unsigned char *rgb = malloc((size_t)BW * BH * 3);
    for (int p = 0; rgb && p < BW * BH; p++)
        for (int c = 0; c < 3; c++) rgb[(size_t)p * 3 + c] = (unsigned char)lrintf(im.data[(size_t)c * BW * BH + p] * 255.0f);
    nj_image_free(&im);
    snprintf(path, sizeof path, "%s/frame.rgb", dir);
    FILE *f = rgb ? fopen(path, "wb") : NULL;
    int ok = f && fwrite(rgb, 1, (size_t)BW * BH * 3, f) == (size_t)BW * BH * 3;
    if (f && fclose(f)) ok = 0;
    free(rgb);
    return ok ? 0 : -1;
}

static int export_all(void)
{
    char cmd[2048];
    snprintf(cmd, sizeof cmd,
             "mkdir -p %s/f32 %s/int8 && ./nightjar export --model %s/default.ckpt --format c --out %s/f32/nightjar_depth.c"
             " > /dev/null && ./nightjar export --model %s/default.ckpt --format c --weights int8 --calibrate "
             "%s/data/dataset.json --calibrate-frames 4 --out %s/int8/nightjar_depth.c > /dev/null && "
             "./nightjar export --model %s/default.ckpt --format onnx --out %s/model.onnx > /dev/null",
             dir, dir, dir, dir, dir, dir, dir, dir, dir);
    return sh(cmd);
}

/* Builds KIND's driver and prints its sizes (host .text/.rodata, scratch, aarch64 .o). */
static int build(const char *kind)
{
    char cmd[4096];
    snprintf(cmd, sizeof cmd, "gcc " FLAGS " -c %s/%s/nightjar_depth.c -o %s/%s/nd.o && gcc " FLAGS " -I%s/%s " DRIVER
             " %s/%s/nd.o -o %s/%s/driver -lm", dir, kind, dir, kind, dir, kind, dir, kind, dir, kind);
    if (sh(cmd)) return -1;
    snprintf(cmd, sizeof cmd, "printf '%%-5s ' %s; size -A %s/%s/nd.o | awk '$1 == \".text\" {t += $2} $1 ~ /^\\.rodata/ "
             "{r += $2} END {printf \"code %%7.1f KiB  weights %%8.1f KiB  \", t / 1024, r / 1024}'; "
             "grep -m1 '^#define .*SCRATCH_FLOATS' %s/%s/nightjar_depth.h | awk '{printf \"scratch %%7.1f KiB  \", $3 * 4 / 1024}';"
             " (aarch64-linux-gnu-gcc -std=c99 -O3 -c %s/%s/nightjar_depth.c -o %s/%s/arm.o 2>/dev/null && "
             "stat -c 'aarch64 -O3 object %%s bytes' %s/%s/arm.o) || echo 'aarch64: no cross compiler'",
             kind, dir, kind, dir, kind, dir, kind, dir, kind, dir, kind);
    return sh(cmd);
}

/* The fastest of RUNS runs of one contender, in seconds. */
static double run_one(int which)
{
    char cmd[2048], out[256];
    snprintf(out, sizeof out, "%s/run.txt", dir);
    if (which < 2)
        snprintf(cmd, sizeof cmd, "%s/%s/driver %s/frame.rgb 1 %s/depth.f32 %d > %s", dir, which ? "int8" : "f32", dir, dir,
                 RUNS, out);
    else
        snprintf(cmd, sizeof cmd, "/usr/bin/python3 " CV_SCRIPT " %s/model.onnx %s/frame.rgb %d %d %d > %s", dir, dir, BW,
                 BH, RUNS, out);
    if (sh(cmd)) return NAN;
    return read_double(out, "min_seconds_per_frame ");
}

/* One-thread sgemm GFLOP/s (OpenBLAS, as the process runs it), 512 x 512 x 512, best of 5. */
static double sgemm_gflops(void)
{
    const int n = 512;
    float *a = malloc(sizeof(float) * n * n), *b = malloc(sizeof(float) * n * n), *c = malloc(sizeof(float) * n * n);
    double best = 0;
    for (int i = 0; a && b && c && i < n * n; i++) {
        a[i] = (float)(i % 7) * 0.1f;
        b[i] = (float)(i % 5) * 0.1f;
    }
    for (int r = 0; a && b && c && r < 5; r++) {
        clock_t t0 = clock();
        cblas_sgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, n, n, n, 1.0f, a, n, b, n, 0.0f, c, n);
        double s = (double)(clock() - t0) / CLOCKS_PER_SEC, g = 2.0 * n * n * n / s * 1e-9;
        if (g > best) best = g;
    }
    free(a);
    free(b);
    free(c);
    return best;
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

/* The middle of ROUNDS (odd) values. */
static double median(double *v)
{
    qsort(v, ROUNDS, sizeof *v, cmp_double);
    return v[ROUNDS / 2];
}

static int side_by_side(double flops)
{
    static const char *const NAMES[3] = {"exported C f32", "exported C int8", "OpenCV DNN (1 thread)"};
    double t[3][ROUNDS], gemm[ROUNDS];
    printf("%-6s %12s %12s %12s %10s %10s\n", "round", "f32 ms", "int8 ms", "OpenCV ms", "f32/CV", "int8/f32");
    for (int r = 0; r < ROUNDS; r++) {
        for (int k = 0; k < 3; k++) {
            int which = (r + k) % 3;
            t[which][r] = run_one(which);
            if (isnan(t[which][r])) {
                fprintf(stderr, "bench_export: %s failed\n", NAMES[which]);
                return -1;
            }
        }
        gemm[r] = sgemm_gflops();
        printf("%-6d %12.2f %12.2f %12.2f %10.2f %10.2f\n", r + 1, 1e3 * t[0][r], 1e3 * t[1][r], 1e3 * t[2][r],
               t[0][r] / t[2][r], t[1][r] / t[0][r]);
    }
    /* ratios: the median of the per-round ratios (a round's three runs are close
     * in time, the rounds may not be) */
    double m[3], rcv[ROUNDS], r8[ROUNDS];
    for (int r = 0; r < ROUNDS; r++) {
        rcv[r] = t[0][r] / t[2][r];
        r8[r] = t[1][r] / t[0][r];
    }
    for (int k = 0; k < 3; k++) m[k] = median(t[k]);
    double g = median(gemm), ratio_cv = median(rcv), ratio_8 = median(r8);
    printf("%-6s %12.2f %12.2f %12.2f %10.2f %10.2f\n", "median", 1e3 * m[0], 1e3 * m[1], 1e3 * m[2], ratio_cv,
           ratio_8);
    printf("f32 / OpenCV %.2f (issue 21: <= 0.5); int8 / f32 %.2f (<= 0.6)\n", ratio_cv, ratio_8);
    FILE *la = fopen("/proc/loadavg", "r");
    char load[64] = "?";
    if (la && fgets(load, sizeof load, la)) load[strcspn(load, " ")] = 0;
    if (la) fclose(la);
    printf("load average %s at the end\n", load);
    printf("f32: %.1f GFLOP/s = %.2f x one-thread OpenBLAS sgemm (%.1f GFLOP/s, 512^3, best of 5 per round, median)\n",
           flops / m[0] * 1e-9, flops / m[0] * 1e-9 / g, g);
    return 0;
}

int main(void)
{
    if (access("./nightjar", X_OK) != 0 || access(DRIVER, R_OK) != 0 || access(CV_SCRIPT, R_OK) != 0) {
        fprintf(stderr, "bench_export: run from the repository root after 'make nightjar'\n");
        return 1;
    }
    if (!mkdtemp(dir)) return 1;
    nj_threads_init(1);
    nj_model m;
    nj_train_config cfg;
    FILE *la = fopen("/proc/loadavg", "r");
    char load[64] = "?";
    if (la && fgets(load, sizeof load, la)) load[strcspn(load, " ")] = 0;
    if (la) fclose(la);
    int rc = make_model(&m, &cfg) || make_data() || export_all() ? 1 : 0;
    if (!rc) {
        double flops = export_flops(&m);
        printf("bench-export: default depth net (%d stages, width %g) at %dx%d, %.3f GFLOP per frame (exported graph), "
               "one core, gcc %s; load average %s at the start\n", m.cfg.stages, (double)m.cfg.width, BW, BH,
               flops * 1e-9, FLAGS, load);
        rc = build("f32") || build("int8") || side_by_side(flops) ? 1 : 0;
        nj_model_free(&m);
    }
    if (rc) fprintf(stderr, "bench_export: failed (see above)\n");
    char cmd[128];
    snprintf(cmd, sizeof cmd, "rm -rf %s", dir);
    if (sh(cmd)) fprintf(stderr, "bench_export: could not remove %s\n", dir);
    return rc;
}

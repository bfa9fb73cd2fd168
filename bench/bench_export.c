/* bench/bench_export.c — the C code emitted by `nightjar export --format c`
 * for the default architecture (5 stages, width 1, batch norm; untrained
 * weights) at 96x320: latency per frame on one core (the emitted code has no
 * threads), code size (.text) and weight size (.rodata) of the compiled
 * object for f32 and int8, peak scratch memory, and the compile time of the
 * generated file.  nightjar's own single-threaded inference (OpenBLAS) is
 * timed beside it for context.  Run from the repository root (make
 * bench-export).  Not a test. */
#include "data/image.h"
#include "train/loop/checkpoint.h"
#include "train/model/infer.h"
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <unistd.h>

#define BW 320
#define BH 96
#define REPEAT 5
#define DRIVER "tests/ref/export_driver.c"
static const char *const FLAGS[2] = {"-std=c99 -O3 -march=native", "-std=c99 -O2 -march=native"};

static char dir[] = "/tmp/nj_bench_export_XXXXXX";

static double now(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

static int sh(const char *cmd)
{
    int rc = system(cmd);
    return rc == 0 ? 0 : -1;
}

static long read_number(const char *path, const char *key)
{
    FILE *f = fopen(path, "r");
    char line[256];
    long v = -1;
    size_t n = strlen(key);
    while (f && fgets(line, sizeof line, f))
        if (!strncmp(line, key, n)) v = atol(line + n);
    if (f) fclose(f);
    return v;
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

/* A deterministic test frame (gradients and stripes), as bytes and as an nj_image. */
static int make_frame(nj_image *im)
{
    char path[128];
    unsigned char *rgb = malloc((size_t)BW * BH * 3);
    if (!rgb || nj_image_alloc(im, BW, BH)) return -1;
    for (int y = 0; y < BH; y++)
        for (int x = 0; x < BW; x++)
            for (int c = 0; c < 3; c++) {
                unsigned char v = (unsigned char)((x * (c + 1) + y * 3 + ((x / 8 + y / 8) % 2) * 40) & 0xff);
                rgb[((size_t)y * BW + x) * 3 + c] = v;
                im->data[((size_t)c * BH + y) * BW + x] = (float)v / 255.0f;
            }
    snprintf(path, sizeof path, "%s/frame.rgb", dir);
    FILE *f = fopen(path, "wb");
    int ok = f && fwrite(rgb, 1, (size_t)BW * BH * 3, f) == (size_t)BW * BH * 3;
    if (f && fclose(f)) ok = 0;
    free(rgb);
    return ok ? 0 : -1;
}

static int export_kind(const char *weights)
{
    char cmd[2048];
    snprintf(cmd, sizeof cmd, "mkdir -p %s/%s && ./nightjar export --model %s/default.ckpt --format c --weights %s "
             "--size %dx%d --out %s/%s/nightjar_depth.c > /dev/null", dir, weights, dir, weights, BW, BH, dir, weights);
    return sh(cmd);
}

/* Compiles one exported weight kind with `flags` and times it. */
static int bench_kind(const char *weights, const char *flags, double flops)
{
    char cmd[2048], out[128];
    double t0 = now();
    snprintf(cmd, sizeof cmd, "gcc %s -c %s/%s/nightjar_depth.c -o %s/%s/nd.o && gcc %s -I%s/%s " DRIVER
             " %s/%s/nd.o -o %s/%s/driver -lm", flags, dir, weights, dir, weights, flags, dir, weights, dir, weights,
             dir, weights);
    if (sh(cmd)) return -1;
    double compile = now() - t0;
    snprintf(out, sizeof out, "%s/%s/sizes.txt", dir, weights);
    snprintf(cmd, sizeof cmd, "size -A %s/%s/nd.o | awk '$1 == \".text\" {t += $2} $1 ~ /^\\.rodata/ {r += $2} "
             "END {print \"text \" t + 0; print \"rodata \" r + 0}' > %s", dir, weights, out);
    if (sh(cmd)) return -1;
    long text = read_number(out, "text "), rodata = read_number(out, "rodata ");
    snprintf(out, sizeof out, "%s/%s/run.txt", dir, weights);
    snprintf(cmd, sizeof cmd, "%s/%s/driver %s/frame.rgb 1 %s/%s/depth.f32 %d > %s", dir, weights, dir, dir, weights,
             REPEAT, out);
    if (sh(cmd)) return -1;
    double sec = read_double(out, "seconds_per_frame ");
    long scratch = read_number(out, "scratch_bytes ");
    printf("emitted C %-4s %-3s %7.1f ms/frame %6.2f GFLOP/s  code %6.1f KiB  weights %8.1f KiB  scratch %7.1f KiB"
           "  (compile %.1f s)\n", weights, strstr(flags, "-O3") ? "-O3" : "-O2", 1e3 * sec, flops / sec * 1e-9,
           text / 1024.0, rodata / 1024.0, scratch / 1024.0, compile);
    return 0;
}

static void bench_infer(nj_model *m, const nj_image *im, double flops)
{
    nj_infer inf;
    char err[512];
    float *depth = malloc(sizeof(float) * BW * BH);
    if (!depth || nj_infer_init(&inf, m, BW, BH, err, sizeof err)) {
        free(depth);
        return;
    }
    nj_infer_depth(&inf, im, BW, BH, depth, NULL, err, sizeof err);   /* warm-up */
    double t0 = now();
    for (int i = 0; i < REPEAT; i++) nj_infer_depth(&inf, im, BW, BH, depth, NULL, err, sizeof err);
    double sec = (now() - t0) / REPEAT;
    printf("nightjar infer  %8.1f ms/frame  %6.2f GFLOP/s  (im2col + OpenBLAS sgemm, 1 thread, for comparison)\n",
           1e3 * sec, flops / sec * 1e-9);
    nj_infer_free(&inf);
    free(depth);
}

int main(void)
{
    if (access("./nightjar", X_OK) != 0 || access(DRIVER, R_OK) != 0) {
        fprintf(stderr, "bench_export: run from the repository root after 'make nightjar'\n");
        return 1;
    }
    if (!mkdtemp(dir)) return 1;
    nj_threads_init(1);
    nj_model m;
    nj_train_config cfg;
    nj_image im = {0, 0, NULL};
    int rc = make_model(&m, &cfg) || make_frame(&im) ? 1 : 0;
    if (!rc) {
        double flops = nj_depth_flops(&m, BH, BW);
        printf("bench-export: default depth net (%d stages, width %g) at %dx%d, %.2f GFLOP per frame (all heads), "
               "one core; emitted code built with gcc %s (or -O2)\n", m.cfg.stages, (double)m.cfg.width, BW, BH,
               flops * 1e-9, FLAGS[0]);
        const char *kinds[2] = {"f32", "int8"};
        for (int f = 0; f < 2 && !rc; f++)
            for (int k = 0; k < 2 && !rc; k++)
                if ((f == 0 && export_kind(kinds[k])) || bench_kind(kinds[k], FLAGS[f], flops)) {
                    fprintf(stderr, "bench_export: export, compile or run failed\n");
                    rc = 1;
                }
        bench_infer(&m, &im, flops);
        nj_model_free(&m);
    }
    nj_image_free(&im);
    char cmd[128];
    snprintf(cmd, sizeof cmd, "rm -rf %s", dir);
    if (sh(cmd)) fprintf(stderr, "bench_export: could not remove %s\n", dir);
    return rc;
}

/* bench/bench_data.c — throughput of the data pipeline: renders a small
 * synthetic dataset (1 sequence, 60 frames, 640×480, stereo) into a scratch
 * folder, then times the loader producing batches of 4 at 320×240 (area
 * downscale, flip, colour jitter, 2 temporal sources + stereo partner) with
 * 1 and 2 worker threads, consuming as fast as it can.  Not a test.
 * `bench_data WxH [WxH ...]` loads at those sizes instead (used by make
 * bench's side-by-side table) and prints "loader_samples_per_s_WxH=X" (1 worker)
 * for each. */
#include "data/loader.h"
#include "data/synth.h"
#include <omp.h>
#include <stdio.h>
#include <stdlib.h>

enum { STEPS = 40 };

static int size_w = 320, size_h = 240;

static double samples_per_second(const nj_dataset *ds, const nj_sample *s, int n, int workers)
{
    nj_loader_config c;
    char err[512];
    nj_loader_config_default(&c);
    c.width = size_w;
    c.height = size_h;
    c.workers = workers;
    c.prefetch = 2 * workers;
    nj_loader *L = nj_loader_create(ds, s, n, &c, err, sizeof err);
    if (!L) { fprintf(stderr, "bench_data: %s\n", err); return 0; }
    double t0 = omp_get_wtime();
    for (int i = 0; i < STEPS; i++)
        if (!nj_loader_next(L, err, sizeof err)) fprintf(stderr, "bench_data: %s\n", err);
    double dt = omp_get_wtime() - t0;
    nj_loader_destroy(L);
    return STEPS * c.batch / dt;
}

int main(int argc, char **argv)
{
    for (int i = 1; i < argc; i++)
        if (sscanf(argv[i], "%dx%d", &size_w, &size_h) != 2 || size_w < 8 || size_h < 8) {
            fprintf(stderr, "usage: bench_data [WxH ...]\n");
            return 2;
        }
    char dir[] = "/tmp/nj_bench_data_XXXXXX", json[64], err[512], cmd[96];
    if (!mkdtemp(dir)) return 1;
    nj_synth_config sc;
    nj_synth_config_default(&sc);
    sc.out = dir;
    sc.frames = 60;
    sc.sequences = 1;
    sc.width = 640;
    sc.height = 480;
    sc.stereo = 1;
    double t0 = omp_get_wtime();
    if (nj_synth_run(&sc, err, sizeof err)) { fprintf(stderr, "bench_data: %s\n", err); return 1; }
    double render = omp_get_wtime() - t0;
    snprintf(json, sizeof json, "%s/dataset.json", dir);
    nj_data_options o;
    nj_data_options_default(&o);
    nj_dataset ds;
    nj_problems pr;
    nj_problems_init(&pr);
    t0 = omp_get_wtime();
    int bad = nj_dataset_open(json, &o, &ds, &pr);
    double check = omp_get_wtime() - t0;
    nj_sample *s = NULL;
    int n = bad ? 0 : nj_dataset_samples(&ds, NJ_SPLIT_TRAIN, &o, &s);
    if (n > 0) {
        printf("synth: %.2f s for 120 frames at 640x480 (%.1f frames/s)\n", render, 120 / render);
        printf("check-data: %.2f s for 120 images (%.0f images/s)\n", check, 120 / check);
        for (int a = argc > 1 ? 1 : 0; a < (argc > 1 ? argc : 1); a++) {
            if (a > 0) sscanf(argv[a], "%dx%d", &size_w, &size_h);
            double one = 0;
            for (int w = 1; w <= 2; w++) {
                double r = samples_per_second(&ds, s, n, w);
                if (w == 1) one = r;
                printf("loader, %d worker%s: %.1f samples/s (batch 4 at %dx%d, 4 images per sample)\n", w,
                       w == 1 ? "" : "s", r, size_w, size_h);
            }
            printf("loader_samples_per_s_%dx%d=%.1f\n", size_w, size_h, one);
        }
    }
    free(s);
    nj_dataset_free(&ds);
    nj_problems_free(&pr);
    snprintf(cmd, sizeof cmd, "rm -rf '%s'", dir);
    return system(cmd) == 0 && n > 0 ? 0 : 1;
}

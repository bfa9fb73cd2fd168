/* bench/bench_data.c — throughput of the data pipeline.  Not a test.
 *
 * `bench_data` (make bench-data): renders one synthetic sequence of 24 frames
 * at 640x480 (sensor noise 0.01), makes JPEG copies (quality 90) at 320x240,
 * 1280x720 and 1920x1080 — enlarged, with fresh per-pixel noise at the new
 * size so the files carry a camera's detail — and times the training loader
 * at 320x96 (batch 4; each sample: target + 2 temporal sources, flip, colour
 * jitter) for 1, 2 and all cores' worth of workers, decoding every frame and
 * then from a warm frame store (data/framestore.h; its build time is shown
 * apart).  Each figure is samples/s with the loader consumed as fast as it
 * can produce (no training step competes for the cores): the loader's own
 * capacity; next to it the process's CPU time per sample, which other jobs
 * on the machine disturb much less than the rate.  Timing starts after the first batch, so the prefetch ring's
 * initial fill is not counted, and runs for at least MIN_SECONDS.
 *
 * `bench_data WxH [WxH ...]`: the former mode used by make bench's
 * side-by-side table — 640x480 PNG frames (stereo) loaded at those sizes,
 * "loader_samples_per_s_WxH=X" (1 worker) for each.
 *
 * `bench_data --to-jpeg DIR`: rewrites every PNG frame of the dataset
 * DIR/dataset.json (its "images" and "right_images" folders) as a JPEG of
 * quality 90 and removes the PNG — for timing training on JPEG frames made
 * with `nightjar synth` (DEVELOPERS.md, "Loader workers and the frame store").
 */
#include "data/dataset.h"
#include "data/framestore.h"
#include "data/image.h"
#include "data/loader.h"
#include "data/synth.h"
#include "nn/rng.h"
#include <dirent.h>
#include <omp.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>
#include <stb_image_write.h>

enum { STEPS = 40, FRAMES = 24 };
#define MIN_SECONDS 2.5
#define TRAIN_W 320
#define TRAIN_H 96
#define JPEG_QUALITY 90

static int size_w = 320, size_h = 240;

/* ---- the former mode: PNG frames, 1 and 2 workers at the given sizes ---- */

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

static int open_data(const char *json, int stereo, nj_dataset *ds, nj_sample **s)
{
    nj_data_options o;
    nj_data_options_default(&o);
    o.stereo = stereo;
    o.dup_threshold = 0;
    nj_problems pr;
    nj_problems_init(&pr);
    int bad = nj_dataset_open(json, &o, ds, &pr);
    if (bad) nj_problems_print(&pr, stderr);
    nj_problems_free(&pr);
    int n = bad ? 0 : nj_dataset_samples(ds, NJ_SPLIT_TRAIN, &o, s);
    return n > 0 ? n : 0;
}

static int former_mode(int argc, char **argv)
{
    for (int i = 1; i < argc; i++)
        if (sscanf(argv[i], "%dx%d", &size_w, &size_h) != 2 || size_w < 8 || size_h < 8) {
            fprintf(stderr, "usage: bench_data [WxH ...] | --to-jpeg DIR\n");
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
    if (nj_synth_run(&sc, err, sizeof err)) { fprintf(stderr, "bench_data: %s\n", err); return 1; }
    snprintf(json, sizeof json, "%s/dataset.json", dir);
    nj_dataset ds;
    nj_sample *s = NULL;
    int n = open_data(json, 1, &ds, &s);
    for (int a = 1; n > 0 && a < argc; a++) {
        sscanf(argv[a], "%dx%d", &size_w, &size_h);
        printf("loader_samples_per_s_%dx%d=%.1f\n", size_w, size_h, samples_per_second(&ds, s, n, 1));
    }
    free(s);
    nj_dataset_free(&ds);
    snprintf(cmd, sizeof cmd, "rm -rf '%s'", dir);
    return system(cmd) == 0 && n > 0 ? 0 : 1;
}

/* ---- JPEG frames --------------------------------------------------------- */

/* Planar float RGB → interleaved 8-bit → JPEG. */
static int write_jpeg(const char *path, const nj_image *im)
{
    size_t n = (size_t)im->w * im->h;
    unsigned char *px = malloc(3 * n);
    if (!px) return -1;
    for (size_t i = 0; i < n; i++)
        for (int c = 0; c < 3; c++) {
            float v = im->data[c * n + i];
            px[3 * i + c] = (unsigned char)(v <= 0 ? 0 : v >= 1 ? 255 : v * 255.0f + 0.5f);
        }
    int ok = stbi_write_jpg(path, im->w, im->h, 3, px, JPEG_QUALITY);
    free(px);
    return ok ? 0 : -1;
}

/* Every PNG of folder `dir` rewritten as NAME.jpg; the PNG removed. */
static int folder_to_jpeg(const char *dir, int *count)
{
    char **names = NULL, err[512];
    int n = nj_list_frames(dir, &names), rc = n < 0 ? -1 : 0;
    for (int i = 0; !rc && i < n; i++) {
        size_t len = strlen(names[i]);
        if (len < 4 || strcmp(names[i] + len - 4, ".png")) continue;
        char *png = nj_path_join(dir, names[i]), jpg[4096];
        nj_image im;
        snprintf(jpg, sizeof jpg, "%.*s.jpg", (int)strlen(png) - 4, png);
        rc = nj_image_load(png, &im, err, sizeof err);
        if (!rc) {
            rc = write_jpeg(jpg, &im) || remove(png);
            nj_image_free(&im);
        }
        if (rc) fprintf(stderr, "bench_data: %s: %s\n", png, err[0] ? err : "cannot write the JPEG");
        free(png);
        (*count)++;
    }
    nj_free_names(names, n);
    return rc;
}

static int to_jpeg(const char *dir)
{
    char json[4096];
    snprintf(json, sizeof json, "%s/dataset.json", dir);
    nj_dataset ds;
    nj_problems pr;
    nj_problems_init(&pr);
    int bad = nj_dataset_parse(json, &ds, &pr), count = 0, rc = bad ? 1 : 0;
    if (bad) nj_problems_print(&pr, stderr);
    nj_problems_free(&pr);
    for (int s = 0; !rc && s < ds.nseq; s++) {
        rc = folder_to_jpeg(ds.seq[s].images, &count);
        if (!rc && ds.seq[s].right_images) rc = folder_to_jpeg(ds.seq[s].right_images, &count);
    }
    if (!bad) nj_dataset_free(&ds);
    printf("bench_data: %d PNG frames of %s rewritten as JPEG (quality %d)\n", count, json, JPEG_QUALITY);
    return rc ? 1 : 0;
}

/* DIR/jWxH/dataset.json: the 640x480 frames of `src` at w×h as JPEGs, with
 * fresh noise (std 0.01) at the new size. */
static int make_jpeg_set(const nj_dataset *src, const char *dir, int w, int h, char *json, size_t jlen)
{
    const nj_sequence *q = &src->seq[0];
    char folder[512], path[700];
    snprintf(folder, sizeof folder, "%s/j%dx%d/cam0", dir, w, h);
    snprintf(path, sizeof path, "mkdir -p '%s'", folder);
    if (system(path) != 0) return -1;
    nj_rng r;
    nj_rng_seed(&r, (uint64_t)w * 7919 + h);
    int rc = 0;
    for (int f = 0; !rc && f < q->nframes; f++) {
        char err[512], *p = nj_path_join(q->images, q->frames[f]);
        nj_image im, big;
        rc = nj_image_load(p, &im, err, sizeof err);
        free(p);
        if (rc) { fprintf(stderr, "bench_data: %s\n", err); break; }
        rc = nj_image_resize(&im, w, h, &big);
        nj_image_free(&im);
        if (rc) break;
        for (size_t i = 0; i < (size_t)3 * w * h; i++) big.data[i] += 0.01f * (float)nj_rng_normal(&r);
        snprintf(path, sizeof path, "%s/%06d.jpg", folder, f);
        rc = write_jpeg(path, &big);
        nj_image_free(&big);
    }
    nj_camera k = nj_camera_resize(q->camera, q->width, q->height, w, h);
    snprintf(json, jlen, "%s/j%dx%d/dataset.json", dir, w, h);
    FILE *out = rc ? NULL : fopen(json, "w");
    if (out) {
        fprintf(out, "{\"sequences\": [{\"name\": \"bench\", \"images\": \"cam0\", \"camera\": "
                     "{\"fx\": %.6g, \"fy\": %.6g, \"cx\": %.6g, \"cy\": %.6g}}]}\n", k.fx, k.fy, k.cx, k.cy);
        rc = fclose(out) ? -1 : 0;
    }
    return out ? rc : -1;
}

/* ---- timing ---------------------------------------------------------------- */

static double cpu_seconds(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_PROCESS_CPUTIME_ID, &ts);
    return ts.tv_sec + ts.tv_nsec * 1e-9;
}

/* samples/s of a loader at the training size: after the first batch, until
 * MIN_SECONDS have passed (at least 5 batches); *cpu_ms gets the process's
 * CPU time per sample over the same span (steadier than the rate when other
 * jobs share the cores). */
static double rate(const nj_dataset *ds, const nj_sample *s, int n, int workers, const nj_framestore *fs,
                   double *cpu_ms)
{
    nj_loader_config c;
    char err[512];
    nj_loader_config_default(&c);
    c.width = TRAIN_W;
    c.height = TRAIN_H;
    c.workers = workers;
    c.prefetch = (workers + c.batch - 1) / c.batch + 1;   /* as the trainer sizes it */
    if (c.prefetch < 2) c.prefetch = 2;
    c.store = fs;
    *cpu_ms = 0;
    nj_loader *L = nj_loader_create(ds, s, n, &c, err, sizeof err);
    if (!L || !nj_loader_next(L, err, sizeof err)) {
        fprintf(stderr, "bench_data: %s\n", err);
        nj_loader_destroy(L);
        return 0;
    }
    double t0 = omp_get_wtime(), c0 = cpu_seconds(), dt = 0;
    int steps = 0;
    while (steps < 5 || dt < MIN_SECONDS) {
        if (!nj_loader_next(L, err, sizeof err)) fprintf(stderr, "bench_data: %s\n", err);
        steps++;
        dt = omp_get_wtime() - t0;
    }
    /* the prefetched batches were prepared inside the span but not counted:
     * they balance the ones prepared before it, within prefetch batches */
    *cpu_ms = (cpu_seconds() - c0) * 1e3 / (steps * c.batch);
    nj_loader_destroy(L);
    return steps * c.batch / dt;
}

static double file_mb(const char *dir)
{
    char **names = NULL;
    int n = nj_list_frames(dir, &names);
    double sum = 0;
    for (int i = 0; i < n; i++) {
        char *p = nj_path_join(dir, names[i]);
        struct stat st;
        if (p && stat(p, &st) == 0) sum += (double)st.st_size;
        free(p);
    }
    nj_free_names(names, n);
    return n > 0 ? sum / n / 1e6 : 0;
}

/* One source size: every worker count, decoding and from the store. */
static int bench_size(const char *dir, const nj_dataset *src, int w, int h, const int *workers, int nw,
                      double *decoded, double *stored, double *cpu_decoded, double *cpu_stored)
{
    char json[600], err[1024], store_dir[600];
    nj_dataset ds;
    nj_sample *s = NULL;
    if (make_jpeg_set(src, dir, w, h, json, sizeof json)) { fprintf(stderr, "bench_data: cannot write %dx%d JPEGs\n", w, h); return -1; }
    int n = open_data(json, 0, &ds, &s);
    if (n <= 0) return -1;
    snprintf(store_dir, sizeof store_dir, "%s/store%dx%d", dir, w, h);
    nj_framestore_config fc = {.width = TRAIN_W, .height = TRAIN_H, .dir = store_dir, .threads = 0, .build = 1,
                               .say = NULL};
    double t0 = omp_get_wtime();
    nj_framestore *fs = nj_framestore_open(&ds, s, n, &fc, err, sizeof err);
    double build = omp_get_wtime() - t0;
    if (!fs) fprintf(stderr, "bench_data: %s\n", err);
    printf("%dx%d JPEG (%.2f MB per frame, %d frames, %d samples):", w, h, file_mb(ds.seq[0].images),
           ds.seq[0].nframes, n);
    if (fs) printf(" frame store %.1f MB, built in %.2f s (%.0f frames/s)", nj_framestore_bytes(fs) / 1e6, build,
                   nj_framestore_frames(fs) / build);
    printf("\n");
    for (int k = 0; k < nw; k++) {
        decoded[k] = rate(&ds, s, n, workers[k], NULL, &cpu_decoded[k]);
        stored[k] = fs ? rate(&ds, s, n, workers[k], fs, &cpu_stored[k]) : 0;
        printf("  %2d worker%s  decoding %7.1f samples/s (%5.1f CPU ms each)   frame store %7.1f samples/s "
               "(%5.1f CPU ms each)\n", workers[k], workers[k] == 1 ? " " : "s", decoded[k], cpu_decoded[k],
               stored[k], cpu_stored[k]);
        fflush(stdout);
    }
    nj_framestore_close(fs);
    free(s);
    nj_dataset_free(&ds);
    return 0;
}

static int main_bench(void)
{
    char dir[] = "/tmp/nj_bench_data_XXXXXX", json[64], err[512], cmd[96];
    if (!mkdtemp(dir)) return 1;
    nj_synth_config sc;
    nj_synth_config_default(&sc);
    sc.out = dir;
    sc.frames = FRAMES;
    sc.sequences = 1;
    sc.width = 640;
    sc.height = 480;
    sc.sensor_noise = 0.01f;
    double t0 = omp_get_wtime();
    if (nj_synth_run(&sc, err, sizeof err)) { fprintf(stderr, "bench_data: %s\n", err); return 1; }
    printf("synth: %.2f s for %d frames at 640x480\n", omp_get_wtime() - t0, FRAMES);
    snprintf(json, sizeof json, "%s/dataset.json", dir);
    nj_dataset src;
    nj_problems pr;
    nj_problems_init(&pr);
    int bad = nj_dataset_parse(json, &src, &pr) || nj_sequence_validate(&src.seq[0], &(nj_data_options){0}, &pr);
    nj_problems_free(&pr);
    int cores = omp_get_num_procs(), workers[3] = {1, 2, cores}, nw = cores > 2 ? 3 : 2;
    static const int sizes[3][2] = {{320, 240}, {1280, 720}, {1920, 1080}};
    double dec[3][3] = {{0}}, sto[3][3] = {{0}}, cdec[3][3] = {{0}}, csto[3][3] = {{0}};
    printf("loader at %dx%d, batch 4, 3 frames per sample (target + 2 sources), flip + colour jitter;\n"
           "samples/s with nothing else running (the loader's capacity); %d cores\n", TRAIN_W, TRAIN_H, cores);
    for (int i = 0; !bad && i < 3; i++)
        if (bench_size(dir, &src, sizes[i][0], sizes[i][1], workers, nw, dec[i], sto[i], cdec[i], csto[i])) bad = 1;
    if (!bad) {
        int a = nw - 1;
        printf("all %d cores: frame store from 1280x720 / decoding 320x240 = %.2f; from 1920x1080 = %.2f; "
               "decoding 1280x720 / decoding 320x240 = %.2f\n", workers[a], sto[1][a] / dec[0][a],
               sto[2][a] / dec[0][a], dec[1][a] / dec[0][a]);
        printf("CPU ms per sample, 1 worker: decoding %.1f / %.1f / %.1f (320x240 / 1280x720 / 1920x1080), "
               "frame store %.1f / %.1f / %.1f\n", cdec[0][0], cdec[1][0], cdec[2][0], csto[0][0], csto[1][0],
               csto[2][0]);
        for (int i = 0; i < 3; i++)
            for (int k = 0; k < nw; k++)
                printf("loader_samples_per_s_%dx%d_w%d_decode=%.1f loader_samples_per_s_%dx%d_w%d_store=%.1f "
                       "loader_cpu_ms_per_sample_%dx%d_w%d_decode=%.2f loader_cpu_ms_per_sample_%dx%d_w%d_store=%.2f\n",
                       sizes[i][0], sizes[i][1], workers[k], dec[i][k], sizes[i][0], sizes[i][1], workers[k],
                       sto[i][k], sizes[i][0], sizes[i][1], workers[k], cdec[i][k], sizes[i][0], sizes[i][1],
                       workers[k], csto[i][k]);
    }
    nj_dataset_free(&src);
    snprintf(cmd, sizeof cmd, "rm -rf '%s'", dir);
    return system(cmd) == 0 && !bad ? 0 : 1;
}

int main(int argc, char **argv)
{
    if (argc == 3 && !strcmp(argv[1], "--to-jpeg")) return to_jpeg(argv[2]);
    if (argc > 1) return former_mode(argc, argv);
    return main_bench();
}

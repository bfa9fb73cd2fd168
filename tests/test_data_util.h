/* tests/test_data_util.h — small helpers shared by the data/, synth and export
 * tests: a scratch folder, running an outside-reference script with
 * /usr/bin/python3, comparing float arrays, median-scaled AbsRel. */
#ifndef NJ_TEST_DATA_UTIL_H
#define NJ_TEST_DATA_UTIL_H
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

/* Creates a fresh scratch folder; its path is written to dir (≥ 64 bytes). */
static inline int tdu_tmpdir(char *dir, size_t n)
{
    snprintf(dir, n, "/tmp/nj_data_test_XXXXXX");
    return mkdtemp(dir) ? 0 : -1;
}

static inline void tdu_rmtree(const char *dir)
{
    char cmd[512];
    if (strncmp(dir, "/tmp/nj_data_test_", 18) != 0) return;
    snprintf(cmd, sizeof cmd, "rm -rf '%s'", dir);
    if (system(cmd) != 0) fprintf(stderr, "warning: could not remove %s\n", dir);
}

/* Path of tests/ref/NAME, found from the working directory or from the test
 * binary's location (build/tests/test_x → ../../tests/ref). */
static inline void tdu_ref_path(const char *argv0, const char *name, char *out, size_t n)
{
    snprintf(out, n, "tests/ref/%s", name);
    if (access(out, R_OK) == 0) return;
    const char *slash = strrchr(argv0, '/');
    int len = slash ? (int)(slash - argv0) : 1;
    snprintf(out, n, "%.*s/../../tests/ref/%s", len, slash ? argv0 : ".", name);
}

static int tdu_cmp_float(const void *a, const void *b)
{
    float x = *(const float *)a, y = *(const float *)b;
    return (x > y) - (x < y);
}

/* AbsRel of nframes depth maps pred (npix each, back to back) against the
 * truth gt (same layout; pixels with gt > 0 count), each frame's prediction
 * scaled by median(gt) / median(pred) first (the monocular convention).
 * NAN for a frame without valid pixels or out of memory. */
static inline double tdu_absrel_median_scaled(const float *pred, const float *gt, int nframes, int npix)
{
    float *pa = malloc(sizeof(float) * (size_t)npix * 4), *ga = pa + npix, *tp = ga + npix, *tg = tp + npix;
    double s = 0;
    long count = 0;
    for (int k = 0; pa && k < nframes; k++) {
        int n = 0;
        for (int p = 0; p < npix; p++)
            if (gt[(size_t)k * npix + p] > 0) {
                pa[n] = pred[(size_t)k * npix + p];
                ga[n++] = gt[(size_t)k * npix + p];
            }
        if (n == 0) {
            count = 0;
            break;
        }
        memcpy(tp, pa, sizeof(float) * (size_t)n);
        memcpy(tg, ga, sizeof(float) * (size_t)n);
        qsort(tp, (size_t)n, sizeof(float), tdu_cmp_float);
        qsort(tg, (size_t)n, sizeof(float), tdu_cmp_float);
        double scale = (double)tg[n / 2] / tp[n / 2];
        for (int i = 0; i < n; i++) s += fabs(pa[i] * scale - ga[i]) / ga[i];
        count += n;
    }
    free(pa);
    return count ? s / (double)count : NAN;
}

/* Reads exactly n floats (host byte order) from path into out: 0, or -1
 * when the file is missing or of another length. */
static inline int tdu_read_floats(const char *path, float *out, size_t n)
{
    FILE *f = fopen(path, "rb");
    size_t got = f ? fread(out, sizeof(float), n, f) : 0;
    int extra = f ? fgetc(f) != EOF : 1;
    if (f) fclose(f);
    return got == n && !extra ? 0 : -1;
}

/* Runs "/usr/bin/python3 SCRIPT ARGS"; returns the exit status (0 = ok). */
static inline int tdu_python(const char *script, const char *args)
{
    char cmd[4096];
    snprintf(cmd, sizeof cmd, "/usr/bin/python3 '%s' %s", script, args);
    int rc = system(cmd);
    return rc == 0 ? 0 : (rc == -1 ? -1 : (rc >> 8 ? rc >> 8 : 1));
}

static inline double tdu_max_abs_diff(const float *a, const float *b, size_t n)
{
    double m = 0;
    for (size_t i = 0; i < n; i++) {
        double d = fabs((double)a[i] - b[i]);
        if (!(d <= m)) m = d;
    }
    return m;
}

#endif

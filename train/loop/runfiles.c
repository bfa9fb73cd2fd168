/* train/loop/runfiles.c — run directory layout and checkpoint rotation. */
#include "train/loop/runfiles.h"
#include <dirent.h>
#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

int nj_run_mkdir(const char *dir, char *err, size_t errlen)
{
    char path[4096];
    snprintf(path, sizeof path, "%s", dir);
    for (char *p = path + 1; ; p++) {
        int end = *p == 0;
        if (*p == '/' || end) {
            *p = 0;
            if (mkdir(path, 0755) != 0 && errno != EEXIST) {
                snprintf(err, errlen, "%s: cannot create the run folder: %s", path, strerror(errno));
                return -1;
            }
            if (end) break;
            *p = '/';
        }
    }
    if (access(dir, W_OK) != 0) {
        snprintf(err, errlen, "%s: run folder is not writable: %s", dir, strerror(errno));
        return -1;
    }
    return 0;
}

void nj_run_step_path(const char *dir, long step, char *out, size_t len)
{
    snprintf(out, len, "%s/step-%08ld.ckpt", dir, step);
}

static int cmp_desc(const void *a, const void *b)
{
    long x = *(const long *)a, y = *(const long *)b;
    return (x < y) - (x > y);
}

int nj_run_list_steps(const char *dir, long *out, int max)
{
    DIR *d = opendir(dir);
    if (!d) return 0;
    int n = 0;
    struct dirent *e;
    while ((e = readdir(d))) {
        long step;
        char tail[8];
        if (!(sscanf(e->d_name, "step-%ld.ck%7s", &step, tail) == 2 && !strcmp(tail, "pt") &&
              strlen(e->d_name) == strlen("step-00000000.ckpt")))
            continue;
        if (n < max) { out[n++] = step; continue; }
        int low = 0;                      /* full: keep the newest `max` (readdir order is arbitrary) */
        for (int i = 1; i < n; i++) if (out[i] < out[low]) low = i;
        if (n > 0 && step > out[low]) out[low] = step;
    }
    closedir(d);
    qsort(out, (size_t)n, sizeof *out, cmp_desc);
    return n;
}

void nj_run_prune(const char *dir, int keep)
{
    long steps[4096];
    int n = nj_run_list_steps(dir, steps, 4096);
    for (int i = keep; i < n; i++) {
        char path[4096];
        nj_run_step_path(dir, steps[i], path, sizeof path);
        unlink(path);
    }
}

/* "NAME.XXXXXX.tmp" (data/atomic.c) where NAME is one of the run's files. */
static int is_run_temp(const char *name)
{
    size_t n = strlen(name);
    if (n < 12 || strcmp(name + n - 4, ".tmp") || name[n - 11] != '.') return 0;
    char base[256];
    if (n - 11 >= sizeof base) return 0;
    memcpy(base, name, n - 11);
    base[n - 11] = 0;
    long step;
    char tail[8];
    return !strcmp(base, "best.ckpt") || !strcmp(base, "final.ckpt") || !strcmp(base, "report.html") ||
           (sscanf(base, "step-%ld.ck%7s", &step, tail) == 2 && !strcmp(tail, "pt"));
}

int nj_run_clean_temps(const char *dir)
{
    DIR *d = opendir(dir);
    if (!d) return 0;
    int n = 0;
    struct dirent *e;
    while ((e = readdir(d))) {
        if (!is_run_temp(e->d_name)) continue;
        char path[4096];
        snprintf(path, sizeof path, "%s/%s", dir, e->d_name);
        if (unlink(path) == 0) n++;
    }
    closedir(d);
    return n;
}

/* data/poses.c — reading and writing poses files (see poses.h). */
#include "data/poses.h"
#include "data/atomic.h"
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* 12 finite numbers and nothing else; returns 0 or -1. */
static int parse_line(const char *line, double *v)
{
    const char *p = line;
    for (int i = 0; i < 12; i++) {
        char *end;
        v[i] = strtod(p, &end);
        if (end == p || !isfinite(v[i])) return -1;
        p = end;
    }
    while (*p == ' ' || *p == '\t' || *p == '\r' || *p == '\n') p++;
    return *p ? -1 : 0;
}

static int blank(const char *s)
{
    while (*s == ' ' || *s == '\t' || *s == '\r' || *s == '\n') s++;
    return !*s || *s == '#';
}

int nj_poses_read(const char *path, double **out, char *err, size_t errlen)
{
    *out = NULL;
    FILE *f = fopen(path, "r");
    if (!f) {
        snprintf(err, errlen, "%s: cannot open the poses file: %s", path, strerror(errno));
        return -1;
    }
    char line[4096];
    int n = 0, cap = 0, lineno = 0, rc = 0;
    double *p = NULL;
    while (!rc && fgets(line, sizeof line, f)) {
        lineno++;
        if (blank(line)) continue;
        if (n == cap) {
            cap = cap ? 2 * cap : 256;
            double *m = realloc(p, (size_t)cap * 12 * sizeof(double));
            if (!m) { snprintf(err, errlen, "%s: out of memory", path); rc = -1; break; }
            p = m;
        }
        if (parse_line(line, p + 12 * n)) {
            snprintf(err, errlen, "%s:%d: expected 12 numbers (a row-major 3x4 pose)", path, lineno);
            rc = -1;
        }
        n++;
    }
    fclose(f);
    if (rc) { free(p); return -1; }
    *out = p;
    return n;
}

int nj_poses_write(const char *path, const double *poses, int n, char *err, size_t errlen)
{
    if (err && errlen) err[0] = 0;
    nj_atomic_file a;
    if (nj_atomic_open(&a, path, err, errlen)) return -1;
    int ok = 1;
    for (int i = 0; i < n && ok; i++)
        for (int j = 0; j < 12 && ok; j++)
            ok = fprintf(a.f, "%.9g%c", poses[12 * i + j], j == 11 ? '\n' : ' ') > 0;
    return nj_atomic_close(&a, ok, err, errlen);
}

int nj_poses_keep_every(double *poses, int n, int k)
{
    if (n <= 0) return 0;
    if (k <= 1) return n;
    int m = (n - 1) / k + 1;
    for (int i = 1; i < m; i++) memmove(poses + 12 * i, poses + 12 * (size_t)i * k, sizeof(double) * 12);
    return m;
}

/* data/pfm.c — greyscale portable float maps ("Pf"): ASCII header
 * "Pf\nW H\nSCALE\n", a negative SCALE meaning little-endian floats, then
 * H rows of W floats from the bottom row up.  The reader treats the file as
 * untrusted: size limits and the exact data length are checked. */
#include "data/atomic.h"
#include "data/depthio.h"
#include "data/image.h"
#include <errno.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

static int host_le(void)
{
    uint16_t one = 1;
    return *(unsigned char *)&one == 1;
}

static void swap4(float *p, size_t n)
{
    for (size_t i = 0; i < n; i++) {
        unsigned char *b = (unsigned char *)(p + i), t;
        t = b[0]; b[0] = b[3]; b[3] = t;
        t = b[1]; b[1] = b[2]; b[2] = t;
    }
}

/* Next whitespace-separated token of at most cap-1 chars. */
static int token(FILE *f, char *out, size_t cap)
{
    int c;
    while ((c = fgetc(f)) != EOF && (c == ' ' || c == '\t' || c == '\n' || c == '\r')) {}
    size_t n = 0;
    while (c != EOF && c != ' ' && c != '\t' && c != '\n' && c != '\r') {
        if (n + 1 >= cap) return -1;
        out[n++] = (char)c;
        c = fgetc(f);
    }
    out[n] = 0;
    return n ? 0 : -1;   /* the single whitespace after the token is consumed */
}

static int parse_header(FILE *f, int *w, int *h, int *le, char *why, size_t wl)
{
    char t[64], *end;
    if (token(f, t, sizeof t)) { snprintf(why, wl, "not a PFM file (empty header)"); return -1; }
    if (!strcmp(t, "PF")) { snprintf(why, wl, "colour PFM (PF) is not a depth map; expected Pf"); return -1; }
    if (strcmp(t, "Pf")) { snprintf(why, wl, "not a PFM file (magic '%.8s')", t); return -1; }
    long v[2];
    for (int i = 0; i < 2; i++) {
        if (token(f, t, sizeof t)) { snprintf(why, wl, "PFM header ends early"); return -1; }
        v[i] = strtol(t, &end, 10);
        if (*end || v[i] <= 0 || v[i] > NJ_IMAGE_MAX_SIDE) {
            snprintf(why, wl, "PFM size '%s' is not in 1..%d", t, NJ_IMAGE_MAX_SIDE);
            return -1;
        }
    }
    if (token(f, t, sizeof t)) { snprintf(why, wl, "PFM header lacks the scale"); return -1; }
    double s = strtod(t, &end);
    if (*end || !isfinite(s) || s == 0) { snprintf(why, wl, "PFM scale '%s' is invalid", t); return -1; }
    *w = (int)v[0];
    *h = (int)v[1];
    *le = s < 0;
    if ((long)*w * *h > NJ_IMAGE_MAX_PIXELS) { snprintf(why, wl, "PFM is too large"); return -1; }
    return 0;
}

/* The data section must be exactly w·h floats (checked before allocating). */
static int check_length(FILE *f, long fsize, int w, int h, char *why, size_t wl)
{
    long need = (long)w * h * 4, have = fsize - ftell(f);
    if (have != need) {
        snprintf(why, wl, "PFM %dx%d needs %ld data bytes but has %ld", w, h, need, have);
        return -1;
    }
    return 0;
}

static int read_body(FILE *f, int w, int h, int le, float *out, char *why, size_t wl)
{
    for (int y = h - 1; y >= 0; y--)
        if (fread(out + (size_t)y * w, 4, (size_t)w, f) != (size_t)w) {
            snprintf(why, wl, "read error in the PFM data");
            return -1;
        }
    if (le != host_le()) swap4(out, (size_t)w * h);
    return 0;
}

int nj_pfm_read(const char *path, float **data, int *w, int *h, char *err, size_t errlen)
{
    *data = NULL;
    FILE *f = fopen(path, "rb");
    if (!f) {
        snprintf(err, errlen, "%s: cannot open: %s", path, strerror(errno));
        return -1;
    }
    struct stat st;
    char why[160] = "cannot stat";
    int le = 1, rc = fstat(fileno(f), &st) ? -1 : parse_header(f, w, h, &le, why, sizeof why);
    if (!rc) rc = check_length(f, (long)st.st_size, *w, *h, why, sizeof why);
    float *out = rc ? NULL : malloc((size_t)*w * *h * sizeof(float));
    if (!rc && !out) { snprintf(why, sizeof why, "out of memory"); rc = -1; }
    if (!rc) rc = read_body(f, *w, *h, le, out, why, sizeof why);
    fclose(f);
    if (rc) {
        free(out);
        snprintf(err, errlen, "%s: %s", path, why);
        return -1;
    }
    *data = out;
    return 0;
}

int nj_pfm_write(const char *path, const float *data, int w, int h, char *err, size_t errlen)
{
    if (err && errlen) err[0] = 0;
    nj_atomic_file a;
    if (nj_atomic_open(&a, path, err, errlen)) return -1;
    int ok = fprintf(a.f, "Pf\n%d %d\n%s\n", w, h, host_le() ? "-1.0" : "1.0") > 0;
    for (int y = h - 1; y >= 0 && ok; y--)
        ok = fwrite(data + (size_t)y * w, 4, (size_t)w, a.f) == (size_t)w;
    return nj_atomic_close(&a, ok, err, errlen);
}

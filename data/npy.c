/* data/npy.c — reading and atomically writing float .npy files (see npy.h).
 *
 * The header is parsed by a small strict parser for the only dict NumPy
 * writes: {'descr': <str>, 'fortran_order': <bool>, 'shape': <tuple>}, keys
 * in any order, each exactly once, optional trailing comma, trailing
 * whitespace allowed.  Byte order is handled explicitly, so the code is
 * correct on any host. */
#include "data/npy.h"
#include "data/atomic.h"
#include <errno.h>
#include <stdarg.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#define MAX_ELEMENTS ((long long)1 << 31)
#define MAX_HEADER (1L << 20)
#define HEADER_ALIGN 64

static const unsigned char MAGIC[6] = {0x93, 'N', 'U', 'M', 'P', 'Y'};

/* Formats "PATH: message" into err and returns code. */
static int fail(char *err, size_t errlen, int code, const char *path, const char *fmt, ...)
    __attribute__((format(printf, 5, 6)));
static int fail(char *err, size_t errlen, int code, const char *path, const char *fmt, ...)
{
    if (!err || errlen == 0) return code;
    int k = snprintf(err, errlen, "%s: ", path ? path : "(null)");
    if (k < 0) k = 0;
    if ((size_t)k < errlen) {
        va_list ap;
        va_start(ap, fmt);
        vsnprintf(err + k, errlen - (size_t)k, fmt, ap);
        va_end(ap);
    }
    return code;
}

static int host_little_endian(void)
{
    const uint16_t one = 1;
    unsigned char b;
    memcpy(&b, &one, 1);
    return b == 1;
}

static void swap_bytes(unsigned char *p, size_t count, size_t width)
{
    for (size_t i = 0; i < count; i++, p += width)
        for (size_t a = 0, b = width - 1; a < b; a++, b--) {
            unsigned char t = p[a]; p[a] = p[b]; p[b] = t;
        }
}

size_t nj_npy_numel(const int *shape, int ndim)
{
    size_t n = 1;
    for (int d = 0; d < ndim; d++) n *= (size_t)(shape[d] > 0 ? shape[d] : 0);
    return n;
}

/* ---- header parsing ----------------------------------------------------- */

typedef struct header {
    const char *s, *end;      /* cursor and end of the header text */
    int itemsize;             /* 4 or 8 */
    int fortran;
    int ndim;
    long long shape[NJ_NPY_MAX_DIMS];
    int seen_descr, seen_fortran, seen_shape;
    char why[160];            /* what is wrong, when parsing fails */
} header;

static int bad(header *h, const char *fmt, ...) __attribute__((format(printf, 2, 3)));
static int bad(header *h, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(h->why, sizeof h->why, fmt, ap);
    va_end(ap);
    return -1;
}

static void skip_ws(header *h)
{
    while (h->s < h->end && (*h->s == ' ' || *h->s == '\t' || *h->s == '\n' || *h->s == '\r'))
        h->s++;
}

static int expect(header *h, char c, const char *where)
{
    skip_ws(h);
    if (h->s >= h->end) return bad(h, "header dict ends early (expected '%c' %s)", c, where);
    if (*h->s != c) {
        unsigned char got = (unsigned char)*h->s;
        if (got >= 32 && got < 127)
            return bad(h, "header dict has '%c' where '%c' was expected %s", got, c, where);
        return bad(h, "header dict has byte 0x%02x where '%c' was expected %s", got, c, where);
    }
    h->s++;
    return 0;
}

/* A quoted Python string without escapes, copied into out. */
static int parse_string(header *h, char *out, size_t outlen)
{
    skip_ws(h);
    if (h->s >= h->end) return bad(h, "header dict ends early (expected a quoted string)");
    if (*h->s != '\'' && *h->s != '"')
        return bad(h, "header dict expects a quoted string");
    char q = *h->s++;
    size_t n = 0;
    while (h->s < h->end && *h->s != q) {
        unsigned char c = (unsigned char)*h->s;
        if (c < 32 || c >= 127 || c == '\\')
            return bad(h, "header string contains an unsupported byte 0x%02x", c);
        if (n + 1 >= outlen) return bad(h, "header string is too long");
        out[n++] = (char)c;
        h->s++;
    }
    if (h->s >= h->end) return bad(h, "header string is not terminated");
    h->s++;
    out[n] = 0;
    return 0;
}

static int parse_descr(header *h)
{
    char d[32];
    if (parse_string(h, d, sizeof d)) return -1;
    if (strcmp(d, "<f4") == 0) h->itemsize = 4;
    else if (strcmp(d, "<f8") == 0) h->itemsize = 8;
    else return bad(h, "unsupported dtype '%s' (only '<f4' and '<f8' are read)", d);
    return 0;
}

static int parse_bool(header *h, int *v)
{
    skip_ws(h);
    size_t left = (size_t)(h->end - h->s);
    if (left >= 4 && memcmp(h->s, "True", 4) == 0) { *v = 1; h->s += 4; return 0; }
    if (left >= 5 && memcmp(h->s, "False", 5) == 0) { *v = 0; h->s += 5; return 0; }
    return bad(h, "fortran_order must be True or False");
}

/* A non-negative decimal dimension; values above 2^31 are reported as such. */
static int parse_dim(header *h, long long *v)
{
    skip_ws(h);
    if (h->s < h->end && *h->s == '-') return bad(h, "shape has a negative dimension");
    if (h->s >= h->end || *h->s < '0' || *h->s > '9')
        return bad(h, "shape tuple expects an integer dimension");
    long long x = 0;
    while (h->s < h->end && *h->s >= '0' && *h->s <= '9') {
        x = x * 10 + (*h->s++ - '0');
        if (x > MAX_ELEMENTS) return bad(h, "shape has a dimension larger than 2^31");
    }
    if (h->s < h->end && *h->s == 'L') h->s++;   /* Python 2 long suffix */
    *v = x;
    return 0;
}

static int parse_shape(header *h)
{
    if (expect(h, '(', "to open the shape tuple")) return -1;
    int n = 0, commas = 0;
    for (;;) {
        skip_ws(h);
        if (h->s < h->end && *h->s == ')') { h->s++; break; }
        if (n == NJ_NPY_MAX_DIMS)
            return bad(h, "shape has more than %d dimensions", NJ_NPY_MAX_DIMS);
        if (parse_dim(h, &h->shape[n])) return -1;
        n++;
        skip_ws(h);
        if (h->s < h->end && *h->s == ',') { h->s++; commas++; continue; }
        if (expect(h, ')', "to close the shape tuple")) return -1;
        break;
    }
    if (n == 0) return bad(h, "shape () is a scalar; rank 1..%d is supported", NJ_NPY_MAX_DIMS);
    if (n == 1 && commas == 0) return bad(h, "shape (d) is not a tuple (expected (d,))");
    h->ndim = n;
    return 0;
}

static int parse_entry(header *h)
{
    char key[32];
    if (parse_string(h, key, sizeof key)) return -1;
    if (expect(h, ':', "after a key")) return -1;
    int *seen = NULL;
    int rc;
    if (strcmp(key, "descr") == 0) { seen = &h->seen_descr; rc = parse_descr(h); }
    else if (strcmp(key, "fortran_order") == 0) { seen = &h->seen_fortran; rc = parse_bool(h, &h->fortran); }
    else if (strcmp(key, "shape") == 0) { seen = &h->seen_shape; rc = parse_shape(h); }
    else return bad(h, "header has an unknown key '%s'", key);
    if (rc) return -1;
    if (*seen) return bad(h, "header repeats the key '%s'", key);
    *seen = 1;
    return 0;
}

static int parse_header(header *h)
{
    if (expect(h, '{', "at the start of the header")) return -1;
    for (;;) {
        skip_ws(h);
        if (h->s < h->end && *h->s == '}') { h->s++; break; }
        if (parse_entry(h)) return -1;
        skip_ws(h);
        if (h->s < h->end && *h->s == ',') { h->s++; continue; }
        if (expect(h, '}', "to close the header dict")) return -1;
        break;
    }
    skip_ws(h);
    if (h->s != h->end) return bad(h, "header has extra text after the dict");
    if (!h->seen_descr) return bad(h, "header lacks 'descr'");
    if (!h->seen_fortran) return bad(h, "header lacks 'fortran_order'");
    if (!h->seen_shape) return bad(h, "header lacks 'shape'");
    if (h->fortran) return bad(h, "fortran_order True (column-major) is not supported");
    return 0;
}

/* Validates the dimensions; returns the element count or -1. */
static long long shape_count(header *h)
{
    long long n = 1;
    for (int d = 0; d < h->ndim; d++) {
        if (h->shape[d] <= 0) return bad(h, "shape has a zero dimension (axis %d)", d);
        n *= h->shape[d];
        if (n > MAX_ELEMENTS) return bad(h, "shape has more than 2^31 elements");
    }
    return n;
}

/* ---- reading ------------------------------------------------------------ */

/* Reads the prelude; sets the header text length and the data offset. */
static int read_prelude(FILE *f, long long fsize, long *hlen, long *offset, char *why, size_t wl)
{
    unsigned char p[12];
    if (fsize < 10 || fread(p, 1, 10, f) != 10) {
        snprintf(why, wl, "file is too short for an .npy header (%lld bytes)", fsize);
        return -1;
    }
    if (memcmp(p, MAGIC, 6) != 0) { snprintf(why, wl, "not an .npy file (bad magic)"); return -1; }
    if (p[6] < 1 || p[6] > 3 || p[7] != 0) {
        snprintf(why, wl, "unsupported .npy version %u.%u", p[6], p[7]);
        return -1;
    }
    if (p[6] == 1) {
        *hlen = (long)p[8] | (long)p[9] << 8;
        *offset = 10;
    } else {
        if (fsize < 12 || fread(p + 10, 1, 2, f) != 2) {
            snprintf(why, wl, "file is too short for an .npy header (%lld bytes)", fsize);
            return -1;
        }
        uint32_t v = (uint32_t)p[8] | (uint32_t)p[9] << 8 | (uint32_t)p[10] << 16 | (uint32_t)p[11] << 24;
        if (v > MAX_HEADER) { snprintf(why, wl, "header length %u is implausibly large", v); return -1; }
        *hlen = (long)v;
        *offset = 12;
    }
    if (*offset + *hlen > fsize) {
        snprintf(why, wl, "header length %ld runs past the end of the file (%lld bytes)", *hlen, fsize);
        return -1;
    }
    *offset += *hlen;
    return 0;
}

static int read_header_text(FILE *f, long hlen, header *h, char **text)
{
    char *t = malloc((size_t)hlen + 1);
    if (!t) return bad(h, "out of memory reading the header");
    *text = t;
    if (fread(t, 1, (size_t)hlen, f) != (size_t)hlen) return bad(h, "cannot read the header");
    t[hlen] = 0;
    h->s = t;
    h->end = t + hlen;
    return parse_header(h);
}

static int read_f4(FILE *f, float *out, size_t n)
{
    if (fread(out, sizeof(float), n, f) != n) return -1;
    if (!host_little_endian()) swap_bytes((unsigned char *)out, n, sizeof(float));
    return 0;
}

static int read_f8(FILE *f, float *out, size_t n)
{
    double buf[4096];
    int le = host_little_endian();
    for (size_t done = 0; done < n;) {
        size_t k = n - done < 4096 ? n - done : 4096;
        if (fread(buf, sizeof(double), k, f) != k) return -1;
        if (!le) swap_bytes((unsigned char *)buf, k, sizeof(double));
        for (size_t i = 0; i < k; i++) out[done + i] = (float)buf[i];
        done += k;
    }
    return 0;
}

/* Everything after opening: returns a code, fills the outputs on success. */
static int read_open(FILE *f, const char *path, float **data, int *shape, int *ndim,
                     char *err, size_t errlen)
{
    struct stat st;
    if (fstat(fileno(f), &st) != 0)
        return fail(err, errlen, NJ_NPY_EIO, path, "cannot stat: %s", strerror(errno));
    if (!S_ISREG(st.st_mode)) return fail(err, errlen, NJ_NPY_EIO, path, "not a regular file");
    long long fsize = (long long)st.st_size;
    long hlen = 0, offset = 0;
    char why[200];
    if (read_prelude(f, fsize, &hlen, &offset, why, sizeof why))
        return fail(err, errlen, NJ_NPY_EFORMAT, path, "%s", why);

    header h;
    memset(&h, 0, sizeof h);
    char *text = NULL;
    int prc = read_header_text(f, hlen, &h, &text);
    free(text);
    if (prc) return fail(err, errlen, NJ_NPY_EFORMAT, path, "%s", h.why);
    long long count = shape_count(&h);
    if (count < 0) return fail(err, errlen, NJ_NPY_EFORMAT, path, "%s", h.why);

    long long need = count * h.itemsize, have = fsize - offset;
    if (have < need)
        return fail(err, errlen, NJ_NPY_EFORMAT, path,
                    "truncated: shape needs %lld data bytes but the file has %lld", need, have);
    if (have > need)
        return fail(err, errlen, NJ_NPY_EFORMAT, path,
                    "%lld unexpected bytes after the %lld data bytes", have - need, need);

    float *out = malloc((size_t)count * sizeof(float));
    if (!out) return fail(err, errlen, NJ_NPY_ENOMEM, path, "out of memory for %lld elements", count);
    int rrc = h.itemsize == 4 ? read_f4(f, out, (size_t)count) : read_f8(f, out, (size_t)count);
    if (rrc) {
        free(out);
        return fail(err, errlen, NJ_NPY_EIO, path, "read error in the data section");
    }
    for (int d = 0; d < h.ndim; d++) shape[d] = (int)h.shape[d];
    *ndim = h.ndim;
    *data = out;
    return NJ_NPY_OK;
}

int nj_npy_read(const char *path, float **data, int *shape, int *ndim,
                char *err, size_t errlen)
{
    if (err && errlen) err[0] = 0;
    if (!data || !shape || !ndim)
        return fail(err, errlen, NJ_NPY_EARG, path, "nj_npy_read given a NULL output");
    *data = NULL;
    *ndim = 0;
    if (!path) return fail(err, errlen, NJ_NPY_EARG, path, "no path given");
    FILE *f = fopen(path, "rb");
    if (!f) return fail(err, errlen, NJ_NPY_EIO, path, "cannot open: %s", strerror(errno));
    int rc = read_open(f, path, data, shape, ndim, err, errlen);
    fclose(f);
    return rc;
}

/* ---- writing ------------------------------------------------------------ */

/* The full header (prelude + dict + padding + '\n'); returns its length. */
static size_t build_header(char *out, size_t cap, const int *shape, int ndim)
{
    char dict[200], dims[128] = "";
    size_t k = 0;
    for (int d = 0; d < ndim; d++)
        k += (size_t)snprintf(dims + k, sizeof dims - k, d ? ", %d" : "%d", shape[d]);
    if (ndim == 1) snprintf(dims + k, sizeof dims - k, ",");
    int dl = snprintf(dict, sizeof dict,
                      "{'descr': '<f4', 'fortran_order': False, 'shape': (%s), }", dims);
    size_t total = (10 + (size_t)dl + 1 + HEADER_ALIGN - 1) / HEADER_ALIGN * HEADER_ALIGN;
    if (total > cap) return 0;
    size_t hlen = total - 10;
    memcpy(out, MAGIC, 6);
    out[6] = 1;
    out[7] = 0;
    out[8] = (char)(hlen & 0xff);
    out[9] = (char)(hlen >> 8);
    memcpy(out + 10, dict, (size_t)dl);
    memset(out + 10 + dl, ' ', total - 10 - (size_t)dl - 1);
    out[total - 1] = '\n';
    return total;
}

static int write_data(FILE *f, const float *data, size_t n)
{
    if (host_little_endian()) return fwrite(data, sizeof(float), n, f) == n ? 0 : -1;
    float buf[4096];
    for (size_t done = 0; done < n;) {
        size_t k = n - done < 4096 ? n - done : 4096;
        memcpy(buf, data + done, k * sizeof(float));
        swap_bytes((unsigned char *)buf, k, sizeof(float));
        if (fwrite(buf, sizeof(float), k, f) != k) return -1;
        done += k;
    }
    return 0;
}

static int check_write_args(const char *path, const float *data, const int *shape, int ndim,
                            char *err, size_t errlen)
{
    if (!path || !data || !shape)
        return fail(err, errlen, NJ_NPY_EARG, path, "nj_npy_write given a NULL argument");
    if (ndim < 1 || ndim > NJ_NPY_MAX_DIMS)
        return fail(err, errlen, NJ_NPY_EARG, path, "rank %d not in 1..%d", ndim, NJ_NPY_MAX_DIMS);
    long long n = 1;
    for (int d = 0; d < ndim; d++) {
        if (shape[d] <= 0)
            return fail(err, errlen, NJ_NPY_EARG, path, "dimension %d is %d (must be positive)", d, shape[d]);
        n *= shape[d];
        if (n > MAX_ELEMENTS)
            return fail(err, errlen, NJ_NPY_EARG, path, "more than 2^31 elements");
    }
    return NJ_NPY_OK;
}

/* Writes header and data to the (temporary) file. */
static int write_body(FILE *f, const float *data, const int *shape, int ndim)
{
    char head[256];
    size_t hl = build_header(head, sizeof head, shape, ndim);
    if (hl == 0 || fwrite(head, 1, hl, f) != hl) return -1;
    return write_data(f, data, nj_npy_numel(shape, ndim));
}

int nj_npy_write(const char *path, const float *data, const int *shape, int ndim,
                 char *err, size_t errlen)
{
    if (err && errlen) err[0] = 0;
    int rc = check_write_args(path, data, shape, ndim, err, errlen);
    if (rc) return rc;
    nj_atomic_file a;
    if (nj_atomic_open(&a, path, err, errlen)) return NJ_NPY_EIO;
    int ok = write_body(a.f, data, shape, ndim) == 0;
    if (!ok) fail(err, errlen, NJ_NPY_EIO, path, "write failed: %s", strerror(errno));
    if (nj_atomic_close(&a, ok, err, errlen)) return NJ_NPY_EIO;
    return NJ_NPY_OK;
}

/* tests/test_npy.c — the .npy reader and writer (data/npy.c).
 *
 * Sources of truth: NumPy itself (np.save / np.load via /usr/bin/python3,
 * scripts tests/ref/npy_write.py and tests/ref/npy_check.py) and the NPY
 * format specification (numpy.lib.format: magic, version, header padded to a
 * multiple of 64 bytes ending in '\n').  Checks:
 *   - write then read is bit-exact for ranks 1..4, incl. inf, -0, NaN, subnormals;
 *   - the written header follows the specification; writes are atomic (no
 *     temporary left, an existing file replaced) and report failures;
 *   - files written by NumPy are read with the values NumPy dumped raw;
 *   - files written by nightjar load in NumPy with identical bits;
 *   - corrupt, truncated, unsupported and hostile headers are refused with a
 *     one-line message naming the file, and random mutations never crash.
 */
#include "data/npy.h"
#include "tests/check.h"
#include "tests/torch_ref.h"
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <dirent.h>
#include <unistd.h>

static char dir[4096];

static void path_of(char *out, size_t len, const char *name)
{
    snprintf(out, len, "%s/%s", dir, name);
}

static int count_dir_entries(void)
{
    DIR *d = opendir(dir);
    int n = 0;
    if (!d) return -1;
    for (struct dirent *e; (e = readdir(d));)
        n += strcmp(e->d_name, ".") && strcmp(e->d_name, "..");
    closedir(d);
    return n;
}

/* A message is usable when it is one non-empty line that names the file. */
static int good_message(const char *err, const char *path)
{
    return err[0] && !strchr(err, '\n') && strstr(err, path) != NULL;
}

/* ---- round trip ------------------------------------------------------------ */

static void fill_values(float *x, size_t n, unsigned seed)
{
    static const uint32_t special[] = {
        0x00000000u, 0x80000000u, 0x7f800000u, 0xff800000u, 0x7fc00001u,
        0x00000001u, 0x807fffffu, 0x7f7fffffu, 0x3f800000u
    };
    /* 2^64/φ as the seed spreader and the 13/7/17 shift triple of a 64-bit
     * xorshift (Marsaglia 2003): common practice, any full-period triple would do */
    uint64_t s = 0x9E3779B97F4A7C15ull * (seed + 1);
    for (size_t i = 0; i < n; i++) {
        s ^= s << 13; s ^= s >> 7; s ^= s << 17;
        uint32_t bits = i < sizeof special / sizeof *special ? special[i] : (uint32_t)(s >> 32);
        memcpy(&x[i], &bits, 4);
    }
}

static void test_round_trip(void)
{
    static const int shapes[4][4] = {{13}, {3, 7}, {2, 5, 3}, {2, 3, 5, 7}};
    for (int r = 1; r <= 4; r++) {
        char path[4200], err[512], name[64];
        size_t n = nj_npy_numel(shapes[r - 1], r);
        float *x = malloc(n * sizeof *x), *y = NULL;
        fill_values(x, n, (unsigned)r);
        snprintf(name, sizeof name, "rt%d.npy", r);
        path_of(path, sizeof path, name);
        int shape[4] = {0}, nd = 0;
        int wrc = nj_npy_write(path, x, shapes[r - 1], r, err, sizeof err);
        int rrc = wrc ? -1 : nj_npy_read(path, &y, shape, &nd, err, sizeof err);
        int ok = wrc == 0 && rrc == 0 && nd == r && y &&
                 memcmp(shape, shapes[r - 1], (size_t)r * sizeof(int)) == 0 &&
                 memcmp(x, y, n * sizeof *x) == 0;
        snprintf(name, sizeof name, "npy round trip rank %d bit-exact", r);
        check(ok, name, "write %d read %d rank %d: %s", wrc, rrc, nd, err);
        free(x);
        free(y);
    }
}

/* The header follows the NPY 1.0 specification (numpy.lib.format). */
static void test_header_layout(void)
{
    char path[4200], err[512];
    path_of(path, sizeof path, "layout.npy");
    const int shape[1] = {5};
    const float v[5] = {1, 2, 3, 4, 5};
    nj_npy_write(path, v, shape, 1, err, sizeof err);
    unsigned char b[256] = {0};
    FILE *f = fopen(path, "rb");
    size_t got = f ? fread(b, 1, sizeof b, f) : 0;
    if (f) fclose(f);
    size_t hlen = b[8] | (size_t)b[9] << 8, start = 10 + hlen;
    int ok = got == start + sizeof v && memcmp(b, "\x93NUMPY\x01\x00", 8) == 0 &&
             start % 64 == 0 && b[start - 1] == '\n' &&
             memcmp(b + 10, "{'descr': '<f4', 'fortran_order': False, 'shape': (5,), }", 57) == 0;
    check(ok, "npy header is NPY 1.0, padded to 64 bytes, ends in newline",
          "file %zu bytes, data offset %zu, header '%.60s'", got, start, (const char *)b + 10);
}

static void test_atomic_write(void)
{
    char path[4200], err[512];
    path_of(path, sizeof path, "atomic.npy");
    int before = count_dir_entries();
    const int s1[2] = {4, 4}, s2[1] = {3};
    float a[16], b[3] = {7, 8, 9}, *y = NULL;
    fill_values(a, 16, 99);
    int rc1 = nj_npy_write(path, a, s1, 2, err, sizeof err);
    int rc2 = nj_npy_write(path, b, s2, 1, err, sizeof err);   /* replaces the first */
    int shape[4], nd = 0;
    int rrc = nj_npy_read(path, &y, shape, &nd, err, sizeof err);
    int after = count_dir_entries();
    check(rc1 == 0 && rc2 == 0 && rrc == 0 && nd == 1 && shape[0] == 3 && y &&
          memcmp(y, b, sizeof b) == 0 && after == before + 1,
          "npy write is atomic: replaces the file, leaves no temporary",
          "rc %d %d %d, rank %d, entries %d -> %d: %s", rc1, rc2, rrc, nd, before, after, err);
    free(y);

    char bad[4300];
    snprintf(bad, sizeof bad, "%s/no_such_folder/x.npy", dir);
    int wrc = nj_npy_write(bad, b, s2, 1, err, sizeof err);
    check(wrc == NJ_NPY_EIO && good_message(err, bad), "npy write into a missing folder fails",
          "rc %d, message '%s'", wrc, err);
    const int zero[2] = {3, 0};
    wrc = nj_npy_write(path, b, zero, 2, err, sizeof err);
    check(wrc == NJ_NPY_EARG && good_message(err, path), "npy write refuses a zero dimension",
          "rc %d, message '%s'", wrc, err);
}

/* ---- NumPy writes, nightjar reads --------------------------------------------- */

static float *read_raw(const char *path, size_t *n)
{
    FILE *f = fopen(path, "rb");
    if (!f) return NULL;
    fseek(f, 0, SEEK_END);
    long len = ftell(f);
    fseek(f, 0, SEEK_SET);
    float *x = malloc((size_t)len + 1);
    *n = fread(x, 1, (size_t)len, f) / sizeof(float);
    fclose(f);
    return x;
}

static void read_numpy_file(const char *name, int want_rank)
{
    char path[4200], raw[4200], err[512], label[128];
    snprintf(path, sizeof path, "%s/%s.npy", dir, name);
    snprintf(raw, sizeof raw, "%s/%s.bin", dir, name);
    snprintf(label, sizeof label, "npy reads numpy-written %s", name);
    float *y = NULL;
    int shape[4], nd = 0;
    size_t nraw = 0;
    int rc = nj_npy_read(path, &y, shape, &nd, err, sizeof err);
    float *ref = read_raw(raw, &nraw);
    int ok = rc == 0 && ref && nd == want_rank && nj_npy_numel(shape, nd) == nraw &&
             memcmp(y, ref, nraw * sizeof(float)) == 0;
    check(ok, label, "rc %d rank %d (want %d), %zu elements vs %zu raw: %s",
          rc, nd, want_rank, rc ? 0 : nj_npy_numel(shape, nd), nraw, err);
    free(y);
    free(ref);
}

static void refuse_numpy_file(const char *name, const char *what)
{
    char path[4200], err[512], label[128];
    snprintf(path, sizeof path, "%s/%s.npy", dir, name);
    snprintf(label, sizeof label, "npy refuses numpy-written %s", what);
    float dummy, *y = &dummy;   /* the reader must reset it to NULL */
    int shape[4], nd = -1;
    int rc = nj_npy_read(path, &y, shape, &nd, err, sizeof err);
    check(rc == NJ_NPY_EFORMAT && y == NULL && good_message(err, path), label,
          "rc %d, message '%s'", rc, err);
    if (rc == 0) free(y);
    else printf("# %s\n", err);
}

static void test_numpy_writes(void)
{
    char script[4096];
    if (ref_script_path("npy_write.py", script, sizeof script)) {
        check(0, "npy numpy writes reference files", "%s", script);
        return;
    }
    int rc = ref_run_python(script, dir);
    if (!check(rc == 0, "npy numpy writes reference files",
               "%s %s exited with %d (needs python3-numpy)", REF_PYTHON, script, rc))
        return;
    read_numpy_file("f4_r1", 1);
    read_numpy_file("f4_r2", 2);
    read_numpy_file("f4_r3", 3);
    read_numpy_file("f4_r4", 4);
    read_numpy_file("f8_r2", 2);
    read_numpy_file("f4_v2", 3);
    read_numpy_file("f4_special", 1);
    refuse_numpy_file("bad_fortran", "fortran order");
    refuse_numpy_file("bad_big", "big-endian float32");
    refuse_numpy_file("bad_int", "int32");
    refuse_numpy_file("bad_scalar", "0-d scalar");
    refuse_numpy_file("bad_empty", "zero-size (0, 3)");
    refuse_numpy_file("bad_rank5", "rank 5");
}

/* ---- nightjar writes, NumPy reads --------------------------------------------- */

static void test_numpy_reads(void)
{
    static const int shapes[5][4] = {{7}, {1, 9}, {3, 1, 5}, {2, 3, 4, 5}, {1, 1, 1, 1}};
    static const int ranks[5] = {1, 2, 3, 4, 4};
    char path[4200], err[512], name[32];
    path_of(path, sizeof path, "manifest.txt");
    FILE *man = fopen(path, "w");
    int wrote = 0;
    for (int k = 0; man && k < 5; k++) {
        size_t n = nj_npy_numel(shapes[k], ranks[k]);
        float *x = malloc(n * sizeof *x);
        fill_values(x, n, 40u + (unsigned)k);
        if (k == 3) x[4] = NAN;
        snprintf(name, sizeof name, "nj%d", k);
        snprintf(path, sizeof path, "%s/%s.npy", dir, name);
        wrote += nj_npy_write(path, x, shapes[k], ranks[k], err, sizeof err) == 0;
        snprintf(path, sizeof path, "%s/%s.bin", dir, name);
        FILE *f = fopen(path, "wb");
        if (f) { fwrite(x, sizeof *x, n, f); fclose(f); }
        fprintf(man, "%s", name);
        for (int d = 0; d < ranks[k]; d++) fprintf(man, " %d", shapes[k][d]);
        fprintf(man, "\n");
        free(x);
    }
    if (man) fclose(man);
    char script[4096];
    int rc = ref_script_path("npy_check.py", script, sizeof script) ? -1 : ref_run_python(script, dir);
    check(wrote == 5 && rc == 0, "npy nightjar-written files load in numpy bit-exact",
          "%d of 5 written, %s exited with %d", wrote, script, rc);
}

/* ---- hostile input -------------------------------------------------------------- */

/* Writes magic + version + header text (length field as given or computed)
 * + `data_bytes` zero bytes. */
static void write_crafted(const char *path, int major, const char *text, long hlen_field,
                          long data_bytes)
{
    FILE *f = fopen(path, "wb");
    if (!f) return;
    size_t tl = strlen(text);
    long hl = hlen_field >= 0 ? hlen_field : (long)tl;
    unsigned char pre[12] = {0x93, 'N', 'U', 'M', 'P', 'Y', (unsigned char)major, 0,
                             (unsigned char)(hl & 255), (unsigned char)((hl >> 8) & 255),
                             (unsigned char)((hl >> 16) & 255), (unsigned char)((hl >> 24) & 255)};
    fwrite(pre, 1, major == 1 ? 10 : 12, f);
    fwrite(text, 1, tl, f);
    for (long i = 0; i < data_bytes; i++) fputc(0, f);
    fclose(f);
}

static void expect_refused(const char *what, const char *path, int want)
{
    char err[512], label[160];
    float dummy, *y = &dummy;
    int shape[4], nd = -1;
    int rc = nj_npy_read(path, &y, shape, &nd, err, sizeof err);
    snprintf(label, sizeof label, "npy refuses %s", what);
    check(rc == want && y == NULL && good_message(err, path), label,
          "rc %d (want %d), message '%s'", rc, want, err);
    if (rc == 0) free(y);
    else printf("# %s\n", err);
}

#define HDR(dict) dict "\n"
#define GOOD_DICT "{'descr': '<f4', 'fortran_order': False, 'shape': (2, 3), }"

typedef struct crafted { const char *what, *text; int major; long hlen, data; } crafted;

static void test_hostile_headers(void)
{
    static const crafted cases[] = {
        {"version 4.0", HDR(GOOD_DICT), 4, -1, 24},
        {"header length past end of file", HDR(GOOD_DICT), 1, 5000, 0},
        {"unterminated dict", HDR("{'descr': '<f4', 'fortran_order': False, 'shape': (2, 3), "), 1, -1, 24},
        {"missing shape key", HDR("{'descr': '<f4', 'fortran_order': False}"), 1, -1, 24},
        {"unknown key", HDR("{'descr': '<f4', 'fortran_order': False, 'shape': (2, 3), 'x': 1}"), 1, -1, 24},
        {"repeated key", HDR("{'descr': '<f4', 'descr': '<f4', 'fortran_order': False, 'shape': (2, 3)}"), 1, -1, 24},
        {"dtype <f2", HDR("{'descr': '<f2', 'fortran_order': False, 'shape': (2, 3), }"), 1, -1, 12},
        {"unquoted dtype", HDR("{'descr': f4, 'fortran_order': False, 'shape': (2, 3), }"), 1, -1, 24},
        {"fortran_order maybe", HDR("{'descr': '<f4', 'fortran_order': Maybe, 'shape': (2, 3), }"), 1, -1, 24},
        {"zero dimension", HDR("{'descr': '<f4', 'fortran_order': False, 'shape': (2, 0), }"), 1, -1, 0},
        {"negative dimension", HDR("{'descr': '<f4', 'fortran_order': False, 'shape': (-2, 3), }"), 1, -1, 24},
        {"huge dimension", HDR("{'descr': '<f4', 'fortran_order': False, 'shape': (99999999999999999999999, 1), }"), 1, -1, 24},
        {"2^32 elements of small dims", HDR("{'descr': '<f4', 'fortran_order': False, 'shape': (65536, 65536), }"), 1, -1, 24},
        {"shape beyond file length", HDR("{'descr': '<f4', 'fortran_order': False, 'shape': (1000, 1000), }"), 1, -1, 24},
        {"rank 5", HDR("{'descr': '<f4', 'fortran_order': False, 'shape': (1, 1, 1, 2, 3), }"), 1, -1, 24},
        {"shape (6) without comma", HDR("{'descr': '<f4', 'fortran_order': False, 'shape': (6), }"), 1, -1, 24},
        {"shape not a tuple", HDR("{'descr': '<f4', 'fortran_order': False, 'shape': [2, 3], }"), 1, -1, 24},
        {"text after the dict", HDR(GOOD_DICT " junk"), 1, -1, 24},
        {"control byte in a string", HDR("{'descr': '<f\0014', 'fortran_order': False, 'shape': (2, 3), }"), 1, -1, 24},
        {"truncated data (23 of 24 bytes)", HDR(GOOD_DICT), 1, -1, 23},
        {"trailing byte after data", HDR(GOOD_DICT), 1, -1, 25},
        {"version 2.0 with huge header length", HDR(GOOD_DICT), 2, 0x7fffffffL, 24},
    };
    char path[4200];
    int k = 0;
    for (size_t i = 0; i < sizeof cases / sizeof *cases; i++) {
        char name[32];
        snprintf(name, sizeof name, "hostile%02d.npy", k++);
        path_of(path, sizeof path, name);
        write_crafted(path, cases[i].major, cases[i].text, cases[i].hlen, cases[i].data);
        expect_refused(cases[i].what, path, NJ_NPY_EFORMAT);
    }
    /* The control: the same crafting with a good header is accepted. */
    path_of(path, sizeof path, "crafted_good.npy");
    write_crafted(path, 1, HDR(GOOD_DICT), -1, 24);
    char err[512];
    float *y = NULL;
    int shape[4], nd = 0;
    int rc = nj_npy_read(path, &y, shape, &nd, err, sizeof err);
    check(rc == 0 && nd == 2 && shape[0] == 2 && shape[1] == 3, "npy reads a crafted valid header",
          "rc %d: %s", rc, err);
    free(y);

    path_of(path, sizeof path, "empty.npy");
    FILE *f = fopen(path, "wb");
    if (f) fclose(f);
    expect_refused("an empty file", path, NJ_NPY_EFORMAT);
    path_of(path, sizeof path, "magic.npy");
    f = fopen(path, "wb");
    static const char wrong[] = "\x93NUMPX\x01\x00\x10\x00{}              ";
    if (f) { fwrite(wrong, 1, sizeof wrong - 1, f); fclose(f); }
    expect_refused("a wrong magic string", path, NJ_NPY_EFORMAT);
    path_of(path, sizeof path, "no_such_file.npy");
    expect_refused("a missing file", path, NJ_NPY_EIO);
    expect_refused("a folder", dir, NJ_NPY_EIO);
}

/* Random byte changes and truncations of a valid file: every read must either
 * succeed with a consistent shape or fail with a message — and never crash. */
static void test_mutations(void)
{
    char src[4200], path[4200], err[512];
    path_of(src, sizeof src, "mut_src.npy");
    path_of(path, sizeof path, "mut.npy");
    const int shape[3] = {2, 3, 4};
    float x[24];
    fill_values(x, 24, 5);
    nj_npy_write(src, x, shape, 3, err, sizeof err);
    unsigned char orig[512];
    FILE *f = fopen(src, "rb");
    size_t len = f ? fread(orig, 1, sizeof orig, f) : 0;
    if (f) fclose(f);
    uint64_t s = 12345;
    int bad_outcome = 0, refused = 0, trials = 3000;
    for (int t = 0; t < trials; t++) {
        unsigned char buf[512];
        memcpy(buf, orig, len);
        size_t n = len;
        s ^= s << 13; s ^= s >> 7; s ^= s << 17;
        int edits = 1 + (int)(s % 4);
        for (int e = 0; e < edits; e++) {
            s ^= s << 13; s ^= s >> 7; s ^= s << 17;
            buf[(s >> 8) % 128] = (unsigned char)(s >> 40);   /* within prelude + header */
        }
        if (t % 5 == 0) n = (size_t)((s >> 20) % len);
        FILE *m = fopen(path, "wb");
        if (!m) break;
        fwrite(buf, 1, n, m);
        fclose(m);
        float *y = NULL;
        int sh[4], nd = 0;
        int rc = nj_npy_read(path, &y, sh, &nd, err, sizeof err);
        if (rc == 0) bad_outcome += !(nd >= 1 && nd <= 4 && nj_npy_numel(sh, nd) * 4 <= n);
        else { refused++; bad_outcome += y != NULL || !good_message(err, path); }
        free(y);
    }
    check(bad_outcome == 0 && refused > trials / 2, "npy survives 3000 mutated and truncated files",
          "%d inconsistent outcomes, %d refused", bad_outcome, refused);
}

int main(void)
{
    if (ref_mkdtemp(dir, sizeof dir, "npy")) {
        check(0, "npy temporary folder", "%s", dir);
        return test_exit();
    }
    test_round_trip();
    test_header_layout();
    test_atomic_write();
    test_hostile_headers();
    test_mutations();
    char why[512];
    if (check(ref_python_present(why, sizeof why), "npy numpy reference available", "%s", why)) {
        test_numpy_writes();
        test_numpy_reads();
    }
    ref_rmtree(dir);
    return test_exit();
}

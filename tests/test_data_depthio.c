/* tests/test_data_depthio.c — depth map formats: exact round trips in
 * nightjar, and exchange with NumPy/OpenCV both ways (outside source:
 * tests/ref/data_depth.py — np.save/np.load, cv2.imwrite/cv2.imread). */
#include "data/depthio.h"
#include "data/npy.h"
#include "tests/check.h"
#include "tests/test_data_util.h"

#define W 37
#define H 23

static char dir[64];

static void path_of(char *out, const char *name) { snprintf(out, 256, "%s/%s", dir, name); }

static void test_roundtrip(nj_depth_format f, const float *d, const char *label)
{
    char path[256], err[256];
    float *back = NULL;
    int w = 0, h = 0;
    snprintf(path, sizeof path, "%s/rt%s", dir, nj_depth_extension(f));
    int rc = nj_depth_write(path, f, 1000.0f, d, W, H, err, sizeof err);
    if (!rc) rc = nj_depth_read(path, f, 1000.0f, &back, &w, &h, err, sizeof err);
    check(rc == 0 && w == W && h == H && tdu_max_abs_diff(d, back, W * H) == 0, label, "rc %d %s", rc, err);
    free(back);
}

/* png16 stores k = round(d·scale): depths that are k/scale survive exactly;
 * 0, negative, NaN and out-of-range depths become 0 (unknown). */
static void test_png16_rules(void)
{
    char path[256], err[256];
    float d[4] = {-1.0f, NAN, 70.0f, 0.0004f}, *back = NULL;
    int w, h;
    path_of(path, "rules.png");
    int rc = nj_png16_depth_write(path, 1000.0f, d, 4, 1, err, sizeof err);
    if (!rc) rc = nj_png16_depth_read(path, 1000.0f, &back, &w, &h, err, sizeof err);
    check(rc == 0 && back[0] == 0 && back[1] == 0 && back[2] == 0 && back[3] == 0,
          "depth_png16_invalid_values_become_unknown", "rc %d %s", rc, err);
    free(back);
}

static void test_bad_files(void)
{
    char path[256], err[256];
    float *d = NULL;
    int w, h;
    path_of(path, "bad.pfm");
    FILE *f = fopen(path, "wb");
    if (f) { fputs("Pf\n10 10\n-1.0\n", f); fwrite("abcd", 1, 4, f); fclose(f); }
    int rc = nj_pfm_read(path, &d, &w, &h, err, sizeof err);
    check(rc == -1 && !d && strstr(err, "bad.pfm") && strstr(err, "400"), "depth_pfm_truncated_rejected", "%s", err);
    path_of(path, "eight.png");   /* an empty file is no png16 depth map */
    f = fopen(path, "wb");
    if (f) fclose(f);
    rc = nj_png16_depth_read(path, 1000.0f, &d, &w, &h, err, sizeof err);
    check(rc == -1 && strstr(err, "eight.png"), "depth_png16_bad_file_rejected", "%s", err);
}

/* nightjar writes, NumPy/OpenCV read. */
static void test_export(const char *script, const float *d, const float *k)
{
    char path[256], err[256], args[256];
    int shape[2] = {H, W}, rc = 0;
    path_of(path, "c_depth.npy");
    rc |= nj_npy_write(path, d, shape, 2, err, sizeof err);
    path_of(path, "c_depth.pfm");
    rc |= nj_pfm_write(path, d, W, H, err, sizeof err);
    path_of(path, "c_k.npy");
    rc |= nj_npy_write(path, k, shape, 2, err, sizeof err);
    float *dk = malloc(sizeof(float) * W * H);
    for (int i = 0; i < W * H; i++) dk[i] = k[i] / 1000.0f;
    path_of(path, "c_depth.png");
    rc |= nj_png16_depth_write(path, 1000.0f, dk, W, H, err, sizeof err);
    free(dk);
    snprintf(args, sizeof args, "check '%s'", dir);
    check(rc == 0 && tdu_python(script, args) == 0, "depth_files_read_by_opencv_numpy", "rc %d %s", rc, err);
}

/* Raw float32 in host order, written with fwrite (no nightjar writer
 * involved), for data_depth.py to read with np.fromfile as little-endian
 * ("<f4"): the hosts this runs on (x86-64, aarch64) are little-endian. */
static int write_raw(const char *name, const float *v)
{
    char path[256];
    path_of(path, name);
    FILE *f = fopen(path, "wb");
    if (!f) return -1;
    int ok = fwrite(v, sizeof(float), W * H, f) == W * H;
    return fclose(f) == 0 && ok ? 0 : -1;
}

/* NumPy/OpenCV write, nightjar reads: the files OpenCV writes hold this
 * test's own arrays (d: arbitrary floats for PFM, k: integers for png16), and
 * what nightjar reads back is compared with those arrays, not with another
 * nightjar reader. */
static void test_import(const char *script, const float *d, const float *k)
{
    char path[256], err[256] = "", args[256];
    if (!check(write_raw("in_depth.f32", d) == 0 && write_raw("in_k.f32", k) == 0, "depth_reference_inputs_written",
               "cannot write into %s", dir))
        return;
    snprintf(args, sizeof args, "make '%s'", dir);
    if (!check(tdu_python(script, args) == 0, "depth_reference_files_made", "script failed")) return;
    float *back = NULL;
    int w = 0, h = 0;
    path_of(path, "np_depth.pfm");
    int rc = nj_pfm_read(path, &back, &w, &h, err, sizeof err);
    check(rc == 0 && w == W && h == H && tdu_max_abs_diff(d, back, W * H) == 0,
          "depth_pfm_from_opencv_exact", "rc %d %s, max |difference| from the input %g", rc, err,
          rc == 0 && w == W && h == H ? tdu_max_abs_diff(d, back, W * H) : NAN);
    free(back);
    back = NULL;
    path_of(path, "np_depth.npy");
    rc = nj_depth_read(path, NJ_DEPTH_NPY, 0, &back, &w, &h, err, sizeof err);
    check(rc == 0 && w == W && h == H && tdu_max_abs_diff(d, back, W * H) == 0,
          "depth_npy_from_numpy_exact", "rc %d %s", rc, err);
    free(back);
    back = NULL;
    path_of(path, "np_depth.png");
    rc = nj_png16_depth_read(path, 1.0f, &back, &w, &h, err, sizeof err);
    check(rc == 0 && w == W && h == H && tdu_max_abs_diff(k, back, W * H) == 0,
          "depth_png16_from_opencv_exact", "rc %d %s", rc, err);
    free(back);
}

int main(int argc, char **argv)
{
    (void)argc;
    char script[512];
    if (tdu_tmpdir(dir, sizeof dir)) return 1;
    tdu_ref_path(argv[0], "data_depth.py", script, sizeof script);
    float d[W * H], q[W * H], k[W * H];
    unsigned s = 12345;
    for (int i = 0; i < W * H; i++) {
        s = s * 1103515245u + 12345u;      /* the C standard's example rand() LCG (from memory); only a fill */
        d[i] = (float)((s >> 8) % 1000000) * 1e-4f + 1e-3f;   /* metres, arbitrary floats */
        k[i] = (float)((s >> 4) % 65536);
        q[i] = k[i] / 1000.0f;                                 /* representable in png16 */
    }
    d[0] = 0;
    test_roundtrip(NJ_DEPTH_PFM, d, "depth_pfm_roundtrip_exact");
    test_roundtrip(NJ_DEPTH_NPY, d, "depth_npy_roundtrip_exact");
    test_roundtrip(NJ_DEPTH_PNG16, q, "depth_png16_roundtrip_exact");
    test_png16_rules();
    test_bad_files();
    test_export(script, d, k);
    test_import(script, d, k);
    tdu_rmtree(dir);
    return test_exit();
}

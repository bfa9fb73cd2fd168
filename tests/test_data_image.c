/* tests/test_data_image.c — image decoding, size limits, resizing and PNG
 * writing.  Outside sources: scikit-image's sample images and OpenCV's
 * cv2.resize / JPEG decoder, via tests/ref/data_image.py. */
#include "data/image.h"
#include "data/npy.h"
#include "tests/check.h"
#include "tests/test_data_util.h"
#include <dirent.h>

static char dir[64];

static float *load_npy(const char *name, int *shape)
{
    char path[256], err[256];
    float *d = NULL;
    int ndim;
    snprintf(path, sizeof path, "%s/%s", dir, name);
    if (nj_npy_read(path, &d, shape, &ndim, err, sizeof err)) printf("note: %s\n", err);
    return d;
}

/* (H, W, 3) interleaved → planar, values scaled by s. */
static void to_planar(const float *hwc, int w, int h, float s, float *out)
{
    size_t n = (size_t)w * h;
    for (size_t i = 0; i < n; i++)
        for (int c = 0; c < 3; c++) out[c * n + i] = hwc[3 * i + c] * s;
}

static int load_img(const char *name, nj_image *im)
{
    char path[256], err[256];
    snprintf(path, sizeof path, "%s/%s", dir, name);
    if (nj_image_load(path, im, err, sizeof err)) {
        printf("note: %s\n", err);
        return -1;
    }
    return 0;
}

/* PNG decode is exact: the pixels equal scikit-image's arrays / 255. */
static void test_decode(void)
{
    nj_image im;
    int shape[4];
    float *px = load_npy("astronaut_px.npy", shape);
    int ok = px && !load_img("astronaut.png", &im);
    float *ref = ok ? malloc(sizeof(float) * 3 * im.w * im.h) : NULL;
    if (ref) to_planar(px, im.w, im.h, 1.0f, ref);
    for (int i = 0; ref && i < 3 * im.w * im.h; i++) ref[i] /= 255.0f;
    check(ref && im.w == 512 && im.h == 512 &&
          tdu_max_abs_diff(im.data, ref, 3 * (size_t)im.w * im.h) == 0,
          "image_png_decode_exact_vs_skimage", "decode differs from skimage.data.astronaut");
    free(ref);
    free(px);
    if (ok) nj_image_free(&im);

    px = load_npy("camera_px.npy", shape);
    ok = px && !load_img("camera.png", &im);
    double worst = 0;
    for (int i = 0; ok && i < im.w * im.h; i++)
        for (int c = 0; c < 3; c++)
            worst = fmax(worst, fabs(im.data[c * im.w * im.h + i] - px[i] / 255.0f));
    check(ok && worst == 0, "image_grey_becomes_rgb", "grey PNG channels differ from skimage camera by %g", worst);
    free(px);
    if (ok) nj_image_free(&im);
}

/* JPEG: stb_image vs OpenCV's libjpeg decode (IDCTs differ by rounding). */
static void test_jpeg(void)
{
    nj_image im;
    int shape[4];
    float *px = load_npy("astronaut_jpg_px.npy", shape);
    int ok = px && !load_img("astronaut.jpg", &im);
    double sum = 0, worst = 0;
    size_t n = ok ? (size_t)im.w * im.h : 0;
    for (size_t i = 0; i < n; i++)
        for (int c = 0; c < 3; c++) {
            double d = fabs(im.data[c * n + i] - px[3 * i + c] / 255.0);
            sum += d;
            worst = fmax(worst, d);
        }
    double mean = n ? sum / (3.0 * n) : 1;
    check(ok && mean < 1.0 / 255 && worst < 0.1, "image_jpeg_decode_vs_opencv",
          "mean abs diff %.5f, max %.4f", mean, worst);
    free(px);
    if (ok) nj_image_free(&im);
}

/* Resize of a natural image vs cv2.resize on the same float pixels.
 * Tolerances (measured maxima in the info lines):
 *  - area (shrinking on both axes): both sides sum the same products of
 *    float32 weights and pixels in [0, 1], in a different order — a few float
 *    ulps of 1 (1.2e-7); bound 1e-6 (measured: 0 to 6e-8);
 *  - linear (and an enlarged axis): OpenCV rounds each source coordinate
 *    (d + 0.5)·s − 0.5 to float32 before taking its fraction as the weight
 *    (imgproc/src/resize.cpp, resizeGeneric's coefficient loop), nightjar
 *    keeps it in double; at source coordinates below 512 half a float ulp is
 *    2^-16 = 1.53e-5, so a weight differs by up to that much and a pixel by
 *    up to that times the step between neighbours (≤ 1); bound 1.6e-5
 *    (measured: up to 1.3e-5).
 * Mode "axes" is the per-axis reference for a mixed resize (one axis
 * shrinks, the other grows): nightjar filters each axis on its own (area
 * shrinking, bilinear enlarging), while cv2's INTER_AREA switches both axes
 * to a linear-like rule as soon as one axis grows, so cv2.resize(INTER_AREA)
 * is no reference there; data_image.py composes cv2 one axis at a time. */
static void resize_case(const char *name, int w, int h, const char *mode)
{
    nj_image im, out;
    int shape[4];
    char file[128], label[128];
    snprintf(file, sizeof file, "%s_%dx%d_%s.npy", name, w, h, mode);
    snprintf(label, sizeof label, "image_resize_%s_%s_%dx%d_vs_opencv", mode, name, w, h);
    float *ref_hwc = load_npy(file, shape);
    snprintf(file, sizeof file, "%s.png", name);
    if (!ref_hwc || load_img(file, &im) || nj_image_resize(&im, w, h, &out)) {
        check(0, label, "could not load or resize");
        free(ref_hwc);
        return;
    }
    float *ref = malloc(sizeof(float) * 3 * w * h);
    to_planar(ref_hwc, w, h, 1.0f, ref);
    double e = tdu_max_abs_diff(out.data, ref, 3 * (size_t)w * h);
    double limit = !strcmp(mode, "area") && w <= im.w && h <= im.h ? 1e-6 : 1.6e-5;
    checkv(shape[0] == h && shape[1] == w && e <= limit, label, "max abs diff %.3g (limit %.3g)", e, limit);
    free(ref);
    free(ref_hwc);
    nj_image_free(&im);
    nj_image_free(&out);
}

/* A mixed resize differs from cv2's INTER_AREA (see resize_case); the size
 * of that difference is printed for the record, not bounded. */
static void resize_mixed_note(const char *name, int w, int h)
{
    nj_image im, out;
    int shape[4];
    char file[128];
    snprintf(file, sizeof file, "%s_%dx%d_area.npy", name, w, h);
    float *ref_hwc = load_npy(file, shape);
    snprintf(file, sizeof file, "%s.png", name);
    if (ref_hwc && !load_img(file, &im)) {
        if (!nj_image_resize(&im, w, h, &out)) {
            float *ref = malloc(sizeof(float) * 3 * w * h);
            to_planar(ref_hwc, w, h, 1.0f, ref);
            printf("# %s %dx%d->%dx%d: max abs diff from cv2 INTER_AREA %.3g (cv2 goes linear-like on both axes)\n",
                   name, im.w, im.h, w, h, tdu_max_abs_diff(out.data, ref, 3 * (size_t)w * h));
            free(ref);
            nj_image_free(&out);
        }
        nj_image_free(&im);
    }
    free(ref_hwc);
}

/* A PNG with only a signature and an IHDR claiming w×h. */
static void fake_png(const char *path, unsigned w, unsigned h)
{
    unsigned char b[33] = {0x89, 'P', 'N', 'G', '\r', '\n', 0x1a, '\n', 0, 0, 0, 13, 'I', 'H', 'D', 'R'};
    for (int i = 0; i < 4; i++) {
        b[16 + i] = (unsigned char)(w >> (24 - 8 * i));
        b[20 + i] = (unsigned char)(h >> (24 - 8 * i));
    }
    b[24] = 8; b[25] = 2;   /* 8-bit RGB; CRC left zero (the size check comes first) */
    FILE *f = fopen(path, "wb");
    if (f) { fwrite(b, 1, sizeof b, f); fclose(f); }
}

static void test_limits(void)
{
    char path[256], err[256];
    nj_image im;
    snprintf(path, sizeof path, "%s/wide.png", dir);
    fake_png(path, 20000, 100);
    int rc = nj_image_load(path, &im, err, sizeof err);
    check(rc == -1 && strstr(err, "16384") && strstr(err, path), "image_refuses_side_over_16384", "rc %d: %s", rc, err);
    snprintf(path, sizeof path, "%s/huge.png", dir);
    fake_png(path, 9000, 8000);
    rc = nj_image_load(path, &im, err, sizeof err);
    check(rc == -1 && strstr(err, "MP"), "image_refuses_over_64_megapixels", "rc %d: %s", rc, err);
    snprintf(path, sizeof path, "%s/missing.png", dir);
    rc = nj_image_load(path, &im, err, sizeof err);
    check(rc == -1 && strstr(err, "missing.png"), "image_missing_file_message", "rc %d: %s", rc, err);
}

static int count_entries(void)
{
    DIR *d = opendir(dir);
    int n = 0;
    for (struct dirent *e; d && (e = readdir(d));) n += e->d_name[0] != '.';
    if (d) closedir(d);
    return n;
}

/* 8-bit write → read is exact on k/255 values; 16-bit verified by OpenCV in
 * test_data_depthio.  Atomic: no temporary left behind, failure reported. */
static void test_write(void)
{
    nj_image im, back;
    char path[256], err[256];
    nj_image_alloc(&im, 37, 21);
    for (int i = 0; i < 3 * 37 * 21; i++) im.data[i] = (float)((i * 7919) % 256) / 255.0f;
    snprintf(path, sizeof path, "%s/written.png", dir);
    int before = count_entries();
    int rc = nj_png_write_rgb(path, &im, err, sizeof err);
    int ok = rc == 0 && !nj_image_load(path, &back, err, sizeof err);
    check(ok && back.w == 37 && back.h == 21 && tdu_max_abs_diff(im.data, back.data, 3 * 37 * 21) == 0,
          "image_png_rgb_roundtrip_exact", "rc %d %s", rc, err);
    check(count_entries() == before + 1, "image_png_write_leaves_no_temp", "%d entries, expected %d",
          count_entries(), before + 1);
    rc = nj_png_write_rgb("/nonexistent_nj_dir/x.png", &im, err, sizeof err);
    check(rc == -1 && strstr(err, "/nonexistent_nj_dir/x.png"), "image_png_write_failure_reported", "%s", err);
    nj_image_free(&im);
    if (ok) nj_image_free(&back);
}

/* Intrinsics follow the resize: a point's pixel coordinate under the resized
 * camera equals the continuous resize map (u + 0.5)·s − 0.5. */
static void test_camera(void)
{
    nj_image im, out;
    nj_camera c = {400, 380, 255.5f, 170.25f}, r;
    nj_image_alloc(&im, 512, 340);
    memset(im.data, 0, sizeof(float) * 3 * 512 * 340);
    int rc = nj_image_resize_camera(&im, c, 320, 240, &out, &r);
    double X = 0.7, Y = -0.3, Z = 3.1, u = c.fx * X / Z + c.cx, v = c.fy * Y / Z + c.cy;
    double u2 = r.fx * X / Z + r.cx, v2 = r.fy * Y / Z + r.cy;
    double eu = fabs(u2 - ((u + 0.5) * 320 / 512 - 0.5)), ev = fabs(v2 - ((v + 0.5) * 240 / 340 - 0.5));
    check(rc == 0 && eu < 1e-4 && ev < 1e-4, "image_resize_scales_intrinsics", "errors %g %g", eu, ev);
    nj_image_free(&im);
    if (!rc) nj_image_free(&out);
}

int main(int argc, char **argv)
{
    (void)argc;
    char script[512], args[1024];
    if (tdu_tmpdir(dir, sizeof dir)) return check(0, "image_tmpdir", "mkdtemp failed"), 1;
    tdu_ref_path(argv[0], "data_image.py", script, sizeof script);
    snprintf(args, sizeof args, "'%s' 320x240:area 256x256:area 173x97:area 500x290:area 500x290:axes 611x700:linear 640x480:linear",
             dir);
    if (!check(tdu_python(script, args) == 0, "image_reference_script", "%s failed", script)) return test_exit();
    test_decode();
    test_jpeg();
    const char *names[2] = {"astronaut", "chelsea"};
    for (int i = 0; i < 2; i++) {
        resize_case(names[i], 320, 240, "area");
        resize_case(names[i], 256, 256, "area");
        resize_case(names[i], 173, 97, "area");
        resize_case(names[i], 611, 700, "linear");
    }
    resize_case("chelsea", 640, 480, "linear");
    resize_case("astronaut", 500, 290, "area");      /* 512x512: shrinks on both axes */
    resize_case("chelsea", 500, 290, "axes");        /* 451x300: wider, lower */
    resize_mixed_note("chelsea", 500, 290);
    test_limits();
    test_write();
    test_camera();
    tdu_rmtree(dir);
    return test_exit();
}

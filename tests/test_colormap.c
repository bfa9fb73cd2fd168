/* tests/test_colormap.c — the "mothwing" colour map and the OKLab conversions
 * (train/eval/colormap.c).
 *
 * Sources of truth (tests/ref/colormap_ref.py via /usr/bin/python3):
 *   - scikit-image's sRGB → CIE XYZ followed by Ottosson's published
 *     XYZ → OKLab matrices (a different route from ours, which uses the
 *     combined linear-sRGB → LMS matrix), itself checked against Ottosson's
 *     published example pairs;
 *   - CIE L* of scikit-image's rgb2lab: lightness must rise strictly along
 *     the table (the independent monotonicity check), from dark to light;
 *   - CIEDE2000 (scikit-image) between neighbouring entries: near-uniform steps;
 *   - CIELAB chroma: the map is coloured, not a grey ramp.
 * Plus direct checks: OKLab round trip, our own OKLab lightness monotone,
 * and nj_colormap_image's clamping and NaN handling.
 */
#include "data/npy.h"
#include "nn/rng.h"
#include "tests/check.h"
#include "tests/test_data_util.h"
#include "train/eval/colormap.h"
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

enum { NSAMPLES = 64 };

static void test_own_properties(float lut[NJ_COLORMAP_SIZE][3])
{
    float prev = -1, worst = 1;
    int in_range = 1;
    for (int i = 0; i < NJ_COLORMAP_SIZE; i++) {
        float lab[3];
        nj_srgb_to_oklab(lut[i], lab);
        if (lab[0] - prev < worst) worst = lab[0] - prev;
        prev = lab[0];
        for (int c = 0; c < 3; c++) in_range &= lut[i][c] >= 0 && lut[i][c] <= 1;
    }
    check(worst > 0 && in_range, "OKLab lightness strictly rising along the table", "smallest step %g, in range %d",
          worst, in_range);
    nj_rng r;
    nj_rng_seed(&r, 5);
    double err = 0;
    for (int i = 0; i < 200; i++) {
        float rgb[3], lab[3], lin[3];
        for (int c = 0; c < 3; c++) rgb[c] = (float)nj_rng_uniform(&r);
        nj_srgb_to_oklab(rgb, lab);
        nj_oklab_to_linear_srgb(lab, lin);
        for (int c = 0; c < 3; c++) {
            double e = fabs(nj_srgb_encode(lin[c]) - rgb[c]);
            if (e > err) err = e;
        }
    }
    check(err < 1e-4, "OKLab round trip", "max error %g", err);
}

static void test_image(float lut[NJ_COLORMAP_SIZE][3])
{
    const float v[6] = {2.0f, 4.0f, 1.0f, 9.0f, NAN, 3.0f};   /* range 2..4 */
    nj_image im;
    int rc = nj_colormap_image(v, 3, 2, 2.0f, 4.0f, &im);
    if (!check(rc == 0 && im.w == 3 && im.h == 2, "colormap image allocated", "rc %d", rc)) return;
    size_t n = 6;
    int ok = 1;
    for (int c = 0; c < 3; c++) {
        ok &= im.data[c * n + 0] == lut[0][c];                      /* vmin → first */
        ok &= im.data[c * n + 1] == lut[NJ_COLORMAP_SIZE - 1][c];   /* vmax → last */
        ok &= im.data[c * n + 2] == lut[0][c];                      /* below → first */
        ok &= im.data[c * n + 3] == lut[NJ_COLORMAP_SIZE - 1][c];   /* above → last */
        ok &= im.data[c * n + 4] == 0.0f;                           /* NaN → black */
        ok &= im.data[c * n + 5] == lut[128][c];                    /* (3−2)/2·255 = 127.5 → 128 */
    }
    check(ok, "colormap image: ends, clamping, NaN", "pixel colours differ from the table");
    nj_image_free(&im);
}

static int save(const char *dir, const char *name, const float *x, int rows)
{
    char path[512], err[512];
    int shape[2] = {rows, 3};
    snprintf(path, sizeof path, "%s/%s", dir, name);
    return nj_npy_write(path, x, shape, 2, err, sizeof err);
}

static void test_outside(const char *argv0, float lut[NJ_COLORMAP_SIZE][3])
{
    char dir[64], script[1024], args[256], path[512], err[512];
    if (tdu_tmpdir(dir, sizeof dir)) {
        check(0, "outside: scratch folder", "mkdtemp failed");
        return;
    }
    static float rgb[NSAMPLES][3], lab[NSAMPLES][3];
    nj_rng r;
    nj_rng_seed(&r, 9);
    for (int i = 0; i < NSAMPLES; i++) {
        for (int c = 0; c < 3; c++) rgb[i][c] = i < 8 ? (float)((i >> c) & 1) : (float)nj_rng_uniform(&r);
        nj_srgb_to_oklab(rgb[i], lab[i]);
    }
    int wrc = save(dir, "table.npy", &lut[0][0], NJ_COLORMAP_SIZE) | save(dir, "rgb.npy", &rgb[0][0], NSAMPLES) |
              save(dir, "lab.npy", &lab[0][0], NSAMPLES);
    tdu_ref_path(argv0, "colormap_ref.py", script, sizeof script);
    snprintf(args, sizeof args, "'%s'", dir);
    snprintf(path, sizeof path, "%s/ref.npy", dir);
    float *ref = NULL;
    int shape[4], nd;
    int ok = wrc == 0 && tdu_python(script, args) == 0 && nj_npy_read(path, &ref, shape, &nd, err, sizeof err) == 0;
    if (check(ok && shape[0] == 7, "outside: reference ran", "write %d %s", wrc, err)) {
        check(ref[0] < 2e-3, "OKLab matches scikit-image XYZ + Ottosson's matrices", "max diff %g", ref[0]);
        check(ref[1] < 1.5e-3, "reference route matches Ottosson's published pairs", "max diff %g", ref[1]);
        check(ref[2] > 0, "CIE L* strictly rising along the table (scikit-image)", "smallest step %g", ref[2]);
        check(ref[5] < 25 && ref[6] > 85, "dark to light: L* from below 25 to above 85", "L* %g .. %g", ref[5],
              ref[6]);
        check(ref[3] < 2.2, "near-uniform CIEDE2000 steps (max/min < 2.2)", "ratio %g", ref[3]);
        check(ref[4] > 30, "a coloured map, not a grey ramp (CIELAB chroma > 30)", "max chroma %g", ref[4]);
    }
    free(ref);
    tdu_rmtree(dir);
}

int main(int argc, char **argv)
{
    (void)argc;
    static float lut[NJ_COLORMAP_SIZE][3];
    nj_colormap_table(lut);
    test_own_properties(lut);
    test_image(lut);
    test_outside(argv[0], lut);
    return test_exit();
}

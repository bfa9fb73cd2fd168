/* tests/test_colormap.c — the "bracken" colour map, the depth scaling of every
 * depth picture and the OKLab conversions (train/eval/colormap.c).
 *
 * The map's own checks take a table, so each is also run on a table built
 * here to break it, which shows that the check can fail:
 *   - OKLab lightness strictly rising (fails on the table reversed);
 *   - step uniformity: largest / smallest OKLab distance between neighbouring
 *     entries below STEP_RATIO_MAX (fails with one entry repeated);
 *   - hue path: every entry has chroma ≥ CHROMA_MIN (so its hue means
 *     something) and an OKLab hue in [HUE_LO, HUE_HI] (olive and warm earth);
 *     none in the violet/magenta quadrant [270°, 360°).  Fails on a dark
 *     violet → magenta → orange → pale yellow ramp built from four OKLab
 *     points, which itself passes the lightness check (so the hue check is
 *     what tells them apart);
 *   - the designed ends and chroma: first L 0.22, last L 0.96, muted ends,
 *     the most saturated entries in the middle third.
 * The scaling (nj_depth_scale_*, nj_depth_colour, nj_depth_image): exact
 * percentiles on known arrays, invalid depths ignored by the fit; log
 * mapping (geometric mean → middle, strictly rising, clamped), near = dark;
 * NaN, ±inf, zero and negative depths → the stated no-depth colour (outside
 * the map's hues); flat and empty pictures.
 * Outside sources of truth (tests/ref/colormap_ref.py via /usr/bin/python3):
 *   - scikit-image's sRGB → CIE XYZ followed by Ottosson's published
 *     XYZ → OKLab matrices (a different route from ours, which uses the
 *     combined linear-sRGB → LMS matrix), itself checked against Ottosson's
 *     published example pairs — matrices and pairs are values from Ottosson
 *     2020 written into colormap_ref.py, not computed by an outside library;
 *   - CIE L* of scikit-image's rgb2lab: lightness must rise strictly along
 *     the table (the independent monotonicity check), from dark to light;
 *   - CIEDE2000 (scikit-image) between neighbouring entries: near-uniform steps;
 *   - CIELAB chroma: the map is coloured, not a grey ramp.
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

enum { NSAMPLES = 64, N = NJ_COLORMAP_SIZE };

#define STEP_RATIO_MAX 1.05      /* arc-length sampling gives 1.0001; a kink or a repeat shows */
#define HUE_LO 50.0              /* degrees: the map's control hues span 55°..135° */
#define HUE_HI 140.0
#define CHROMA_MIN 0.03          /* below this an OKLab hue angle is too weak to matter */

typedef float table[N][3];

static void lab_of(const float rgb[3], double *L, double *C, double *hue)
{
    float lab[3];
    nj_srgb_to_oklab(rgb, lab);
    *L = lab[0];
    *C = hypot(lab[1], lab[2]);
    *hue = fmod(atan2(lab[2], lab[1]) * 180.0 / M_PI + 360.0, 360.0);
}

static double smallest_lightness_step(const table t)
{
    double worst = INFINITY, prev = 0, L, C, h;
    for (int i = 0; i < N; i++) {
        lab_of(t[i], &L, &C, &h);
        if (i) worst = fmin(worst, L - prev);
        prev = L;
    }
    return worst;
}

static double step_ratio(const table t)
{
    double lo = INFINITY, hi = 0;
    for (int i = 1; i < N; i++) {
        float a[3], b[3];
        nj_srgb_to_oklab(t[i - 1], a);
        nj_srgb_to_oklab(t[i], b);
        double d = sqrt((double)(a[0] - b[0]) * (a[0] - b[0]) + (double)(a[1] - b[1]) * (a[1] - b[1]) +
                        (double)(a[2] - b[2]) * (a[2] - b[2]));
        lo = fmin(lo, d);
        hi = fmax(hi, d);
    }
    return lo > 0 ? hi / lo : INFINITY;
}

/* Entries off the hue path: chroma too low, hue outside the band, or in
 * the violet/magenta quadrant; the first offender's hue into *bad_hue. */
static int hue_path_violations(const table t, int *violet, double *bad_hue, double *hue_lo, double *hue_hi)
{
    int bad = 0;
    *violet = 0;
    *bad_hue = NAN;
    *hue_lo = 360;
    *hue_hi = 0;
    for (int i = 0; i < N; i++) {
        double L, C, h;
        lab_of(t[i], &L, &C, &h);
        *hue_lo = fmin(*hue_lo, h);
        *hue_hi = fmax(*hue_hi, h);
        int in_violet = h >= 270.0;
        int off = C < CHROMA_MIN || h < HUE_LO || h > HUE_HI || in_violet;
        *violet += in_violet;
        if (off && !bad) *bad_hue = h;
        bad += off;
    }
    return bad;
}

/* A ramp through four OKLab points (L, C, hue°), linear in L, C and the
 * unwrapped hue, gamma-encoded and clamped to sRGB. */
static void ramp(const double pts[4][3], table t)
{
    for (int i = 0; i < N; i++) {
        double u = 3.0 * i / (N - 1);
        int k = u >= 3 ? 2 : (int)u;
        double f = u - k, v[3];
        for (int c = 0; c < 3; c++) v[c] = pts[k][c] + f * (pts[k + 1][c] - pts[k][c]);
        float lab[3] = {(float)v[0], (float)(v[1] * cos(v[2] * M_PI / 180)), (float)(v[1] * sin(v[2] * M_PI / 180))},
              lin[3];
        nj_oklab_to_linear_srgb(lab, lin);
        for (int c = 0; c < 3; c++) t[i][c] = nj_srgb_encode(lin[c]);
    }
}

static void test_map(const table lut)
{
    int in_range = 1;
    for (int i = 0; i < N; i++)
        for (int c = 0; c < 3; c++) in_range &= lut[i][c] >= 0 && lut[i][c] <= 1;
    check(in_range, "table entries are sRGB in [0, 1]", "an entry is outside");
    double ls = smallest_lightness_step(lut);
    checkv(ls > 0, "OKLab lightness strictly rising along the table (near = dark first)", "smallest step %.5f", ls);
    double r = step_ratio(lut);
    checkv(r < STEP_RATIO_MAX, "near-uniform steps: max/min OKLab distance between neighbours < 1.05",
           "ratio %.5f", r);
    int violet;
    double bad_hue, hlo, hhi;
    int bad = hue_path_violations(lut, &violet, &bad_hue, &hlo, &hhi);
    checkv(bad == 0, "hue path: every entry chroma >= 0.03, OKLab hue in [50, 140] deg, none in [270, 360)",
           "%d entries off (first at %.1f deg), %d violet/magenta; hues %.1f..%.1f", bad, bad_hue, violet, hlo, hhi);
    double L0, C0, h0, L1, C1, h1, cmax = 0;
    int at = 0;
    lab_of(lut[0], &L0, &C0, &h0);
    lab_of(lut[N - 1], &L1, &C1, &h1);
    for (int i = 0; i < N; i++) {
        double L, C, h;
        lab_of(lut[i], &L, &C, &h);
        if (C > cmax) cmax = C, at = i;
    }
    checkv(fabs(L0 - 0.22) < 0.005 && fabs(L1 - 0.96) < 0.005 && C0 < 0.05 && C1 < 0.05,
           "ends as designed: dark moss L 0.22, pale straw L 0.96, both muted (C < 0.05)",
           "first L %.4f C %.4f h %.1f, last L %.4f C %.4f h %.1f", L0, C0, h0, L1, C1, h1);
    checkv(cmax > 0.08 && cmax < 0.12 && at > N / 3 && at < 2 * N / 3,
           "chroma peaks (0.08..0.12) in the middle third (bronze)", "max chroma %.4f at entry %d", cmax, at);
}

/* Each map check fails on a table made to break it. */
static void test_checks_can_fail(const table lut)
{
    static table t;
    for (int i = 0; i < N; i++) memcpy(t[i], lut[N - 1 - i], sizeof t[i]);
    double ls = smallest_lightness_step(t);
    checkv(!(ls > 0), "lightness check rejects the table reversed", "smallest step %.5f", ls);
    memcpy(t, lut, sizeof t);
    memcpy(t[101], t[100], sizeof t[100]);
    double r = step_ratio(t);
    checkv(!(r < STEP_RATIO_MAX), "uniformity check rejects one entry repeated", "ratio %g", r);
    /* dark violet → magenta → orange → pale yellow, lightness rising */
    static const double other[4][3] = {{0.25, 0.09, 295}, {0.48, 0.16, 345}, {0.72, 0.15, 410}, {0.95, 0.10, 460}};
    ramp(other, t);
    int violet;
    double bad_hue, hlo, hhi;
    int bad = hue_path_violations(t, &violet, &bad_hue, &hlo, &hhi);
    ls = smallest_lightness_step(t);
    checkv(bad > N / 4 && violet > 0 && ls > 0,
           "hue check rejects a violet -> magenta -> orange -> yellow ramp (which passes the lightness check)",
           "%d of %d entries off, %d violet/magenta, first off at %.1f deg; its smallest lightness step %.5f", bad,
           N, violet, bad_hue, ls);
}

static void test_oklab_round_trip(void)
{
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

static int same_colour(const float a[3], const float b[3])
{
    return a[0] == b[0] && a[1] == b[1] && a[2] == b[2];
}

static void test_fit(void)
{
    /* 1..101 shuffled, with invalid depths the fit must skip */
    float d[101 + 6];
    nj_rng r;
    nj_rng_seed(&r, 3);
    for (int i = 0; i < 101; i++) d[i] = (float)(i + 1);
    for (int i = 100; i > 0; i--) {
        int j = (int)(nj_rng_uniform(&r) * (i + 1)) % (i + 1);
        float x = d[i];
        d[i] = d[j];
        d[j] = x;
    }
    const float invalid[6] = {NAN, INFINITY, -INFINITY, 0.0f, -5.0f, -0.0f};
    memcpy(d + 101, invalid, sizeof invalid);
    nj_depth_scale s;
    long k = nj_depth_scale_fit(d, 107, &s);
    checkv(k == 101 && s.near == 3.0f && s.far == 99.0f,
           "fit: 2nd and 98th percentiles of 1..101 are exactly 3 and 99; 6 invalid depths skipped",
           "count %ld, near %.9g, far %.9g", k, s.near, s.far);
    /* between order statistics: 10, 20, .., 110 → 10 + 0.2·10 and 100 + 0.8·10 */
    float e[11];
    for (int i = 0; i < 11; i++) e[i] = 10.0f * (float)(11 - i);
    k = nj_depth_scale_fit(e, 11, &s);
    checkv(k == 11 && fabsf(s.near - 12.0f) < 1e-5f && fabsf(s.far - 108.0f) < 1e-4f,
           "fit interpolates linearly between order statistics (12 and 108 for 10..110)", "near %.9g far %.9g",
           s.near, s.far);
    k = nj_depth_scale_fit(invalid, 6, &s);
    check(k == 0 && s.near == 1.0f && s.far == 1.0f, "fit with no valid depth: count 0, scale {1, 1}",
          "count %ld, %g..%g", k, s.near, s.far);
}

static void test_mapping(const table lut)
{
    nj_depth_scale s = {2.0f, 50.0f};
    float p0 = nj_depth_scale_pos(s, 2.0f), p1 = nj_depth_scale_pos(s, 50.0f), pm = nj_depth_scale_pos(s, 10.0f);
    checkv(p0 == 0.0f && p1 == 1.0f && fabsf(pm - 0.5f) < 1e-6f,
           "log mapping: near -> 0, far -> 1, geometric mean (10 between 2 and 50) -> 0.5",
           "%g %g %.7f", p0, p1, pm);
    int rising = 1;
    float prev = -1;
    for (int i = 0; i <= 400; i++) {
        float t = nj_depth_scale_pos(s, 2.0f * powf(25.0f, i / 400.0f) * (i == 0 ? 1.0001f : i == 400 ? 0.9999f : 1));
        rising &= t > prev;
        prev = t;
    }
    check(rising, "log mapping strictly rising between near and far", "a step did not rise");
    check(nj_depth_scale_pos(s, 0.5f) == 0.0f && nj_depth_scale_pos(s, 1e6f) == 1.0f,
          "depths beyond the ends clamp to the end positions", "not clamped");
    double worst = 0;
    for (int i = 0; i <= 10; i++) worst = fmax(worst, fabs(nj_depth_scale_pos(s, nj_depth_scale_depth(s, i / 10.0f)) - i / 10.0));
    check(worst < 1e-5, "nj_depth_scale_depth inverts the mapping (colour-bar ticks)", "worst %g", worst);
    float c_near[3], c_far[3], c_mid[3];
    nj_depth_colour(lut, s, 1.0f, c_near);
    nj_depth_colour(lut, s, 80.0f, c_far);
    nj_depth_colour(lut, s, 10.0f, c_mid);
    double Ln, Lf, C, h;
    lab_of(c_near, &Ln, &C, &h);
    lab_of(c_far, &Lf, &C, &h);
    checkv(same_colour(c_near, lut[0]) && same_colour(c_far, lut[N - 1]) && same_colour(c_mid, lut[128]) && Ln < Lf,
           "near = dark: nearest depth gets the first (darkest) entry, farthest the last (lightest)",
           "near L %.3f, far L %.3f", Ln, Lf);
    const float none[3] = {NJ_NO_DEPTH_R, NJ_NO_DEPTH_G, NJ_NO_DEPTH_B};
    const float invalid[5] = {NAN, INFINITY, -INFINITY, 0.0f, -3.0f};
    int all = 1;
    for (int i = 0; i < 5; i++) {
        float c[3];
        nj_depth_colour(lut, s, invalid[i], c);
        all &= same_colour(c, none) && isnan(nj_depth_scale_pos(s, invalid[i]));
    }
    check(all, "NaN, +inf, -inf, 0 and negative depth: position NaN, the no-depth colour", "a colour differs");
    double Lx, Cx, hx, closest = INFINITY;
    lab_of(none, &Lx, &Cx, &hx);
    for (int i = 0; i < N; i++) {
        float a[3], b[3];
        nj_srgb_to_oklab(none, a);
        nj_srgb_to_oklab(lut[i], b);
        closest = fmin(closest, hypot(hypot(a[0] - b[0], a[1] - b[1]), a[2] - b[2]));
    }
    checkv((hx < HUE_LO || hx > HUE_HI) && closest > 0.1,
           "no-depth colour lies outside the map's hues, > 0.1 OKLab from every entry",
           "hue %.1f deg, closest entry %.3f", hx, closest);
    nj_depth_scale flat = {5.0f, 5.0f};
    float c[3];
    nj_depth_colour(lut, flat, 5.0f, c);
    check(nj_depth_scale_pos(flat, 5.0f) == 0.5f && same_colour(c, lut[128]),
          "flat picture (near = far): every valid depth gets the middle entry", "pos %g",
          nj_depth_scale_pos(flat, 5.0f));
}

static void test_image(const table lut)
{
    const float d[6] = {2.0f, 50.0f, NAN, 1000.0f, 0.0f, 10.0f};
    nj_depth_scale s = {2.0f, 50.0f};
    nj_image im = {0, 0, NULL};
    int rc = nj_depth_image(d, 3, 2, s, &im);
    if (!check(rc == 0 && im.w == 3 && im.h == 2, "depth image allocated at 3x2", "rc %d", rc)) return;
    int ok = 1;
    for (int i = 0; i < 6; i++) {
        float want[3], got[3];
        nj_depth_colour(lut, s, d[i], want);
        for (int c = 0; c < 3; c++) got[c] = im.data[c * 6 + i];
        ok &= same_colour(want, got);
    }
    check(ok, "depth image: planar pixels equal nj_depth_colour of each depth", "a pixel differs");
    nj_image_free(&im);
}

static int save(const char *dir, const char *name, const float *x, int rows)
{
    char path[512], err[512];
    int shape[2] = {rows, 3};
    snprintf(path, sizeof path, "%s/%s", dir, name);
    return nj_npy_write(path, x, shape, 2, err, sizeof err);
}

static void test_outside(const char *argv0, const table lut)
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
        /* 2e-4: the two routes multiply differently rounded 10-digit matrices
         * (scikit-image's sRGB -> XYZ times Ottosson's M1, against nightjar's combined
         * linear-sRGB -> LMS matrix); measured 8.5e-5.  1.5e-3: the published pairs
         * are printed with 3 decimals, inputs and outputs (±5e-4 each); measured
         * 4.0e-4.  The matrices and pairs are quoted from Ottosson 2020 in
         * colormap_ref.py, not computed. */
        checkv(ref[0] < 2e-4, "OKLab matches scikit-image XYZ + Ottosson's matrices", "max diff %g", ref[0]);
        checkv(ref[1] < 1.5e-3, "reference route matches Ottosson's published pairs", "max diff %g", ref[1]);
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
    static table lut;
    nj_colormap_table(lut);
    test_map(lut);
    test_checks_can_fail(lut);
    test_oklab_round_trip();
    test_fit();
    test_mapping(lut);
    test_image(lut);
    test_outside(argv[0], lut);
    return test_exit();
}

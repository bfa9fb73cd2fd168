/* tests/test_eval_regions.c — eval's row-layout oracle, depth bands, obstacle
 * and masked-pixel metrics (train/measure/metrics_regions.c, train/measure/regions.c).
 *
 * Sources of truth:
 *   - hand-worked examples, with the arithmetic written beside each;
 *   - NumPy on random data (tests/ref/regions_ref.py via /usr/bin/python3,
 *     written from the protocol in its docstring, not from the C code): the
 *     oracle map, the obstacle flags, the band edges, and for four methods
 *     (median-scaled prediction, median-scaled constant, unscaled prediction,
 *     median-scaled oracle) the all-pixel metrics and AbsRel, δ<1.25, median
 *     ratio, pixels and images per band, on obstacles and on a mask, at a
 *     depth cap of 80 m and of 15 m; agreement within 1e-6 relative.
 */
#include "data/npy.h"
#include "nn/rng.h"
#include "tests/check.h"
#include "tests/test_data_util.h"
#include "train/measure/regions.h"
#include "train/measure/metrics.h"
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static int rel_close(double a, double b, double tol)
{
    return fabs(a - b) <= tol * fabs(b) + 1e-12;
}

/* ---- hand-worked ------------------------------------------------------------- */

/* gt (3 rows × 4, cap 80):
 *   row 0: 10 12  0 14   → valid {10, 12, 14}, median 12
 *   row 1:  0  0 NaN 100 → nothing valid (100 is beyond the cap) → image median
 *   row 2:  2  4  6  8   → median (4 + 6)/2 = 5 (even count: numpy's mean of the middle two)
 *   image: {2, 4, 6, 8, 10, 12, 14} → median 8
 * Obstacles (|gt − m| > 0.2·m): row 0: |10−12| = 2, |14−12| = 2, not > 2.4 → none;
 *   row 2: |2−5| = 3 > 1 and |8−5| = 3 > 1 yes; |4−5| = |6−5| = 1 is not > 1 → 2 pixels. */
static void test_hand_oracle(void)
{
    const float gt[12] = {10, 12, 0, 14, 0, 0, NAN, 100, 2, 4, 6, 8};
    float o[12], flag[12], scratch[12];
    size_t k = nj_row_layout(gt, 4, 3, NJ_EVAL_DEPTH_FLOOR, 80.0f, o, scratch);
    int ok = k == 7;
    for (int x = 0; x < 4; x++) ok &= o[x] == 12 && o[4 + x] == 8 && o[8 + x] == 5;
    check(ok, "hand: row-layout oracle (row medians, empty row takes the image median)",
          "k %zu rows %g %g %g", k, o[0], o[4], o[8]);
    size_t nf = nj_obstacle_flags(gt, o, 12, NJ_EVAL_DEPTH_FLOOR, 80.0f, flag);
    const float want[12] = {0, 0, 0, 0, 0, 0, 0, 0, 1, 0, 0, 1};
    check(nf == 2 && !memcmp(flag, want, sizeof want), "hand: obstacle flags (strictly more than 20% off)",
          "%zu flagged", nf);
    const float none[2] = {0, NAN};
    k = nj_row_layout(none, 2, 1, NJ_EVAL_DEPTH_FLOOR, 80.0f, o, scratch);
    check(k == 0 && isnan(o[0]) && isnan(o[1]), "hand: no valid pixel gives a NaN oracle", "k %zu", k);
}

/* Bands: cap 80 → [0,3) [3,6) [6,10) [10,20) [20,80); cap 15 → the last is
 * [10,15) and 20+ is dropped; cap 5 → [0,3) [3,5). */
static void test_hand_bands(void)
{
    float f[NJ_DEPTH_BANDS], t[NJ_DEPTH_BANDS];
    int n = nj_depth_bands(80, f, t);
    check(n == 5 && f[0] == 0 && t[0] == 3 && f[1] == 3 && t[1] == 6 && f[2] == 6 && t[2] == 10 && f[3] == 10 &&
              t[3] == 20 && f[4] == 20 && t[4] == 80,
          "hand: bands up to the 80 m cap", "%d bands, last %g-%g", n, f[n - 1], t[n - 1]);
    n = nj_depth_bands(15, f, t);
    check(n == 4 && f[3] == 10 && t[3] == 15, "hand: cap 15 ends the 10-20 band at 15 and drops 20+", "%d bands",
          n);
    n = nj_depth_bands(5, f, t);
    check(n == 2 && t[1] == 5, "hand: cap 5 keeps two bands", "%d bands", n);
}

/* gt {2, 3, 5, 6}, pred {1, 3, 10, 6}, scale 1:
 *   band [3, 6) holds gt 3 and 5 (6 belongs to the next band):
 *     absrel (0 + 5/5)/2 = 0.5; ratios max(g/p, p/g) 1, 2 → δ 0.5; p/g {1, 2} → median 1.5
 *   flag {1, 0, 1, 1} over [0, ∞): gt 2, 5, 6:
 *     absrel (1/2 + 5/5 + 0)/3 = 0.5; ratios 2, 2, 1 → δ 1/3; p/g {0.5, 2, 1} → median 1
 *   scale 2 on band [0, 3): p = 2, absrel 0, ratio 1
 *   band [20, 80): empty → −1. */
static void test_hand_region(void)
{
    const float gt[4] = {2, 3, 5, 6}, pred[4] = {1, 3, 10, 6}, flag[4] = {1, 0, 1, 1};
    float scratch[4];
    nj_region_metrics m;
    int rc = nj_region_metrics_compute(gt, pred, NULL, 4, 3, 6, 1.0, NJ_EVAL_DEPTH_FLOOR, 80, scratch, &m);
    check(rc == 0 && m.pixels == 2 && rel_close(m.absrel, 0.5, 1e-12) && m.delta1 == 0.5 && m.ratio == 1.5,
          "hand: band [3, 6) metrics", "rc %d pixels %ld absrel %g d1 %g ratio %g", rc, m.pixels, m.absrel, m.delta1,
          m.ratio);
    rc = nj_region_metrics_compute(gt, pred, flag, 4, 0, INFINITY, 1.0, NJ_EVAL_DEPTH_FLOOR, 80, scratch, &m);
    check(rc == 0 && m.pixels == 3 && rel_close(m.absrel, 0.5, 1e-12) && rel_close(m.delta1, 1.0 / 3, 1e-12) &&
              m.ratio == 1.0,
          "hand: flagged pixels metrics", "rc %d pixels %ld absrel %g d1 %g ratio %g", rc, m.pixels, m.absrel,
          m.delta1, m.ratio);
    rc = nj_region_metrics_compute(gt, pred, NULL, 4, 0, 3, 2.0, NJ_EVAL_DEPTH_FLOOR, 80, scratch, &m);
    check(rc == 0 && m.pixels == 1 && m.absrel == 0 && m.ratio == 1.0, "hand: the image's scale is applied",
          "absrel %g ratio %g", m.absrel, m.ratio);
    rc = nj_region_metrics_compute(gt, pred, NULL, 4, 20, 80, 1.0, NJ_EVAL_DEPTH_FLOOR, 80, scratch, &m);
    check(rc == -1 && m.pixels == 0, "hand: an empty region is not scored", "rc %d", rc);
    /* accumulation: images with ratio 0.5 (2 pixels) and 1.5 (3 pixels) → 1.0, 5 pixels, 2 images */
    nj_region_acc a;
    nj_region_acc_init(&a);
    nj_region_metrics m1 = {0.2, 1, 0.5, 2}, m2 = {0.4, 0, 1.5, 3}, r;
    nj_region_acc_add(&a, &m1);
    nj_region_acc_add(&a, &m2);
    nj_region_acc_result(&a, &r);
    check(rel_close(r.absrel, 0.3, 1e-12) && r.delta1 == 0.5 && r.ratio == 1.0 && r.pixels == 5 && a.images == 2,
          "hand: region accumulation over images", "absrel %g d1 %g ratio %g pixels %ld", r.absrel, r.delta1, r.ratio,
          r.pixels);
}

/* ---- random data against numpy ------------------------------------------------- */

enum { IMGS = 6, H = 12, W = 16, NPIX = IMGS * H * W };

static void make_data(nj_rng *r, float *gt, float *pred, float *mask)
{
    for (int i = 0; i < IMGS; i++) {
        double factor = 0.05 + 0.2 * nj_rng_uniform(r);
        for (int y = 0; y < H; y++)
            for (int x = 0; x < W; x++) {
                size_t q = ((size_t)i * H + y) * W + x;
                double lower = 1.0 - (double)y / (H - 1), g = 2 + 60 * lower * lower, u = nj_rng_uniform(r);
                if (u < 0.15) g *= 0.3 + 0.5 * nj_rng_uniform(r);          /* something standing out */
                g *= exp(0.05 * nj_rng_normal(r));
                if (i == 3) g = 0.5 + 2.4 * nj_rng_uniform(r);            /* one image all nearer than 3 m */
                double v = nj_rng_uniform(r);
                gt[q] = v < 0.08 ? 0.0f : v < 0.1 ? NAN : (float)g;
                if (i == 1 && y == 0) gt[q] = 0;                         /* a row without ground truth */
                if (i == 2 && y == 1) gt[q] = 100;                       /* a row beyond the cap */
                double base = isfinite(gt[q]) && gt[q] > 0 ? gt[q] : 10;
                double p = base * factor * exp(0.3 * nj_rng_normal(r));
                if (i == 4 && nj_rng_uniform(r) < 0.05) p *= 50;          /* clamped at the cap once scaled */
                pred[q] = (float)p;
                mask[q] = (float)(i != 5 && y >= 6 && y <= 9 && x >= 5 && x <= 10);
            }
    }
    const float edges[4] = {3, 6, 10, 20};          /* depths exactly on band edges */
    for (int e = 0; e < 4; e++) gt[(6 - e) * W + 2 * e] = edges[e];
}

/* eval's per-image path (train/eval/eval.c score_frame) for the four methods of
 * regions_ref.py; whole[m][0..7]: the all-pixel metrics and pixels. */
static void c_regions(const float *gt, const float *pred, const float *mask, float cap, float *oracle, float *flags,
                      nj_eval_regions *reg, double whole[4][8])
{
    static float gsel[H * W], ps[4][H * W], fsel[H * W], msel[H * W], ones[H * W], scratch[H * W];
    nj_metrics_acc acc[4];
    for (int m = 0; m < 4; m++) nj_metrics_acc_init(&acc[m]);
    for (int j = 0; j < H * W; j++) ones[j] = 1;
    nj_eval_regions_init(reg, cap);
    reg->lead_sequences = 1;
    for (int i = 0; i < IMGS; i++) {
        size_t off = (size_t)i * H * W, n = H * W;
        const float *g = gt + off;
        nj_row_layout(g, W, H, NJ_EVAL_DEPTH_FLOOR, cap, oracle + off, scratch);
        nj_obstacle_flags(g, oracle + off, n, NJ_EVAL_DEPTH_FLOOR, cap, flags + off);
        size_t k = nj_depth_select(g, pred + off, n, NJ_EVAL_DEPTH_FLOOR, cap, gsel, ps[0]);
        nj_depth_select(g, ones, n, NJ_EVAL_DEPTH_FLOOR, cap, gsel, ps[1]);
        nj_depth_select(g, pred + off, n, NJ_EVAL_DEPTH_FLOOR, cap, gsel, ps[2]);
        nj_depth_select(g, oracle + off, n, NJ_EVAL_DEPTH_FLOOR, cap, gsel, ps[3]);
        nj_depth_select(g, flags + off, n, NJ_EVAL_DEPTH_FLOOR, cap, gsel, fsel);
        nj_depth_select(g, mask + off, n, NJ_EVAL_DEPTH_FLOOR, cap, gsel, msel);
        if (k == 0) continue;
        double scale[4];
        const float *psel[4] = {ps[0], ps[1], ps[2], ps[3]};
        for (int m = 0; m < 4; m++) {
            scale[m] = m == 2 ? 1.0 : nj_median_scale(gsel, ps[m], k, scratch);
            nj_depth_metrics dm;
            if (nj_depth_metrics_compute(gsel, ps[m], k, scale[m], NJ_EVAL_DEPTH_FLOOR, cap, &dm) == 0)
                nj_metrics_acc_add(&acc[m], &dm, scale[m]);
        }
        nj_eval_regions_add(reg, gsel, psel, scale, k, fsel, msel, scratch);
    }
    for (int m = 0; m < 4; m++) {
        nj_depth_metrics d;
        double sm, ss;
        nj_metrics_acc_result(&acc[m], &d, &sm, &ss);
        const double v[8] = {d.absrel, d.sqrel, d.rmse, d.rmse_log, d.delta1, d.delta2, d.delta3, (double)d.pixels};
        memcpy(whole[m], v, sizeof v);
    }
}

static int save(const char *dir, const char *name, const float *x)
{
    char path[512], err[512];
    int shape[3] = {IMGS, H, W};
    snprintf(path, sizeof path, "%s/%s", dir, name);
    return nj_npy_write(path, x, shape, 3, err, sizeof err);
}

static const char *const METHOD[4] = {"median-scaled prediction", "constant", "unscaled prediction", "oracle"};
static const char *const WHAT[5] = {"absrel", "delta1", "ratio", "pixels", "images"};

/* Compares C and numpy for one cap; returns 0. */
static void compare(const char *dir, const char *script, float cap, const float *gt, const float *pred,
                    const float *mask)
{
    char args[512], path[512], err[512], name[160];
    static float oracle[NPIX], flags[NPIX];
    snprintf(args, sizeof args, "'%s' %g", dir, (double)cap);
    snprintf(path, sizeof path, "%s/ref.npy", dir);
    float *ref = NULL;
    int shape[4], nd;
    int ok = tdu_python(script, args) == 0 && nj_npy_read(path, &ref, shape, &nd, err, sizeof err) == 0;
    snprintf(name, sizeof name, "numpy cap %g: reference ran", (double)cap);
    if (!check(ok && nd == 1, name, "%s", ok ? "bad shape" : err)) {
        free(ref);
        return;
    }
    nj_eval_regions reg;
    double whole[4][8];
    c_regions(gt, pred, mask, cap, oracle, flags, &reg, whole);
    int nb = (int)ref[0], nr = reg.nbands + 2;
    long want = 1 + 2L * nb + 2L * NPIX + 4L * (8 + 5L * nr);
    snprintf(name, sizeof name, "numpy cap %g: band edges", (double)cap);
    int eok = nb == reg.nbands && shape[0] == want;
    for (int b = 0; eok && b < nb; b++) eok = ref[1 + b] == reg.from[b] && ref[1 + nb + b] == reg.to[b];
    if (!check(eok, name, "%d bands in numpy, %d in C (ref length %d, want %ld)", nb, reg.nbands, shape[0], want)) {
        free(ref);
        return;
    }
    const float *ro = ref + 1 + 2 * nb, *rf = ro + NPIX, *rm = rf + NPIX;
    double worst = 0;
    int fdiff = 0;
    for (int j = 0; j < NPIX; j++) {
        double d = fabs(oracle[j] - ro[j]) / fabs(ro[j]);
        if (!(d <= worst)) worst = d;
        fdiff += flags[j] != rf[j];
    }
    snprintf(name, sizeof name, "numpy cap %g: row-layout oracle map", (double)cap);
    check(worst <= 1e-6, name, "worst relative difference %g", worst);
    snprintf(name, sizeof name, "numpy cap %g: obstacle flags", (double)cap);
    check(fdiff == 0, name, "%d pixels differ", fdiff);
    static const char *const MW[8] = {"absrel", "sqrel", "rmse", "rmse_log", "d1", "d2", "d3", "pixels"};
    for (int m = 0; m < 4; m++, rm += 8 + 5 * nr) {
        char why[256] = "";
        for (int k = 0; k < 8 && !why[0]; k++)
            if (!rel_close(whole[m][k], rm[k], 1e-6))
                snprintf(why, sizeof why, "%s: C %.9g numpy %.9g", MW[k], whole[m][k], (double)rm[k]);
        snprintf(name, sizeof name, "numpy cap %g: %s, all-pixel metrics", (double)cap, METHOD[m]);
        check(!why[0], name, "%s", why);
        for (int g = 0; g < nr; g++) {
            int region = g < reg.nbands ? g : g == reg.nbands ? NJ_REGION_OBSTACLE : NJ_REGION_LEAD;
            nj_region_metrics v;
            nj_region_acc_result(&reg.acc[m][region], &v);
            const double c[5] = {v.absrel, v.delta1, v.ratio, (double)v.pixels, reg.acc[m][region].images};
            const float *e = rm + 8 + 5 * g;
            why[0] = 0;
            for (int k = 0; k < 5 && !why[0]; k++)
                if (!rel_close(c[k], e[k], 1e-6))
                    snprintf(why, sizeof why, "%s: C %.9g numpy %.9g", WHAT[k], c[k], (double)e[k]);
            char rname[48];
            if (g < reg.nbands) snprintf(rname, sizeof rname, "band %g-%g m", reg.from[g], reg.to[g]);
            else snprintf(rname, sizeof rname, "%s", g == reg.nbands ? "obstacles" : "mask");
            snprintf(name, sizeof name, "numpy cap %g: %s, %s", (double)cap, METHOD[m], rname);
            check(!why[0], name, "%s", why);
        }
    }
    free(ref);
}

static void test_numpy(const char *argv0)
{
    char dir[64], script[1024];
    if (tdu_tmpdir(dir, sizeof dir)) {
        check(0, "numpy: scratch folder", "mkdtemp failed");
        return;
    }
    nj_rng r;
    nj_rng_seed(&r, 20261203);
    static float gt[NPIX], pred[NPIX], mask[NPIX];
    make_data(&r, gt, pred, mask);
    int wrc = save(dir, "gt.npy", gt) | save(dir, "pred.npy", pred) | save(dir, "mask.npy", mask);
    tdu_ref_path(argv0, "regions_ref.py", script, sizeof script);
    if (check(wrc == 0, "numpy: inputs written", "nj_npy_write failed")) {
        compare(dir, script, 80.0f, gt, pred, mask);
        compare(dir, script, 15.0f, gt, pred, mask);
    }
    tdu_rmtree(dir);
}

int main(int argc, char **argv)
{
    (void)argc;
    test_hand_oracle();
    test_hand_bands();
    test_hand_region();
    test_numpy(argv[0]);
    return test_exit();
}

/* tests/test_metrics.c — depth metrics, median scaling, quantiles and the
 * snippet trajectory error (train/measure/metrics.c, train/measure/ate.c).
 *
 * Sources of truth:
 *   - hand-worked examples, with the arithmetic written beside each;
 *   - NumPy on random data (tests/ref/metrics_ref.py via /usr/bin/python3):
 *     all 7 metrics, pixel counts, per-image median scaling and its spread,
 *     metric (unscaled) mode, np.quantile, and the 5-frame ATE computed with
 *     np.linalg.inv poses.
 */
#include "data/npy.h"
#include "nn/rng.h"
#include "tests/check.h"
#include "tests/test_data_util.h"
#include "train/measure/metrics.h"
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static int close_to(double a, double b, double tol)
{
    return fabs(a - b) <= tol * (1.0 + fabs(b));
}

/* ---- hand-worked ------------------------------------------------------------- */

/* gt   = {1, 2, 4, 8, 0 (no data), 100 (beyond the 80 m cap), NaN}
 * pred = {1, 2.5, 3, 8, 5, 5, 5}, scale 1 → 4 valid pixels:
 *   gt − p        = 0, −0.5, 1, 0
 *   absrel = (0 + 0.5/2 + 1/4 + 0)/4           = 0.5/4    = 0.125
 *   sqrel  = (0 + 0.25/2 + 1/4 + 0)/4          = 0.375/4  = 0.09375
 *   rmse   = sqrt((0 + 0.25 + 1 + 0)/4)        = sqrt(0.3125) = 0.559017…
 *   rmse_log = sqrt((ln²(2/2.5) + ln²(4/3))/4) = sqrt((0.0497930 + 0.0827610)/4) = 0.182040…
 *   ratios max(g/p, p/g) = 1, 1.25, 1.3333, 1:
 *     δ<1.25 → 2/4 = 0.5 (1.25 itself is not below 1.25), δ<1.5625 → 1, δ<1.953 → 1. */
static void test_hand_metric(void)
{
    const float gt[7] = {1, 2, 4, 8, 0, 100, NAN}, pred[7] = {1, 2.5f, 3, 8, 5, 5, 5};
    float g[7], p[7];
    size_t k = nj_depth_select(gt, pred, 7, NJ_EVAL_DEPTH_FLOOR, 80.0f, g, p);
    nj_depth_metrics m;
    int rc = nj_depth_metrics_compute(g, p, k, 1.0, NJ_EVAL_DEPTH_FLOOR, 80.0f, &m);
    double rlog = sqrt((pow(log(0.8), 2) + pow(log(4.0 / 3.0), 2)) / 4);
    check(k == 4 && rc == 0 && m.pixels == 4, "hand: valid pixels", "k=%zu rc=%d pixels=%ld", k, rc, m.pixels);
    check(close_to(m.absrel, 0.125, 1e-12) && close_to(m.sqrel, 0.09375, 1e-12) &&
          close_to(m.rmse, sqrt(0.3125), 1e-12) && close_to(m.rmse_log, rlog, 1e-12),
          "hand: absrel sqrel rmse rmse_log", "%.9g %.9g %.9g %.9g", m.absrel, m.sqrel, m.rmse, m.rmse_log);
    check(m.delta1 == 0.5 && m.delta2 == 1.0 && m.delta3 == 1.0, "hand: deltas (strict < 1.25)",
          "%g %g %g", m.delta1, m.delta2, m.delta3);
}

/* gt = {2, 4, 6}, pred = {1, 3, 2}: median(gt) = 4, median(pred) = 2 → scale 2,
 * scaled pred = {2, 6, 4}; |gt − p| = 0, 2, 2 → absrel = (0 + 2/4 + 2/6)/3 = 5/18.
 * Even count: gt = {10, 1, 3, 2}, pred = {2, 1, 2, 1}: medians (2+3)/2 = 2.5 and
 * (1+2)/2 = 1.5 → scale 5/3.
 * Clamping: gt = 50, pred = 1000 with cap 80 → p = 80, absrel = 30/50 = 0.6. */
static void test_hand_scaling(void)
{
    float g3[3] = {2, 4, 6}, p3[3] = {1, 3, 2}, scratch[4];
    double s = nj_median_scale(g3, p3, 3, scratch);
    nj_depth_metrics m;
    nj_depth_metrics_compute(g3, p3, 3, s, NJ_EVAL_DEPTH_FLOOR, 80.0f, &m);
    check(s == 2.0 && close_to(m.absrel, 5.0 / 18.0, 1e-12), "hand: median scaling (odd count)",
          "scale %g absrel %.9g", s, m.absrel);
    float g4[4] = {10, 1, 3, 2}, p4[4] = {2, 1, 2, 1};
    double s4 = nj_median_scale(g4, p4, 4, scratch);
    check(close_to(s4, 5.0 / 3.0, 1e-12) && g4[0] == 10 && p4[0] == 2, "hand: median scaling (even count)",
          "scale %.9g (inputs must be unchanged)", s4);
    float g1[1] = {50}, p1[1] = {1000};
    nj_depth_metrics_compute(g1, p1, 1, 1.0, NJ_EVAL_DEPTH_FLOOR, 80.0f, &m);
    check(close_to(m.absrel, 0.6, 1e-12), "hand: prediction clamped to the cap", "absrel %.9g", m.absrel);
    check(nj_depth_metrics_compute(g1, p1, 0, 1.0, NJ_EVAL_DEPTH_FLOOR, 80.0f, &m) == -1,
          "hand: no pixels is an error", "returned 0");
}

/* Accumulation: per-image absrel 0.1 and 0.3 → mean 0.2; scales 2 and 4 →
 * mean 3, population std 1; pixels 4 + 6 = 10. */
static void test_hand_accumulate(void)
{
    nj_metrics_acc a;
    nj_metrics_acc_init(&a);
    nj_depth_metrics m1 = {0.1, 0, 0, 0, 1, 1, 1, 4}, m2 = {0.3, 0, 0, 0, 0, 1, 1, 6}, r;
    nj_metrics_acc_add(&a, &m1, 2.0);
    nj_metrics_acc_add(&a, &m2, 4.0);
    double sm, ss;
    nj_metrics_acc_result(&a, &r, &sm, &ss);
    check(close_to(r.absrel, 0.2, 1e-12) && r.delta1 == 0.5 && r.pixels == 10 && sm == 3.0 && close_to(ss, 1.0, 1e-12),
          "hand: accumulation over images", "absrel %g d1 %g pixels %ld scale %g±%g", r.absrel, r.delta1,
          r.pixels, sm, ss);
}

/* gt x = 0..4, pred x = {0, 1, 1, 1, 1} (y = z = 0):
 *   s = Σ gt·pred / Σ pred² = (1 + 2 + 3 + 4)/4 = 2.5
 *   e = s·pred − gt = 0, 1.5, 0.5, −0.5, −1.5 → Σe² = 2.25 + 0.25 + 0.25 + 2.25 = 5
 *   ate = sqrt(5)/5 = 0.4472…, rms = sqrt(5/5) = 1.
 * A camera moving 1 m forward per frame: c2w_i = [I | (0, 0, i)], motions
 * rel = [I | (0, 0, −1)] (a point 1 m closer after each step) → positions (0, 0, i). */
static void test_hand_ate(void)
{
    double gt[15] = {0}, pred[15] = {0}, scale, rmse;
    const double px[5] = {0, 1, 1, 1, 1};
    for (int i = 0; i < 5; i++) {
        gt[3 * i] = i;
        pred[3 * i] = px[i];
    }
    double ate = nj_ate(gt, pred, 5, &scale, &rmse);
    check(close_to(scale, 2.5, 1e-12) && close_to(ate, sqrt(5.0) / 5, 1e-12) && close_to(rmse, 1.0, 1e-12),
          "hand: ATE with least-squares scale", "scale %g ate %.9g rmse %.9g", scale, ate, rmse);
    double c2w[60] = {0}, rel[48] = {0}, a[15], b[15];
    for (int i = 0; i < 5; i++) {
        double *P = c2w + 12 * i;
        P[0] = P[5] = P[10] = 1;
        P[11] = i;
        if (i < 4) {
            double *T = rel + 12 * i;
            T[0] = T[5] = T[10] = 1;
            T[11] = -1;
        }
    }
    nj_positions_from_c2w(c2w, 5, a);
    nj_positions_from_motions(rel, 5, b);
    int ok = 1;
    for (int i = 0; i < 5; i++) ok &= a[3 * i] == 0 && a[3 * i + 1] == 0 && a[3 * i + 2] == i && b[3 * i + 2] == i;
    check(ok && nj_ate(a, b, 5, NULL, NULL) < 1e-12, "hand: positions from poses and from motions",
          "z %g %g %g", b[2], b[5], b[14]);
}

/* Hand-worked rotation angles: a turn of 0.3 rad about z against none, and
 * two turns about x (0.5 and −0.25 rad) that differ by 0.75 rad. */
static void test_hand_rotation(void)
{
    const double c = cos(0.3), s = sin(0.3);
    const double Rz[12] = {c, -s, 0, 1, s, c, 0, 2, 0, 0, 1, 3}, I[12] = {1, 0, 0, 0, 0, 1, 0, 0, 0, 0, 1, 0};
    double Ra[12] = {1, 0, 0, 0, 0, cos(0.5), -sin(0.5), 0, 0, sin(0.5), cos(0.5), 0};
    double Rb[12] = {1, 0, 0, 0, 0, cos(-0.25), -sin(-0.25), 0, 0, sin(-0.25), cos(-0.25), 0};
    check(close_to(nj_rotation_angle(Rz), 0.3, 1e-12) && close_to(nj_rotation_error(Rz, I), 0.3, 1e-12) &&
              close_to(nj_rotation_error(Ra, Rb), 0.75, 1e-12) && nj_rotation_error(Rz, Rz) < 1e-7,
          "hand: rotation angle and rotation error", "%g %g %g", nj_rotation_angle(Rz), nj_rotation_error(Rz, I),
          nj_rotation_error(Ra, Rb));
    /* small angles keep their precision (acos of the trace would lose half the digits) */
    const double e = 1e-5;
    double Ry[12] = {cos(e), 0, sin(e), 0, 0, 1, 0, 0, -sin(e), 0, cos(e), 0};
    check(close_to(nj_rotation_error(I, Ry), e, 1e-15) && close_to(nj_rotation_angle(Ry), e, 1e-15),
          "hand: a rotation of 1e-5 rad is measured to 1e-15", "%.17g", nj_rotation_error(I, Ry));
    /* camera j = camera i moved 1 m along its own z: points of i appear 1 m nearer in j */
    const double ci[12] = {1, 0, 0, 5, 0, 1, 0, 6, 0, 0, 1, 7}, cj[12] = {1, 0, 0, 5, 0, 1, 0, 6, 0, 0, 1, 8};
    double m[12];
    nj_motion_from_c2w(ci, cj, m);
    check(m[3] == 0 && m[7] == 0 && m[11] == -1 && nj_rotation_angle(m) == 0, "hand: motion between two camera poses",
          "t = (%g, %g, %g)", m[3], m[7], m[11]);
    /* rotation vectors: the turns above, a 1e-5 rad turn, and turns near π built
     * by Rodrigues' formula (R = I + sin θ K + (1 − cos θ) K², Rodrigues 1840),
     * where sin θ no longer carries the axis: 3.1 and 3.14159 rad about
     * (1, 2, 2)/3 and (0.36, 0.48, −0.8) (its largest component negative, so the
     * axis's sign must come from the antisymmetric part), and π itself, where
     * v and −v are the same rotation */
    double v[3], vb[3];
    nj_rotation_vector(Rz, v);
    nj_rotation_vector(Rb, vb);
    int vok = close_to(v[0], 0, 1e-15) && close_to(v[1], 0, 1e-15) && close_to(v[2], 0.3, 1e-12) &&
              close_to(vb[0], -0.25, 1e-12) && close_to(vb[1], 0, 1e-15) && close_to(vb[2], 0, 1e-15);
    nj_rotation_vector(Ry, v);
    vok &= close_to(v[1], e, 1e-15) && v[0] == 0 && v[2] == 0;
    const double th[5] = {3.1, 3.14159, 3.1, 3.14159, M_PI};
    const double ax[5][3] = {{1.0 / 3, 2.0 / 3, 2.0 / 3}, {1.0 / 3, 2.0 / 3, 2.0 / 3}, {0.36, 0.48, -0.8},
                             {0.36, 0.48, -0.8}, {0.36, 0.48, -0.8}};
    double worst = 0;
    for (int t = 0; t < 5; t++) {
        const double *n = ax[t];
        double K[9] = {0, -n[2], n[1], n[2], 0, -n[0], -n[1], n[0], 0}, R[12] = {0};
        for (int r = 0; r < 3; r++)
            for (int c2 = 0; c2 < 3; c2++) {
                double k2 = 0;
                for (int k = 0; k < 3; k++) k2 += K[3 * r + k] * K[3 * k + c2];
                R[4 * r + c2] = (r == c2) + sin(th[t]) * K[3 * r + c2] + (1 - cos(th[t])) * k2;
            }
        nj_rotation_vector(R, v);
        double dp = 0, dm = 0;
        for (int k = 0; k < 3; k++) {
            dp = fmax(dp, fabs(v[k] - th[t] * n[k]));
            dm = fmax(dm, fabs(v[k] + th[t] * n[k]));
        }
        worst = fmax(worst, t < 4 ? dp : fmin(dp, dm));
    }
    check(vok && worst < 1e-9, "hand: rotation vectors (axis x angle), small, 0.3 rad and near pi",
          "worst near-pi difference %.3g", worst);
}

/* ---- random data against numpy ------------------------------------------------- */

enum { IMGS = 6, H = 20, W = 28, SNIPS = 8, NQ = 101 };

/* Random rotation (axis-angle up to ~0.3 rad) as a row-major 3×3. */
static void random_rotation(nj_rng *r, double R[9])
{
    double v[3] = {0.15 * nj_rng_normal(r), 0.15 * nj_rng_normal(r), 0.15 * nj_rng_normal(r)};
    double th = sqrt(v[0] * v[0] + v[1] * v[1] + v[2] * v[2]), k[3] = {v[0] / th, v[1] / th, v[2] / th};
    double c = cos(th), s = sin(th), C = 1 - c;
    double M[9] = {c + k[0] * k[0] * C, k[0] * k[1] * C - k[2] * s, k[0] * k[2] * C + k[1] * s,
                   k[1] * k[0] * C + k[2] * s, c + k[1] * k[1] * C, k[1] * k[2] * C - k[0] * s,
                   k[2] * k[0] * C - k[1] * s, k[2] * k[1] * C + k[0] * s, c + k[2] * k[2] * C};
    memcpy(R, M, sizeof M);
}

static void make_depth(nj_rng *r, float *gt, float *pred)
{
    for (int i = 0; i < IMGS; i++) {
        double factor = 0.02 + 0.2 * nj_rng_uniform(r);      /* the unknown scale */
        for (int j = 0; j < H * W; j++) {
            size_t q = (size_t)i * H * W + j;
            double u = nj_rng_uniform(r);
            gt[q] = u < 0.1 ? 0.0f : (float)(0.5 + 110 * nj_rng_uniform(r));   /* some beyond the cap */
            double g = gt[q] > 0 ? gt[q] : 10;
            pred[q] = (float)(g * factor * exp(0.3 * nj_rng_normal(r)));
        }
    }
}

/* Snippet poses: GT camera-to-world by a random walk; the "prediction" is the
 * true motion rel_i = c2w_{i+1}⁻¹ c2w_i with its translation shrunk and noised
 * and its rotation multiplied by a random one. */
static void make_poses(nj_rng *r, float *c2w, float *rel)
{
    for (int s = 0; s < SNIPS; s++) {
        double P[5][12];
        for (int i = 0; i < 5; i++) {
            random_rotation(r, P[i]);           /* fills the first 9 of 12: reorganise */
            double R[9];
            memcpy(R, P[i], sizeof R);
            for (int a = 0; a < 3; a++) {
                for (int b = 0; b < 3; b++) P[i][4 * a + b] = R[3 * a + b];
                P[i][4 * a + 3] = (i ? P[i - 1][4 * a + 3] : 5 * nj_rng_normal(r)) + nj_rng_normal(r);
            }
        }
        for (int i = 0; i < 5; i++)
            for (int k = 0; k < 12; k++) c2w[(s * 5 + i) * 12 + k] = (float)P[i][k];
        for (int i = 0; i < 4; i++) {
            double T[12];
            for (int a = 0; a < 3; a++) {          /* R_{i+1}ᵀ R_i and R_{i+1}ᵀ (t_i − t_{i+1}) */
                for (int b = 0; b < 3; b++) {
                    double acc = 0;
                    for (int k = 0; k < 3; k++) acc += P[i + 1][4 * k + a] * P[i][4 * k + b];
                    T[4 * a + b] = acc;
                }
                double acc = 0;
                for (int k = 0; k < 3; k++) acc += P[i + 1][4 * k + a] * (P[i][4 * k + 3] - P[i + 1][4 * k + 3]);
                T[4 * a + 3] = 0.3 * acc + 0.05 * nj_rng_normal(r);
            }
            double Q[9], RT[9];                    /* a wrong rotation: R ← R·Q */
            random_rotation(r, Q);
            for (int a = 0; a < 3; a++)
                for (int b = 0; b < 3; b++)
                    RT[3 * a + b] = T[4 * a] * Q[b] + T[4 * a + 1] * Q[3 + b] + T[4 * a + 2] * Q[6 + b];
            for (int a = 0; a < 3; a++)
                for (int b = 0; b < 3; b++) T[4 * a + b] = RT[3 * a + b];
            for (int k = 0; k < 12; k++) rel[(s * 4 + i) * 12 + k] = (float)T[k];
        }
    }
}

static void c_depth_metrics(const float *gt, const float *pred, int median, double out[10])
{
    nj_metrics_acc acc;
    nj_metrics_acc_init(&acc);
    float g[H * W], p[H * W], scratch[H * W];
    for (int i = 0; i < IMGS; i++) {
        size_t k = nj_depth_select(gt + (size_t)i * H * W, pred + (size_t)i * H * W, H * W,
                                   NJ_EVAL_DEPTH_FLOOR, NJ_EVAL_DEPTH_CAP, g, p);
        double s = median ? nj_median_scale(g, p, k, scratch) : 1.0;
        nj_depth_metrics m;
        if (nj_depth_metrics_compute(g, p, k, s, NJ_EVAL_DEPTH_FLOOR, NJ_EVAL_DEPTH_CAP, &m) == 0)
            nj_metrics_acc_add(&acc, &m, s);
    }
    nj_depth_metrics m;
    nj_metrics_acc_result(&acc, &m, &out[8], &out[9]);
    const double v[8] = {m.absrel, m.sqrel, m.rmse, m.rmse_log, m.delta1, m.delta2, m.delta3, (double)m.pixels};
    memcpy(out, v, sizeof v);
}

static int save(const char *dir, const char *name, const float *x, const int *shape, int nd)
{
    char path[512], err[512];
    snprintf(path, sizeof path, "%s/%s", dir, name);
    return nj_npy_write(path, x, shape, nd, err, sizeof err);
}

static void compare_block(const char *name, const double *c, const float *ref, int n, double tol)
{
    static const char *const what[10] = {"absrel", "sqrel", "rmse", "rmse_log", "delta1", "delta2",
                                         "delta3", "pixels", "scale mean", "scale std"};
    for (int k = 0; k < n; k++) {
        char nm[128];
        snprintf(nm, sizeof nm, "numpy: %s %s", name, what[k]);
        check(close_to(c[k], ref[k], tol), nm, "C %.9g numpy %.9g", c[k], (double)ref[k]);
    }
}

static void test_numpy(const char *argv0)
{
    char dir[64], script[1024], args[512], path[512], err[512];
    if (tdu_tmpdir(dir, sizeof dir)) {
        check(0, "numpy: scratch folder", "mkdtemp failed");
        return;
    }
    nj_rng r;
    nj_rng_seed(&r, 20240611);
    static float gt[IMGS * H * W], pred[IMGS * H * W], q[NQ], c2w[SNIPS * 5 * 12], rel[SNIPS * 4 * 12];
    make_depth(&r, gt, pred);
    for (int i = 0; i < NQ; i++) q[i] = (float)(100 * nj_rng_normal(&r));
    make_poses(&r, c2w, rel);
    int s3[3] = {IMGS, H, W}, s1[1] = {NQ}, sc[4] = {SNIPS, 5, 3, 4}, sr[4] = {SNIPS, 4, 3, 4};
    int wrc = save(dir, "gt.npy", gt, s3, 3) | save(dir, "pred.npy", pred, s3, 3) | save(dir, "q.npy", q, s1, 1) |
              save(dir, "c2w.npy", c2w, sc, 4) | save(dir, "rel.npy", rel, sr, 4);
    tdu_ref_path(argv0, "metrics_ref.py", script, sizeof script);
    snprintf(args, sizeof args, "'%s' %g", dir, (double)NJ_EVAL_DEPTH_CAP);
    float *ref = NULL;
    int shape[4], nd;
    snprintf(path, sizeof path, "%s/ref.npy", dir);
    int ok = wrc == 0 && tdu_python(script, args) == 0 && nj_npy_read(path, &ref, shape, &nd, err, sizeof err) == 0;
    if (!check(ok && nd == 1 && shape[0] == 25 + 3 * SNIPS, "numpy: reference ran", "write %d, %s", wrc, err)) {
        free(ref);
        tdu_rmtree(dir);
        return;
    }
    double cm[10];
    c_depth_metrics(gt, pred, 1, cm);
    compare_block("median-scaled", cm, ref, 10, 1e-5);
    c_depth_metrics(gt, pred, 0, cm);
    compare_block("metric", cm, ref + 10, 8, 1e-5);
    const double qs[5] = {0, 0.05, 0.5, 0.95, 1};
    int qok = 1;
    for (int k = 0; k < 5; k++) {
        float tmp[NQ];
        memcpy(tmp, q, sizeof tmp);
        qok &= close_to(nj_quantile(tmp, NQ, qs[k]), ref[20 + k], 1e-5);
    }
    check(qok, "numpy: quantiles (np.quantile, linear)", "median C %g numpy %g", nj_median(q, NQ), (double)ref[22]);
    int aok = 1;
    double worst = 0;
    for (int s = 0; s < SNIPS; s++) {
        double c[60], rl[48], gp[15], pp[15], scale, rmse;
        for (int k = 0; k < 60; k++) c[k] = c2w[s * 60 + k];
        for (int k = 0; k < 48; k++) rl[k] = rel[s * 48 + k];
        nj_positions_from_c2w(c, 5, gp);
        nj_positions_from_motions(rl, 5, pp);
        double ate = nj_ate(gp, pp, 5, &scale, &rmse);
        const float *e = ref + 25 + 3 * s;
        aok &= close_to(ate, e[0], 1e-5) && close_to(rmse, e[1], 1e-5) && close_to(scale, e[2], 1e-5);
        if (fabs(ate - e[0]) > worst) worst = fabs(ate - e[0]);
    }
    check(aok, "numpy: 5-frame snippet ATE, RMS and scale", "worst ATE difference %g", worst);
    free(ref);
    ref = NULL;
    tdu_ref_path(argv0, "rpe_ref.py", script, sizeof script);
    snprintf(args, sizeof args, "'%s'", dir);
    snprintf(path, sizeof path, "%s/rpe.npy", dir);
    ok = tdu_python(script, args) == 0 && nj_npy_read(path, &ref, shape, &nd, err, sizeof err) == 0;
    if (check(ok && nd == 1 && shape[0] == 3 * SNIPS * 4, "scipy: rotation reference ran", "%s", err)) {
        int rok = 1;
        worst = 0;
        for (int s = 0; s < SNIPS; s++)
            for (int i = 0; i < 4; i++) {
                double ci[12], cj[12], rl[12], gm[12];
                for (int k = 0; k < 12; k++) {
                    ci[k] = c2w[(s * 5 + i) * 12 + k];
                    cj[k] = c2w[(s * 5 + i + 1) * 12 + k];
                    rl[k] = rel[(s * 4 + i) * 12 + k];
                }
                nj_motion_from_c2w(ci, cj, gm);
                const float *e = ref + 3 * (s * 4 + i);
                double re = nj_rotation_error(rl, gm), ra = nj_rotation_angle(gm), rp = nj_rotation_angle(rl);
                rok &= close_to(re, e[0], 1e-5) && close_to(ra, e[1], 1e-5) && close_to(rp, e[2], 1e-5);
                if (fabs(re - e[0]) > worst) worst = fabs(re - e[0]);
            }
        check(rok, "scipy: rotation error and angles of frame-pair motions (Rotation.magnitude)",
              "worst rotation error difference %g rad", worst);
    }
    free(ref);
    tdu_rmtree(dir);
}

int main(int argc, char **argv)
{
    (void)argc;
    test_hand_metric();
    test_hand_scaling();
    test_hand_accumulate();
    test_hand_ate();
    test_hand_rotation();
    test_numpy(argv[0]);
    return test_exit();
}

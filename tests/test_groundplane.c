/* tests/test_groundplane.c — robust ground-plane fit and the camera-height
 * scale (train/measure/groundplane.c).
 *
 * Source of truth: synthetic geometry constructed analytically here — points
 * sampled on a known plane (camera height and tilt chosen), and depth maps
 * rendered by intersecting each pixel's ray with the known ground,
 * z = h / (n·K⁻¹[u v 1]).  Checks:
 *   - exact points + 40% outliers (a wall and scattered points): plane found
 *     to 1e-4;
 *   - noisy points (depth error 3%, along the rays) + 33% outliers: distance
 *     within 1%, normal within 1°;
 *   - a rendered depth map at an unknown scale (÷7): nj_ground_scale returns 7;
 *   - the synthetic yard's exact depth (nj_synth_run: textured ground with
 *     crates, walls and poles) with 5% per-pixel noise, divided by 7, with the
 *     true camera height from
 *     its poses (camera at y = −h above the ground y = 0): scale 7 within 2%;
 *   - failures with a one-line reason: only a wall, too few points, a cloud
 *     with no dominant level plane.
 */
#include "data/depthio.h"
#include "data/poses.h"
#include "data/dataset.h"
#include "data/synth.h"
#include "nn/rng.h"
#include "tests/test_data_util.h"
#include "tests/check.h"
#include "train/measure/groundplane.h"
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* Unit down-normal of the ground in the camera frame for a camera pitched
 * down by `pitch` and rolled by `roll` (radians): R_x(pitch)·R_z(roll)·(0,1,0). */
static void ground_normal(double pitch, double roll, double n[3])
{
    double v[3] = {-sin(roll), cos(roll), 0};
    n[0] = v[0];
    n[1] = cos(pitch) * v[1] - sin(pitch) * v[2];
    n[2] = sin(pitch) * v[1] + cos(pitch) * v[2];
}

/* A point on {X : n·X = h}: a random in-plane offset from the foot point h·n,
 * kept in front of the camera (z from 2 to 20). */
static void plane_point(nj_rng *r, const double n[3], double h, float *q)
{
    double a[3] = {1, 0, 0}, b[3];
    double d = a[0] * n[0];
    for (int k = 0; k < 3; k++) a[k] -= d * n[k];
    double la = sqrt(a[0] * a[0] + a[1] * a[1] + a[2] * a[2]);
    for (int k = 0; k < 3; k++) a[k] /= la;
    b[0] = n[1] * a[2] - n[2] * a[1];
    b[1] = n[2] * a[0] - n[0] * a[2];
    b[2] = n[0] * a[1] - n[1] * a[0];
    if (b[2] < 0)
        for (int k = 0; k < 3; k++) b[k] = -b[k];
    for (;;) {
        double s = -6 + 12 * nj_rng_uniform(r), t = 30 * nj_rng_uniform(r);
        double p[3];
        for (int k = 0; k < 3; k++) p[k] = h * n[k] + s * a[k] + t * b[k];
        if (p[2] < 2 || p[2] > 20) continue;
        for (int k = 0; k < 3; k++) q[k] = (float)p[k];
        return;
    }
}

static double angle_deg(const double a[3], const double b[3])
{
    double d = a[0] * b[0] + a[1] * b[1] + a[2] * b[2];
    return acos(d > 1 ? 1 : d < -1 ? -1 : d) * 180.0 / M_PI;
}

/* n ground points (optionally noised by `noise`·depth), then outliers: half on
 * the wall x = 1.5, half scattered in a box. */
static float *make_cloud(nj_rng *r, const double n[3], double h, int ground, int outliers, double noise)
{
    float *xyz = malloc((size_t)(ground + outliers) * 3 * sizeof *xyz);
    for (int i = 0; i < ground; i++) {
        float *q = xyz + 3 * i;
        plane_point(r, n, h, q);
        float e = (float)(1 + noise * nj_rng_normal(r));    /* a depth error moves along the ray */
        for (int k = 0; k < 3; k++) q[k] *= e;
    }
    for (int i = 0; i < outliers; i++) {
        float *q = xyz + 3 * (ground + i);
        q[0] = i % 2 ? 1.5f : (float)(-5 + 10 * nj_rng_uniform(r));
        q[1] = (float)(-2 + 3 * nj_rng_uniform(r));
        q[2] = (float)(2 + 18 * nj_rng_uniform(r));
    }
    return xyz;
}

static void test_exact(void)
{
    nj_rng r;
    nj_rng_seed(&r, 7);
    double n[3];
    ground_normal(0.12, 0.05, n);
    float *xyz = make_cloud(&r, n, 1.3, 600, 400, 0);
    nj_plane_options o;
    nj_plane_options_default(&o);
    nj_plane p;
    char err[256] = "";
    int rc = nj_plane_fit(xyz, 1000, &o, &p, err, sizeof err);
    check(rc == 0 && fabs(p.dist - 1.3) < 1e-4 && angle_deg(p.n, n) < 0.01 && p.inliers >= 600,
          "exact ground + 40% outliers", "rc %d (%s) dist %.6f angle %.4f deg inliers %d", rc, err, p.dist,
          angle_deg(p.n, n), p.inliers);
    nj_plane p2;
    nj_plane_fit(xyz, 1000, &o, &p2, err, sizeof err);
    check(memcmp(&p, &p2, sizeof p) == 0, "same seed, same plane", "dist %.9g vs %.9g", p.dist, p2.dist);
    free(xyz);
}

static void test_noisy(void)
{
    nj_rng r;
    nj_rng_seed(&r, 11);
    double n[3];
    ground_normal(-0.2, -0.1, n);
    float *xyz = make_cloud(&r, n, 0.37, 3000, 1500, 0.03);
    nj_plane_options o;
    nj_plane_options_default(&o);
    nj_plane p;
    char err[256] = "";
    int rc = nj_plane_fit(xyz, 4500, &o, &p, err, sizeof err);
    check(rc == 0 && fabs(p.dist / 0.37 - 1) < 0.01 && angle_deg(p.n, n) < 1.0, "noisy ground (3% depth error)",
          "rc %d (%s) dist %.5f (0.37) angle %.3f deg", rc, err, p.dist, angle_deg(p.n, n));
    free(xyz);
}

/* Depth map of flat ground seen by a camera 1.5 m up, pitched down 6° and
 * rolled 2°, sky above the horizon (0 = no depth), then divided by 7 (the
 * unknown scale of monocular depth).  The camera-height scale must be 7. */
static void test_depth_map(void)
{
    enum { W = 80, H = 60 };
    static float depth[W * H];
    nj_camera cam = {70.0f, 70.0f, 39.5f, 29.5f};
    double n[3];
    ground_normal(6 * M_PI / 180, 2 * M_PI / 180, n);
    int ground = 0;
    for (int v = 0; v < H; v++)
        for (int u = 0; u < W; u++) {
            double d[3] = {(u - cam.cx) / cam.fx, (v - cam.cy) / cam.fy, 1};
            double nd = n[0] * d[0] + n[1] * d[1] + n[2] * d[2];
            double z = nd > 1e-6 ? 1.5 / nd : 0;
            depth[v * W + u] = z > 0 && z < 200 ? (float)(z / 7.0) : 0.0f;
            ground += depth[v * W + u] > 0;
        }
    nj_plane_options o;
    nj_plane_options_default(&o);
    double scale = 0;
    nj_plane p;
    char err[256] = "";
    int rc = nj_ground_scale(depth, W, H, cam, 1.5, &o, &scale, &p, err, sizeof err);
    check(rc == 0 && fabs(scale - 7.0) < 7e-3 && angle_deg(p.n, n) < 0.1, "depth map at 1/7 scale → scale 7",
          "rc %d (%s) scale %.6f angle %.4f deg (%d ground pixels)", rc, err, scale, angle_deg(p.n, n), ground);
    float *pts = NULL;
    int np = nj_ground_points(depth, W, H, cam, &o, &pts);
    int rows = (int)lroundf(o.lower_frac * H), expect = 0;
    for (int v = H - rows; v < H; v++)
        for (int u = 0; u < W; u++) expect += depth[v * W + u] > 0;
    int ok = np == expect;
    for (int i = 0; ok && i < np; i++) {     /* every point must satisfy n·X = 1.5/7 */
        const float *q = pts + 3 * i;
        ok = fabs(n[0] * q[0] + n[1] * q[1] + n[2] * q[2] - 1.5 / 7) < 1e-4;
    }
    check(ok, "lower-region back-projection lies on the ground", "%d points, expected %d", np, expect);
    free(pts);
}

/* Frame i of the synthetic yard: exact depth with 5% multiplicative noise / 7,
 * and the true camera height. */
static void synth_frame_scale(const char *dir, int i, const double *c2w, nj_camera cam, double *worst, int *fails)
{
    char path[256], err[512];
    snprintf(path, sizeof path, "%s/yard-00/depth/%06d.npy", dir, i);
    float *depth = NULL;
    int w, h;
    if (nj_depth_read(path, NJ_DEPTH_NPY, 1.0f, &depth, &w, &h, err, sizeof err)) {
        (*fails)++;
        return;
    }
    nj_rng r;
    nj_rng_seed(&r, (uint64_t)i + 100);
    for (int k = 0; k < w * h; k++) depth[k] *= (float)(exp(0.05 * nj_rng_normal(&r)) / 7.0);   /* 5% depth noise */
    double height = -c2w[12 * i + 7], scale = 0;
    nj_plane_options o;
    nj_plane_options_default(&o);
    if (nj_ground_scale(depth, w, h, cam, height, &o, &scale, NULL, err, sizeof err)) (*fails)++;
    else if (fabs(scale / 7.0 - 1) > *worst) *worst = fabs(scale / 7.0 - 1);
    free(depth);
}

static void test_synthetic_yard(void)
{
    enum { FRAMES = 6 };
    char dir[64], err[512], poses[256];
    if (tdu_tmpdir(dir, sizeof dir)) {
        check(0, "synthetic yard: scratch folder", "mkdtemp failed");
        return;
    }
    nj_synth_config sc;
    nj_synth_config_default(&sc);
    sc.out = dir;
    sc.frames = FRAMES;
    sc.sequences = 1;
    sc.width = 160;
    sc.height = 120;
    double *c2w = NULL;
    snprintf(poses, sizeof poses, "%s/yard-00/poses.txt", dir);
    if (nj_synth_run(&sc, err, sizeof err) || nj_poses_read(poses, &c2w, err, sizeof err) != FRAMES) {
        check(0, "synthetic yard: rendered", "%s", err);
        free(c2w);
        tdu_rmtree(dir);
        return;
    }
    /* the intrinsics of the dataset description the renderer wrote */
    nj_dataset ds;
    nj_problems pr;
    nj_problems_init(&pr);
    char json[128];
    snprintf(json, sizeof json, "%s/dataset.json", dir);
    int bad = nj_dataset_parse(json, &ds, &pr);
    nj_camera cam = bad ? (nj_camera){0, 0, 0, 0} : ds.seq[0].camera;
    double worst = 0;
    int fails = bad;
    for (int i = 0; !bad && i < FRAMES; i++) synth_frame_scale(dir, i, c2w, cam, &worst, &fails);
    check(fails == 0 && worst < 0.02, "noisy synthetic yard depth / 7, true height → scale 7 (2%)",
          "%d failures, worst relative error %.4f", fails, worst);
    if (!bad) nj_dataset_free(&ds);
    nj_problems_free(&pr);
    free(c2w);
    tdu_rmtree(dir);
}

static int one_line(const char *s)
{
    return s[0] && !strchr(s, '\n');
}

static void test_fit_failures(void)
{
    nj_rng r;
    nj_rng_seed(&r, 3);
    nj_plane_options o;
    nj_plane_options_default(&o);
    nj_plane p;
    char err[256] = "";
    float wall[300 * 3];
    for (int i = 0; i < 300; i++) {          /* the wall x = 2 only */
        wall[3 * i] = 2.0f;
        wall[3 * i + 1] = (float)(-1 + 3 * nj_rng_uniform(&r));
        wall[3 * i + 2] = (float)(2 + 10 * nj_rng_uniform(&r));
    }
    int rc = nj_plane_fit(wall, 300, &o, &p, err, sizeof err);
    check(rc == -1 && one_line(err), "a wall is not ground", "rc %d err '%s'", rc, err);
    err[0] = 0;
    rc = nj_plane_fit(wall, 2, &o, &p, err, sizeof err);
    check(rc == -1 && one_line(err), "too few points", "rc %d err '%s'", rc, err);
    double n[3];
    ground_normal(0, 0, n);
    float *xyz = make_cloud(&r, n, 1.0, 40, 960, 0);     /* 4% ground in a scattered cloud */
    for (int i = 40; i < 1000; i++) {        /* no wall either: a thick box of scattered points */
        xyz[3 * i] = (float)(-5 + 10 * nj_rng_uniform(&r));
        xyz[3 * i + 1] = (float)(-8 + 9 * nj_rng_uniform(&r));
    }
    err[0] = 0;
    rc = nj_plane_fit(xyz, 1000, &o, &p, err, sizeof err);
    check(rc == -1 && one_line(err), "no dominant level plane", "rc %d err '%s' (inliers %d)", rc, err, p.inliers);
    free(xyz);
}

int main(void)
{
    test_exact();
    test_noisy();
    test_depth_map();
    test_synthetic_yard();
    test_fit_failures();
    return test_exit();
}

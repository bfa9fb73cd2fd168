/* train/measure/groundplane.c — RANSAC + total-least-squares ground-plane fit and the
 * metric scale it gives (see groundplane.h). */
#include "train/measure/groundplane.h"
#include "train/measure/metrics.h"
#include "nn/rng.h"
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define REFINE_ROUNDS 20     /* least-squares rounds at most */
#define REFINE_WINDOW 3.0    /* residuals within 3 RANSAC tolerances estimate the noise */

void nj_plane_options_default(nj_plane_options *o)
{
    o->iterations = 200;
    o->inlier_tol = 0.05;
    o->max_tilt_deg = 40.0;
    o->min_inlier_share = 0.2;
    o->lower_frac = 0.35f;
    o->max_points = 20000;
    o->seed = 1;
}

/* Unit normal of the plane through three points, oriented away from the
 * camera centre; returns 0 when they are (nearly) collinear. */
static int plane_from3(const float *a, const float *b, const float *c, nj_plane *p)
{
    double u[3] = {b[0] - a[0], b[1] - a[1], b[2] - a[2]};
    double v[3] = {c[0] - a[0], c[1] - a[1], c[2] - a[2]};
    double n[3] = {u[1] * v[2] - u[2] * v[1], u[2] * v[0] - u[0] * v[2], u[0] * v[1] - u[1] * v[0]};
    double len = sqrt(n[0] * n[0] + n[1] * n[1] + n[2] * n[2]);
    double scale = (u[0] * u[0] + u[1] * u[1] + u[2] * u[2]) * (v[0] * v[0] + v[1] * v[1] + v[2] * v[2]);
    if (!(len > 1e-9 * sqrt(scale)) || !(len > 0)) return 0;
    double d = (n[0] * a[0] + n[1] * a[1] + n[2] * a[2]) / len;
    double sgn = d < 0 ? -1.0 : 1.0;
    for (int k = 0; k < 3; k++) p->n[k] = sgn * n[k] / len;
    p->dist = sgn * d;
    return 1;
}

static int count_inliers(const float *xyz, int n, const nj_plane *p, double tol)
{
    int c = 0;
    for (int i = 0; i < n; i++) {
        const float *q = xyz + 3 * i;
        double r = p->n[0] * q[0] + p->n[1] * q[1] + p->n[2] * q[2] - p->dist;
        c += fabs(r) < tol;
    }
    return c;
}

/* Solves the 3×3 system A·x = b by Gaussian elimination with partial
 * pivoting; returns 0 when A is (nearly) singular. */
static int solve3(double A[3][3], double b[3], double x[3])
{
    double scale = fabs(A[0][0]) + fabs(A[1][1]) + fabs(A[2][2]);
    for (int c = 0; c < 3; c++) {
        int piv = c;
        for (int r = c + 1; r < 3; r++)
            if (fabs(A[r][c]) > fabs(A[piv][c])) piv = r;
        if (!(fabs(A[piv][c]) > 1e-12 * scale)) return 0;
        for (int k = 0; k < 3; k++) {
            double t = A[c][k];
            A[c][k] = A[piv][k];
            A[piv][k] = t;
        }
        double t = b[c];
        b[c] = b[piv];
        b[piv] = t;
        for (int r = c + 1; r < 3; r++) {
            double f = A[r][c] / A[c][c];
            for (int k = c; k < 3; k++) A[r][k] -= f * A[c][k];
            b[r] -= f * b[c];
        }
    }
    for (int r = 2; r >= 0; r--) {
        double acc = b[r];
        for (int k = r + 1; k < 3; k++) acc -= A[r][k] * x[k];
        x[r] = acc / A[r][r];
    }
    return 1;
}

/* Least squares in inverse depth on the points within `tol` of *p: on the
 * plane n·X = dist a point X = z·d (d = X/z, its ray) has 1/z = m·d with
 * m = n/dist, so m minimises Σ (m·d_i − 1/z_i)².  Depth errors act along the
 * rays, i.e. on 1/z only, which this fit models (a perpendicular fit would be
 * biased by them).  Returns 0 when fewer than 3 points or degenerate. */
static int refine(const float *xyz, int n, double tol, nj_plane *p)
{
    double A[3][3] = {{0}}, b[3] = {0, 0, 0}, m[3];
    int used = 0;
    for (int i = 0; i < n; i++) {
        const float *q = xyz + 3 * i;
        if (!(q[2] > 0) || fabs(p->n[0] * q[0] + p->n[1] * q[1] + p->n[2] * q[2] - p->dist) >= tol) continue;
        double d[3] = {q[0] / q[2], q[1] / q[2], 1.0}, inv = 1.0 / q[2];
        for (int r = 0; r < 3; r++) {
            for (int c = 0; c < 3; c++) A[r][c] += d[r] * d[c];
            b[r] += d[r] * inv;
        }
        used++;
    }
    if (used < 3 || !solve3(A, b, m)) return 0;
    double len = sqrt(m[0] * m[0] + m[1] * m[1] + m[2] * m[2]);
    if (!(len > 0)) return 0;
    for (int k = 0; k < 3; k++) p->n[k] = m[k] / len;
    p->dist = 1.0 / len;
    return 1;
}

/* Inlier tolerance of a candidate: relative depth error × its distance. */
static double tol_of(const nj_plane *p, const nj_plane_options *o)
{
    return o->inlier_tol * p->dist;
}

/* Tolerance for the least-squares step: 2.5 robust standard deviations
 * (1.4826 · median absolute residual of the points within `window` of the
 * plane), at most `window`, at least a float-precision floor. */
static double robust_tol(const float *xyz, int n, const nj_plane *p, double window)
{
    float *res = malloc((size_t)n * sizeof *res);
    if (!res) return window;
    size_t k = 0;
    for (int i = 0; i < n; i++) {
        const float *q = xyz + 3 * i;
        double r = fabs(p->n[0] * q[0] + p->n[1] * q[1] + p->n[2] * q[2] - p->dist);
        if (r < window) res[k++] = (float)r;
    }
    double sigma = 1.4826 * nj_median(res, k);
    free(res);
    double t = 2.5 * sigma, floor_tol = 1e-6 * p->dist;
    if (!(t > floor_tol)) t = floor_tol;
    return t < window ? t : window;
}

static int ransac(const float *xyz, int n, const nj_plane_options *o, double min_ny, nj_plane *best)
{
    nj_rng rng;
    nj_rng_seed(&rng, o->seed);
    int found = 0;
    best->inliers = -1;
    for (int it = 0; it < o->iterations; it++) {
        uint32_t a = nj_rng_below(&rng, (uint32_t)n), b = nj_rng_below(&rng, (uint32_t)n),
                 c = nj_rng_below(&rng, (uint32_t)n);
        nj_plane p;
        if (a == b || a == c || b == c) continue;
        if (!plane_from3(xyz + 3 * a, xyz + 3 * b, xyz + 3 * c, &p) || p.n[1] < min_ny || !(p.dist > 0))
            continue;
        p.inliers = count_inliers(xyz, n, &p, tol_of(&p, o));
        if (p.inliers > best->inliers) {
            *best = p;
            found = 1;
        }
    }
    return found;
}

int nj_plane_fit(const float *xyz, int n, const nj_plane_options *o, nj_plane *out,
                 char *err, size_t errlen)
{
    memset(out, 0, sizeof *out);
    out->points = n;
    if (n < 3) {
        snprintf(err, errlen, "ground plane: only %d usable points in the lower image region", n);
        return -1;
    }
    double min_ny = cos(o->max_tilt_deg * M_PI / 180.0);
    nj_plane p;
    if (!ransac(xyz, n, o, min_ny, &p)) {
        snprintf(err, errlen, "ground plane: no plane within %.0f degrees of level among %d points",
                 o->max_tilt_deg, n);
        return -1;
    }
    for (int r = 0; r < REFINE_ROUNDS; r++) {     /* iteratively re-weighted: converges to the mode */
        nj_plane q = p;
        double tol = robust_tol(xyz, n, &p, REFINE_WINDOW * tol_of(&p, o));
        if (!refine(xyz, n, tol, &q)) break;
        if (q.n[1] < min_ny || !(q.dist > 0)) break;
        q.inliers = count_inliers(xyz, n, &q, tol);
        double moved = fabs(q.dist - p.dist) + p.dist * (1 - (q.n[0] * p.n[0] + q.n[1] * p.n[1] + q.n[2] * p.n[2]));
        p = q;
        if (moved < 1e-7 * p.dist) break;
    }
    p.points = n;
    if (p.inliers < 3 || p.inliers < o->min_inlier_share * n) {
        snprintf(err, errlen, "ground plane: the best level plane holds only %d of %d points (%.0f%%)",
                 p.inliers, n, 100.0 * p.inliers / n);
        return -1;
    }
    *out = p;
    return 0;
}

int nj_ground_points(const float *depth, int w, int h, nj_camera cam,
                     const nj_plane_options *o, float **xyz)
{
    int y0 = h - (int)lroundf(o->lower_frac * (float)h);
    if (y0 < 0) y0 = 0;
    long region = (long)(h - y0) * w;
    int step = 1;
    while (o->max_points > 0 && region / ((long)step * step) > o->max_points) step++;
    long cap = ((h - y0) / step + 1) * (long)(w / step + 1);
    *xyz = malloc((size_t)(cap > 0 ? cap : 1) * 3 * sizeof **xyz);
    if (!*xyz) return -1;
    int n = 0;
    for (int y = h - 1; y >= y0; y -= step)
        for (int x = 0; x < w; x += step) {
            float z = depth[(size_t)y * w + x];
            if (!isfinite(z) || !(z > 0)) continue;
            float *q = *xyz + 3 * (size_t)n++;
            q[0] = ((float)x - cam.cx) / cam.fx * z;
            q[1] = ((float)y - cam.cy) / cam.fy * z;
            q[2] = z;
        }
    return n;
}

int nj_ground_scale(const float *depth, int w, int h, nj_camera cam, double height,
                    const nj_plane_options *o, double *scale, nj_plane *plane,
                    char *err, size_t errlen)
{
    float *xyz = NULL;
    int n = nj_ground_points(depth, w, h, cam, o, &xyz);
    if (n < 0) {
        snprintf(err, errlen, "ground plane: out of memory");
        return -1;
    }
    nj_plane p;
    int rc = nj_plane_fit(xyz, n, o, &p, err, errlen);
    free(xyz);
    if (plane) *plane = p;
    if (rc) return -1;
    if (!(p.dist > 0)) {
        snprintf(err, errlen, "ground plane: the fitted plane passes through the camera");
        return -1;
    }
    *scale = height / p.dist;
    return 0;
}

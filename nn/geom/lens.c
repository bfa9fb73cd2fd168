/* nn/geom/lens.c — the two lens distortion models (Brown 1966 radial-
 * tangential; Kannala & Brandt 2006 equidistant fisheye), their inverses and
 * the folding check.  See lens.h for the formulas. */
#include "nn/geom/lens.h"
#include <math.h>

#define NEWTON_ITERS 100
#define NEWTON_TOL 1e-13

const char *nj_lens_kind_name(nj_lens_kind k)
{
    return k == NJ_LENS_RADTAN ? "radial-tangential" : k == NJ_LENS_FISHEYE ? "fisheye" : "none";
}

const char *const *nj_lens_coeff_names(nj_lens_kind k, int *n)
{
    static const char *const radtan[] = {"k1", "k2", "p1", "p2", "k3"};
    static const char *const fisheye[] = {"k1", "k2", "k3", "k4"};
    *n = k == NJ_LENS_RADTAN ? 5 : k == NJ_LENS_FISHEYE ? 4 : 0;
    return k == NJ_LENS_FISHEYE ? fisheye : radtan;
}

/* radial factor 1 + k1 r² + k2 r⁴ + k3 r⁶ and its derivative in r² */
static double radial(const double *c, double r2, double *d_r2)
{
    if (d_r2) *d_r2 = c[0] + r2 * (2 * c[1] + 3 * c[4] * r2);
    return 1 + r2 * (c[0] + r2 * (c[1] + r2 * c[4]));
}

static void radtan(const double *c, double x, double y, double *xd, double *yd)
{
    double r2 = x * x + y * y, k = radial(c, r2, NULL);
    *xd = x * k + 2 * c[2] * x * y + c[3] * (r2 + 2 * x * x);
    *yd = y * k + c[2] * (r2 + 2 * y * y) + 2 * c[3] * x * y;
}

/* Jacobian of radtan at (x, y): J = [a b; d e] */
static void radtan_jacobian(const double *c, double x, double y, double J[4])
{
    double dk, r2 = x * x + y * y, k = radial(c, r2, &dk);
    J[0] = k + 2 * x * x * dk + 2 * c[2] * y + 6 * c[3] * x;
    J[1] = 2 * x * y * dk + 2 * c[2] * x + 2 * c[3] * y;
    J[2] = 2 * x * y * dk + 2 * c[2] * x + 2 * c[3] * y;
    J[3] = k + 2 * y * y * dk + 6 * c[2] * y + 2 * c[3] * x;
}

/* θd(θ) = θ (1 + k1 θ² + k2 θ⁴ + k3 θ⁶ + k4 θ⁸) and its derivative */
static double fisheye_theta(const double *c, double t, double *deriv)
{
    double t2 = t * t;
    if (deriv) *deriv = 1 + t2 * (3 * c[0] + t2 * (5 * c[1] + t2 * (7 * c[2] + t2 * 9 * c[3])));
    return t * (1 + t2 * (c[0] + t2 * (c[1] + t2 * (c[2] + t2 * c[3]))));
}

int nj_lens_distort(const nj_lens *L, const double ray[3], double *xd, double *yd)
{
    if (L->kind == NJ_LENS_FISHEYE) {
        double a = hypot(ray[0], ray[1]);
        if (a == 0) {
            if (!(ray[2] > 0)) return -1;
            *xd = *yd = 0;
            return 0;
        }
        double td = fisheye_theta(L->c, atan2(a, ray[2]), NULL);
        *xd = td * ray[0] / a;
        *yd = td * ray[1] / a;
        return isfinite(*xd) && isfinite(*yd) ? 0 : -1;
    }
    if (!(ray[2] > 0)) return -1;
    double x = ray[0] / ray[2], y = ray[1] / ray[2];
    if (L->kind == NJ_LENS_NONE) {
        *xd = x;
        *yd = y;
    } else {
        radtan(L->c, x, y, xd, yd);
    }
    return isfinite(*xd) && isfinite(*yd) ? 0 : -1;
}

/* Newton's method on the 2-D radial-tangential map, halving a step that
 * does not reduce the residual (strong barrel distortion overshoots). */
static int radtan_undistort(const double *c, double xd, double yd, double *xo, double *yo)
{
    double x = xd, y = yd, fx, fy;
    radtan(c, x, y, &fx, &fy);
    double res = hypot(fx - xd, fy - yd);
    for (int it = 0; it < NEWTON_ITERS && res > NEWTON_TOL * (1 + hypot(xd, yd)); it++) {
        double J[4];
        radtan_jacobian(c, x, y, J);
        double det = J[0] * J[3] - J[1] * J[2];
        if (!(fabs(det) > 1e-300)) return -1;
        double ex = fx - xd, ey = fy - yd;
        double dx = (J[3] * ex - J[1] * ey) / det, dy = (J[0] * ey - J[2] * ex) / det;
        double step = 1, nres = INFINITY, nx = x, ny = y;
        for (int h = 0; h < 40; h++, step *= 0.5) {
            nx = x - step * dx;
            ny = y - step * dy;
            radtan(c, nx, ny, &fx, &fy);
            nres = hypot(fx - xd, fy - yd);
            if (nres < res) break;
        }
        if (!(nres < res)) break;
        x = nx;
        y = ny;
        res = nres;
    }
    if (!(res <= 1e-9 * (1 + hypot(xd, yd)))) return -1;
    *xo = x;
    *yo = y;
    return 0;
}

static int fisheye_undistort(const double *c, double xd, double yd, double *xo, double *yo)
{
    double td = hypot(xd, yd);
    if (td < 1e-15) {
        *xo = xd;
        *yo = yd;
        return 0;
    }
    double t = td;
    for (int it = 0; it < NEWTON_ITERS; it++) {
        double d, f = fisheye_theta(c, t, &d) - td;
        if (!(d > 0)) return -1;
        double nt = t - f / d;
        if (!isfinite(nt)) return -1;
        if (fabs(nt - t) < NEWTON_TOL) { t = nt; break; }
        t = nt;
    }
    if (!(fabs(fisheye_theta(c, t, NULL) - td) <= 1e-9 * (1 + td)) || !(t >= 0) || t >= M_PI / 2 - 1e-9) return -1;
    double s = tan(t) / td;
    *xo = xd * s;
    *yo = yd * s;
    return 0;
}

int nj_lens_undistort(const nj_lens *L, double xd, double yd, double *x, double *y)
{
    if (L->kind == NJ_LENS_RADTAN) return radtan_undistort(L->c, xd, yd, x, y);
    if (L->kind == NJ_LENS_FISHEYE) return fisheye_undistort(L->c, xd, yd, x, y);
    *x = xd;
    *y = yd;
    return 0;
}

/* Walks the radial function outward in 4000 steps per rd_max (steps no finer
 * than a 4-millionth of the limit below) until it passes
 * rd_max; a derivative ≤ 0 on the way is a fold.  Radii are bounded by
 * r = 100 (89.4°) for radial-tangential and θ = π for fisheye: a function
 * still below rd_max there never reaches the image corner. */
int nj_lens_monotone(const nj_lens *L, double rd_max, double *fold_at)
{
    if (L->kind == NJ_LENS_NONE) return 0;
    double limit = L->kind == NJ_LENS_FISHEYE ? M_PI : 100.0;
    double h = fmax(rd_max / 4000, limit / 4e6);     /* at most 4 million steps, whatever the input */
    if (!isfinite(h)) return -1;
    for (double s = 0; s <= limit; s += h) {
        double d, f;
        if (L->kind == NJ_LENS_FISHEYE) {
            f = fisheye_theta(L->c, s, &d);
        } else {
            double dk, k = radial(L->c, s * s, &dk);
            f = s * k;
            d = k + 2 * s * s * dk;
        }
        if (!(d > 0)) {
            *fold_at = f;
            return -1;
        }
        if (f >= rd_max) return 0;
    }
    *fold_at = L->kind == NJ_LENS_FISHEYE ? fisheye_theta(L->c, limit, NULL) : limit * radial(L->c, limit * limit, NULL);
    return -1;
}

double nj_lens_jacobian_det(const nj_lens *L, double x, double y)
{
    if (L->kind != NJ_LENS_RADTAN) return 1;
    double J[4];
    radtan_jacobian(L->c, x, y, J);
    return J[0] * J[3] - J[1] * J[2];
}

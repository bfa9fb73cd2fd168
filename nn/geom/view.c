/* nn/geom/view.c — the pinhole view a distorted (and, in a stereo rig,
 * rotated) camera is resampled to: choosing its intrinsics so that no output
 * pixel falls outside the source image, and the source-pixel map. */
#include "nn/geom/lens.h"
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define GROW 1.002          /* focal length step while the verified map leaves the image */
#define GROW_STEPS 500      /* at most ×2.7 */
#define INSIDE_TOL 1e-3     /* pixels: rounding allowed outside [0, w−1] */
#define FOLD_GRID 32        /* grid cells per side for the tangential fold check */

/* Normalised output-frame point of source pixel (u, v): undistorted, rotated,
 * divided by z.  Returns 0, 1 when the ray lies 90° or more off the output
 * axis (imaged by a fisheye, no pinhole point), -1 when it cannot be undone. */
static int border_point(const nj_lens_view *v, double u, double vv, double *px, double *py)
{
    double x, y;
    if (nj_lens_undistort(&v->lens, (u - v->src.cx) / v->src.fx, (vv - v->src.cy) / v->src.fy, &x, &y))
        return v->lens.kind == NJ_LENS_FISHEYE ? 1 : -1;
    const double *R = v->R;
    double X = R[0] * x + R[1] * y + R[2], Y = R[3] * x + R[4] * y + R[5], Z = R[6] * x + R[7] * y + R[8];
    if (!(Z > 1e-9)) return 1;
    *px = X / Z;
    *py = Y / Z;
    return 0;
}

/* The inner rectangle [b0, b1] × [b2, b3] of one view's undistorted border:
 * left edge → largest x, right edge → smallest x, top → largest y, bottom →
 * smallest y (each edge sampled at every pixel). */
static int inner_rect(const nj_lens_view *v, double b[4], char *why, size_t whylen)
{
    int W = v->w, H = v->h;
    for (int e = 0; e < 4; e++) {
        int n = e < 2 ? H : W, seen = 0;
        for (int i = 0; i < n; i++) {
            double u = e == 0 ? 0 : e == 1 ? W - 1 : i, vv = e < 2 ? i : e == 2 ? 0 : H - 1, px, py;
            int r = border_point(v, u, vv, &px, &py);
            if (r < 0) {
                snprintf(why, whylen, "the lens distortion cannot be undone at the image border pixel (%g, %g): "
                         "it folds the image", u, vv);
                return -1;
            }
            if (r > 0) continue;
            double c = e < 2 ? px : py;
            if (!seen || (e % 2 == 0 ? c > b[e] : c < b[e])) b[e] = c;
            seen = 1;
        }
        if (!seen) {
            snprintf(why, whylen, "no pixel of the image's %s edge looks less than 90 degrees off the axis",
                     (const char *[]){"left", "right", "top", "bottom"}[e]);
            return -1;
        }
    }
    if (!(b[0] < b[1] && b[2] < b[3])) {
        snprintf(why, whylen, "the undistorted image border leaves no valid area (x %.3g..%.3g, y %.3g..%.3g)", b[0], b[1],
                 b[2], b[3]);
        return -1;
    }
    return 0;
}

/* Tangential folds: det J of the distortion must stay positive over a grid
 * of undistorted image points (the radial part is nj_lens_monotone's). */
static int check_fold(const nj_lens_view *v, char *why, size_t whylen)
{
    if (v->lens.kind != NJ_LENS_RADTAN) return 0;
    for (int j = 0; j <= FOLD_GRID; j++)
        for (int i = 0; i <= FOLD_GRID; i++) {
            double u = (double)i * (v->w - 1) / FOLD_GRID, vv = (double)j * (v->h - 1) / FOLD_GRID, x, y;
            if (nj_lens_undistort(&v->lens, (u - v->src.cx) / v->src.fx, (vv - v->src.cy) / v->src.fy, &x, &y) ||
                !(nj_lens_jacobian_det(&v->lens, x, y) > 0)) {
                snprintf(why, whylen, "the lens distortion folds the image near pixel (%.0f, %.0f) (the tangential "
                         "terms p1, p2 turn the mapping over)", u, vv);
                return -1;
            }
        }
    return 0;
}

int nj_lens_view_source(const nj_lens_view *v, double u, double vv, double *su, double *sv, double *zscale)
{
    double x = (u - v->out.cx) / v->out.fx, y = (vv - v->out.cy) / v->out.fy, ray[3], xd, yd;
    const double *R = v->R;      /* ray = Rᵀ·(x, y, 1) */
    for (int i = 0; i < 3; i++) ray[i] = R[i] * x + R[3 + i] * y + R[6 + i];
    if (nj_lens_distort(&v->lens, ray, &xd, &yd)) return -1;
    *su = v->src.fx * xd + v->src.cx;
    *sv = v->src.fy * yd + v->src.cy;
    if (zscale) *zscale = ray[2];
    return 0;
}

/* Every output border pixel (and a coarse interior grid) maps inside. */
static int inside(const nj_lens_view *v, int x, int y)
{
    double su, sv;
    return !nj_lens_view_source(v, x, y, &su, &sv, NULL) && su >= -INSIDE_TOL && su <= v->w - 1 + INSIDE_TOL &&
           sv >= -INSIDE_TOL && sv <= v->h - 1 + INSIDE_TOL;
}

/* Every output border pixel, and every pixel of every 16th row, maps inside. */
static int map_inside(const nj_lens_view *v)
{
    int W = v->w, H = v->h;
    for (int y = 0; y < H; y++) {
        int full = y == 0 || y == H - 1 || y % 16 == 0;
        for (int x = 0; x < W; x += full ? 1 : W - 1) {
            if (!inside(v, x, y)) return 0;
            if (W == 1) break;
        }
    }
    return 1;
}

static double rd_max_of(const nj_lens_view *v)
{
    double m = 0;
    for (int k = 0; k < 4; k++) {
        double u = k & 1 ? v->w - 1 : 0, vv = k & 2 ? v->h - 1 : 0;
        m = fmax(m, hypot((u - v->src.cx) / v->src.fx, (vv - v->src.cy) / v->src.fy));
    }
    return m;
}

int nj_lens_view_fit(nj_lens_view *v, int n, char *why, size_t whylen)
{
    double b[4] = {-INFINITY, INFINITY, -INFINITY, INFINITY};
    for (int k = 0; k < n; k++) {
        double fold, bk[4];
        char w[320];
        const char *who = n == 1 ? "" : k == 0 ? "left camera: " : "right camera: ";
        if (nj_lens_monotone(&v[k].lens, rd_max_of(&v[k]), &fold)) {
            snprintf(why, whylen, "%sthe %s lens distortion folds the image: its radial function stops increasing "
                     "%.0f pixels from the centre, inside the image's %.0f", who, nj_lens_kind_name(v[k].lens.kind),
                     fold * v[k].src.fx, rd_max_of(&v[k]) * v[k].src.fx);
            return -1;
        }
        if (check_fold(&v[k], w, sizeof w) || inner_rect(&v[k], bk, w, sizeof w)) {
            snprintf(why, whylen, "%s%s", who, w);
            return -1;
        }
        b[0] = fmax(b[0], bk[0]);
        b[1] = fmin(b[1], bk[1]);
        b[2] = fmax(b[2], bk[2]);
        b[3] = fmin(b[3], bk[3]);
    }
    if (!(b[0] < b[1] && b[2] < b[3])) {
        snprintf(why, whylen, "the two cameras' undistorted views do not overlap");
        return -1;
    }
    int W = v[0].w, H = v[0].h;
    double aspect = (double)v[0].src.fy / v[0].src.fx;
    double fx = fmax((W - 1) / (b[1] - b[0]), (H - 1) / (aspect * (b[3] - b[2])));
    for (int g = 0; g <= GROW_STEPS; g++, fx *= GROW) {
        double fy = aspect * fx;
        nj_camera out = {(float)fx, (float)fy, (float)(0.5 * (W - 1) - fx * 0.5 * (b[0] + b[1])),
                         (float)(0.5 * (H - 1) - fy * 0.5 * (b[2] + b[3]))};
        int ok = 1;
        for (int k = 0; k < n; k++) {
            v[k].out = out;
            ok = ok && map_inside(&v[k]);
        }
        if (ok) return 0;
    }
    snprintf(why, whylen, "no pinhole view inside the image was found (the undistorted border is too irregular)");
    return -1;
}

float *nj_lens_view_map(const nj_lens_view *v)
{
    size_t n = (size_t)v->w * v->h;
    float *m = malloc(2 * n * sizeof *m);
    if (!m) return NULL;
    int bad = 0;
#pragma omp parallel for schedule(static) reduction(| : bad)
    for (int y = 0; y < v->h; y++)
        for (int x = 0; x < v->w; x++) {
            double su = 0, sv = 0;
            size_t i = (size_t)y * v->w + x;
            bad |= nj_lens_view_source(v, x, y, &su, &sv, NULL) != 0;
            m[2 * i] = (float)su;
            m[2 * i + 1] = (float)sv;
        }
    if (bad) {
        free(m);
        return NULL;
    }
    return m;
}

static uint64_t fnv(uint64_t h, const void *p, size_t n)
{
    const unsigned char *c = p;
    for (size_t i = 0; i < n; i++) h = (h ^ c[i]) * 0x100000001b3ull;
    return h;
}

uint64_t nj_lens_view_key(const nj_lens_view *v)
{
    uint64_t h = 0xcbf29ce484222325ull;
    int kind = (int)v->lens.kind;
    float cams[8] = {v->src.fx, v->src.fy, v->src.cx, v->src.cy, v->out.fx, v->out.fy, v->out.cx, v->out.cy};
    h = fnv(h, &v->w, sizeof v->w);
    h = fnv(h, &v->h, sizeof v->h);
    h = fnv(h, &kind, sizeof kind);
    h = fnv(h, v->lens.c, sizeof v->lens.c);
    h = fnv(h, v->R, sizeof v->R);
    return fnv(h, cams, sizeof cams);
}

/* data/undistort.c — resampling frames, depth maps and masks through a
 * precomputed lens map (data/undistort.h). */
#include "data/undistort.h"
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

int nj_undistort_init(nj_undistort *u, const nj_lens_view *v, int n, char *why, size_t whylen)
{
    nj_lens_view fit[2];
    if (n < 1 || n > 2) {
        snprintf(why, whylen, "%d cameras in one view (1 or 2)", n);
        return -1;
    }
    memcpy(fit, v, (size_t)n * sizeof *v);
    for (int k = 0; k < n; k++) {
        u[k].map = NULL;
        u[k].borrowed = 0;
    }
    if (nj_lens_view_fit(fit, n, why, whylen)) return -1;
    for (int k = 0; k < n; k++) {
        u[k].view = fit[k];
        u[k].key = nj_lens_view_key(&fit[k]);
        u[k].map = nj_lens_view_map(&fit[k]);
        if (!u[k].map) {
            snprintf(why, whylen, "out of memory for the %dx%d undistortion map", fit[k].w, fit[k].h);
            for (int j = 0; j <= k; j++) nj_undistort_free(&u[j]);
            return -1;
        }
    }
    return 0;
}

void nj_undistort_free(nj_undistort *u)
{
    if (!u->borrowed) free(u->map);
    u->map = NULL;
    u->borrowed = 0;
}

static int same_camera(nj_camera a, nj_camera b)
{
    return a.fx == b.fx && a.fy == b.fy && a.cx == b.cx && a.cy == b.cy;
}

int nj_undistort_same(const nj_undistort *a, const nj_undistort *b)
{
    const nj_lens_view *x = &a->view, *y = &b->view;
    if (a->key != b->key || x->w != y->w || x->h != y->h || x->lens.kind != y->lens.kind ||
        !same_camera(x->src, y->src) || !same_camera(x->out, y->out))
        return 0;
    for (int i = 0; i < 5; i++)
        if (x->lens.c[i] != y->lens.c[i]) return 0;
    for (int i = 0; i < 9; i++)
        if (x->R[i] != y->R[i]) return 0;
    return 1;
}

int nj_undistort_image(const nj_undistort *u, nj_image *im, char *err, size_t errlen)
{
    int w = u->view.w, h = u->view.h;
    if (im->w != w || im->h != h) {
        snprintf(err, errlen, "frame is %dx%d but its camera's lens map is %dx%d", im->w, im->h, w, h);
        return -1;
    }
    nj_image out;
    if (nj_image_alloc(&out, w, h)) {
        snprintf(err, errlen, "out of memory undistorting a %dx%d frame", w, h);
        return -1;
    }
    size_t n = (size_t)w * h;
#pragma omp parallel for schedule(static) if (n > 65536)
    for (int y = 0; y < h; y++)
        for (int x = 0; x < w; x++) {
            size_t i = (size_t)y * w + x;
            float sx = u->map[2 * i], sy = u->map[2 * i + 1];
            for (int c = 0; c < 3; c++) out.data[c * n + i] = nj_plane_bilinear(im->data + c * n, w, h, sx, sy);
        }
    nj_image_free(im);
    *im = out;
    return 0;
}

static size_t nearest(const nj_undistort *u, size_t i)
{
    int w = u->view.w, h = u->view.h;
    long x = lrintf(u->map[2 * i]), y = lrintf(u->map[2 * i + 1]);
    x = x < 0 ? 0 : x >= w ? w - 1 : x;
    y = y < 0 ? 0 : y >= h ? h - 1 : y;
    return (size_t)y * w + (size_t)x;
}

void nj_undistort_depth(const nj_undistort *u, const float *src, float *dst)
{
    int w = u->view.w, h = u->view.h;
    for (int y = 0; y < h; y++)
        for (int x = 0; x < w; x++) {
            size_t i = (size_t)y * w + x;
            double su, sv, zs = 1;
            float d = src[nearest(u, i)];
            /* a point at view depth z' sits at source depth z'·zs */
            if (d > 0 && !nj_lens_view_source(&u->view, x, y, &su, &sv, &zs) && zs > 0) d = (float)(d / zs);
            dst[i] = d;
        }
}

void nj_undistort_mask(const nj_undistort *u, const float *src, float *dst)
{
    size_t n = (size_t)u->view.w * u->view.h;
    for (size_t i = 0; i < n; i++) dst[i] = src[nearest(u, i)];
}

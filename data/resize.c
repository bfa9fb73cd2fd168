/* data/resize.c — separable image resampling: area filter when shrinking,
 * bilinear (half-pixel centres) when enlarging, decided per axis.  (When one
 * axis grows and the other shrinks, cv2.resize with INTER_AREA switches both
 * axes to a linear-like rule instead, so the two differ there — by up to
 * 0.013 on scikit-image's chelsea at 451x300 -> 500x290; tests/test_data_image.c.)
 *
 * The area weights are those of OpenCV's INTER_AREA: output pixel d covers
 * the source interval [d·s, (d+1)·s) with s = src/dst; every source pixel
 * contributes its overlap with that interval divided by the covered length. */
#include "data/image.h"
#include <math.h>
#include <stdlib.h>
#include <string.h>

/* Per output index: source run [start, start+count) with weights w[off..]. */
typedef struct axis_tab {
    int *start, *count, *off;
    float *w;
} axis_tab;

static void tab_free(axis_tab *t)
{
    free(t->start);
    free(t->count);
    free(t->off);
    free(t->w);
}

static int tab_alloc(axis_tab *t, int dn, int per)
{
    t->start = malloc((size_t)dn * sizeof(int));
    t->count = malloc((size_t)dn * sizeof(int));
    t->off = malloc((size_t)dn * sizeof(int));
    t->w = malloc((size_t)dn * (size_t)per * sizeof(float));
    if (t->start && t->count && t->off && t->w) return 0;
    tab_free(t);
    return -1;
}

/* One area cell: source interval [f1, f2) clipped to the image. */
static int area_cell(axis_tab *t, int d, int off, double f1, double s, int sn)
{
    double f2 = f1 + s, cell = fmin(s, sn - f1);
    int s1 = (int)ceil(f1), s2 = (int)floor(f2);
    if (s2 > sn - 1) s2 = sn - 1;
    if (s1 > s2) s1 = s2;
    int k = 0;
    t->start[d] = s1 - f1 > 1e-3 ? s1 - 1 : s1;
    if (s1 - f1 > 1e-3) t->w[off + k++] = (float)((s1 - f1) / cell);
    for (int i = s1; i < s2; i++) t->w[off + k++] = (float)(1.0 / cell);
    if (f2 - s2 > 1e-3) t->w[off + k++] = (float)(fmin(fmin(f2 - s2, 1.0), cell) / cell);
    t->count[d] = k;
    t->off[d] = off;
    return off + k;
}

static int area_tab(axis_tab *t, int sn, int dn)
{
    double s = (double)sn / dn;
    if (tab_alloc(t, dn, (int)ceil(s) + 2)) return -1;
    for (int d = 0, off = 0; d < dn; d++) off = area_cell(t, d, off, d * s, s, sn);
    return 0;
}

static int linear_tab(axis_tab *t, int sn, int dn)
{
    double s = (double)sn / dn;
    if (tab_alloc(t, dn, 2)) return -1;
    for (int d = 0; d < dn; d++) {
        double f = (d + 0.5) * s - 0.5;
        int i = (int)floor(f);
        double a = f - i;
        if (i < 0) { i = 0; a = 0; }
        if (i >= sn - 1) { i = sn - 1; a = 0; }
        t->start[d] = i;
        t->off[d] = 2 * d;
        t->count[d] = a > 0 ? 2 : 1;
        t->w[2 * d] = (float)(1 - a);
        t->w[2 * d + 1] = (float)a;
    }
    return 0;
}

static int make_tab(axis_tab *t, int sn, int dn)
{
    memset(t, 0, sizeof *t);
    return dn <= sn ? area_tab(t, sn, dn) : linear_tab(t, sn, dn);
}

/* Horizontal pass: rows of src (sw wide) → rows of tmp (dw wide). */
static void pass_x(const axis_tab *t, const float *src, int sw, int sh, float *tmp, int dw)
{
    for (int y = 0; y < sh; y++) {
        const float *row = src + (size_t)y * sw;
        float *out = tmp + (size_t)y * dw;
        for (int d = 0; d < dw; d++) {
            const float *w = t->w + t->off[d], *p = row + t->start[d];
            float acc = 0;
            for (int k = 0; k < t->count[d]; k++) acc += w[k] * p[k];
            out[d] = acc;
        }
    }
}

/* Vertical pass: tmp (dw×sh) → dst (dw×dh). */
static void pass_y(const axis_tab *t, const float *tmp, int dw, float *dst, int dh)
{
    for (int d = 0; d < dh; d++) {
        float *out = dst + (size_t)d * dw;
        const float *w = t->w + t->off[d];
        for (int x = 0; x < dw; x++) out[x] = 0;
        for (int k = 0; k < t->count[d]; k++) {
            const float *row = tmp + (size_t)(t->start[d] + k) * dw;
            for (int x = 0; x < dw; x++) out[x] += w[k] * row[x];
        }
    }
}

int nj_resize_plane(const float *src, int sw, int sh, float *dst, int dw, int dh)
{
    if (sw == dw && sh == dh) {
        memcpy(dst, src, (size_t)sw * sh * sizeof(float));
        return 0;
    }
    axis_tab tx, ty;
    float *tmp = malloc((size_t)dw * sh * sizeof(float));
    int rc = tmp && !make_tab(&tx, sw, dw) ? 0 : -1;
    if (!rc && make_tab(&ty, sh, dh)) { tab_free(&tx); rc = -1; }
    if (rc) { free(tmp); return -1; }
    pass_x(&tx, src, sw, sh, tmp, dw);
    pass_y(&ty, tmp, dw, dst, dh);
    tab_free(&tx);
    tab_free(&ty);
    free(tmp);
    return 0;
}

int nj_image_resize(const nj_image *src, int dw, int dh, nj_image *dst)
{
    if (dw <= 0 || dh <= 0 || nj_image_alloc(dst, dw, dh)) return -1;
    size_t sn = (size_t)src->w * src->h, dn = (size_t)dw * dh;
    for (int c = 0; c < 3; c++)
        if (nj_resize_plane(src->data + c * sn, src->w, src->h, dst->data + c * dn, dw, dh)) {
            nj_image_free(dst);
            return -1;
        }
    return 0;
}

int nj_image_resize_camera(const nj_image *src, nj_camera cam, int dw, int dh,
                           nj_image *dst, nj_camera *cam_out)
{
    if (nj_image_resize(src, dw, dh, dst)) return -1;
    *cam_out = nj_camera_resize(cam, src->w, src->h, dw, dh);
    return 0;
}

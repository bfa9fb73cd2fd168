/* train/map/topdown.c — the map seen from above: every mesh vertex projected
 * onto the ground plane, each pixel coloured by the highest surface above it
 * in the "bracken" map (low = dark moss, high = pale straw; heights from the
 * 2nd to the 98th percentile of the vertices), the camera path as a line
 * with a start disc and an end square, and a scale bar with its length
 * written in a 3×5 pixel font of our own.  Pixels with no surface stay a
 * dark slate.  Doubled walls, bent ground and smeared obstacles show here
 * as doubled lines, height bands and blurred outlines. */
#include "train/map/map.h"
#include "train/eval/eval.h"
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define MAX_SIDE 1000       /* pixels along the longer side */
#define MARGIN 24
static const float EMPTY[3] = {0.11f, 0.13f, 0.16f}, PATH[3] = {0.25f, 0.80f, 0.95f},
                   START[3] = {0.35f, 0.95f, 0.45f}, END[3] = {1.0f, 0.42f, 0.20f}, TEXT[3] = {0.96f, 0.96f, 0.92f};

typedef struct canvas {
    nj_image *im;
    double r0, a1, px;      /* right coordinate at column 0, ahead coordinate at row 0, metres per pixel */
} canvas;

static void put(canvas *c, int x, int y, const float rgb[3])
{
    if (x < 0 || y < 0 || x >= c->im->w || y >= c->im->h) return;
    size_t plane = (size_t)c->im->w * c->im->h, i = (size_t)y * c->im->w + x;
    for (int k = 0; k < 3; k++) c->im->data[k * plane + i] = rgb[k];
}

static void box(canvas *c, int x, int y, int r, const float rgb[3], int round)
{
    for (int dy = -r; dy <= r; dy++)
        for (int dx = -r; dx <= r; dx++)
            if (!round || dx * dx + dy * dy <= r * r) put(c, x + dx, y + dy, rgb);
}

static void to_pixel(const canvas *c, double r, double a, int *x, int *y)
{
    *x = (int)lround((r - c->r0) / c->px);
    *y = (int)lround((c->a1 - a) / c->px);
}

static void line(canvas *c, int x0, int y0, int x1, int y1, const float rgb[3])
{
    int n = abs(x1 - x0) > abs(y1 - y0) ? abs(x1 - x0) : abs(y1 - y0);
    for (int i = 0; i <= n; i++) {
        double t = n ? (double)i / n : 0;
        box(c, (int)lround(x0 + t * (x1 - x0)), (int)lround(y0 + t * (y1 - y0)), 1, rgb, 0);
    }
}

/* 3×5 glyphs, rows top to bottom, 3 bits each (MSB = left). */
static int glyph(char ch)
{
    static const char *CH = "0123456789.m";
    static const int G[] = {075557, 026227, 071747, 071717, 055711, 074717, 074757, 071111, 075757, 075717, 000002, 000775};
    const char *p = strchr(CH, ch);
    return p && ch ? G[p - CH] : 0;
}

static void text(canvas *c, int x, int y, const char *s, int zoom)
{
    for (; *s; s++, x += 4 * zoom) {
        int g = glyph(*s);
        for (int row = 0; row < 5; row++)
            for (int col = 0; col < 3; col++)
                if (g >> (3 * (4 - row) + 2 - col) & 1)
                    for (int dy = 0; dy < zoom; dy++)
                        for (int dx = 0; dx < zoom; dx++) put(c, x + col * zoom + dx, y + row * zoom + dy, TEXT);
    }
}

/* A round length (1, 2 or 5 × 10^k) near a fifth of the picture's width. */
static void scale_bar(canvas *c, const char *unit)
{
    double want = 0.2 * c->im->w * c->px, step = pow(10, floor(log10(want)));
    double len = want >= 5 * step ? 5 * step : want >= 2 * step ? 2 * step : step;
    int n = (int)lround(len / c->px), x = MARGIN / 2, y = c->im->h - MARGIN / 2;
    for (int i = 0; i < n; i++) box(c, x + i, y, 1, TEXT, 0);
    box(c, x, y - 3, 1, TEXT, 0);
    box(c, x + n - 1, y - 3, 1, TEXT, 0);
    char label[32];
    snprintf(label, sizeof label, "%g%s", len, strcmp(unit, "m") ? "" : "m");
    text(c, x + n + 6, y - 8, label, 2);
}

static double dot(const double a[3], const float p[3])
{
    return a[0] * p[0] + a[1] * p[1] + a[2] * p[2];
}

static double dotd(const double a[3], const double p[3])
{
    return a[0] * p[0] + a[1] * p[1] + a[2] * p[2];
}

static int cmp_float(const void *a, const void *b)
{
    float x = *(const float *)a, y = *(const float *)b;
    return (x > y) - (x < y);
}

/* Heights of the 2nd and 98th percentile (the bracken map's ends). */
static int height_range(const nj_mesh *m, const double down[3], float *lo, float *hi)
{
    float *h = malloc(sizeof(float) * (size_t)(m->nv ? m->nv : 1));
    if (!h) return -1;
    for (long i = 0; i < m->nv; i++) h[i] = (float)-dot(down, m->xyz + 3 * i);
    qsort(h, (size_t)m->nv, sizeof *h, cmp_float);
    *lo = m->nv ? h[(long)(0.02 * (m->nv - 1))] : 0;
    *hi = m->nv ? h[(long)(0.98 * (m->nv - 1))] : 1;
    free(h);
    if (!(*hi > *lo)) *hi = *lo + 1;
    return 0;
}

/* Extent of the vertices and the path in (right, ahead) coordinates. */
static void extent(const nj_mesh *m, const double *path, int n, const double right[3], const double ahead[3],
                   double lo[2], double hi[2])
{
    lo[0] = lo[1] = INFINITY;
    hi[0] = hi[1] = -INFINITY;
    for (long i = 0; i < m->nv + n; i++) {
        double r = i < m->nv ? dot(right, m->xyz + 3 * i) : dotd(right, path + 3 * (i - m->nv));
        double a = i < m->nv ? dot(ahead, m->xyz + 3 * i) : dotd(ahead, path + 3 * (i - m->nv));
        lo[0] = fmin(lo[0], r);
        hi[0] = fmax(hi[0], r);
        lo[1] = fmin(lo[1], a);
        hi[1] = fmax(hi[1], a);
    }
    if (!(hi[0] > lo[0])) hi[0] = lo[0] + 1;
    if (!(hi[1] > lo[1])) hi[1] = lo[1] + 1;
}

static void surface(canvas *c, const nj_mesh *m, const double down[3], const double right[3],
                    const double ahead[3], float lo, float hi, float *top)
{
    float lut[NJ_COLORMAP_SIZE][3];
    nj_colormap_table(lut);
    int w = c->im->w;
    for (long i = 0; i < m->nv; i++) {
        int x, y;
        to_pixel(c, dot(right, m->xyz + 3 * i), dot(ahead, m->xyz + 3 * i), &x, &y);
        float h = (float)-dot(down, m->xyz + 3 * i);
        if (x < 0 || y < 0 || x >= w || y >= c->im->h || h <= top[(size_t)y * w + x]) continue;
        top[(size_t)y * w + x] = h;
        float t = (h - lo) / (hi - lo);
        int k = (int)lroundf((t < 0 ? 0 : t > 1 ? 1 : t) * (NJ_COLORMAP_SIZE - 1));
        put(c, x, y, lut[k]);
    }
}

int nj_map_picture(const nj_mesh *m, const double *path, int n, const double down[3], const double right[3],
                   const double ahead[3], double cell, const char *unit, nj_image *out, char *err, size_t errlen)
{
    double lo[2], hi[2];
    float hlo, hhi;
    extent(m, path, n, right, ahead, lo, hi);
    canvas c = {out, lo[0], hi[1], fmax(cell, fmax(hi[0] - lo[0], hi[1] - lo[1]) / (MAX_SIDE - 2 * MARGIN))};
    c.r0 -= MARGIN * c.px;
    c.a1 += MARGIN * c.px;
    int w = (int)ceil((hi[0] - lo[0]) / c.px) + 2 * MARGIN + 1, h = (int)ceil((hi[1] - lo[1]) / c.px) + 2 * MARGIN + 1;
    float *top = malloc(sizeof(float) * (size_t)w * h);
    if (!top || height_range(m, down, &hlo, &hhi) || nj_image_alloc(out, w, h)) {
        free(top);
        snprintf(err, errlen, "picture: out of memory");
        return -1;
    }
    for (size_t i = 0; i < (size_t)w * h; i++) {
        top[i] = -INFINITY;
        for (int k = 0; k < 3; k++) out->data[k * (size_t)w * h + i] = EMPTY[k];
    }
    surface(&c, m, down, right, ahead, hlo, hhi, top);
    free(top);
    int x0 = 0, y0 = 0, x1, y1;
    for (int i = 0; i < n; i++) {
        to_pixel(&c, dotd(right, path + 3 * i), dotd(ahead, path + 3 * i), &x1, &y1);
        if (i) line(&c, x0, y0, x1, y1, PATH);
        x0 = x1;
        y0 = y1;
    }
    if (n) {
        to_pixel(&c, dotd(right, path), dotd(ahead, path), &x1, &y1);
        box(&c, x1, y1, 6, START, 1);
        box(&c, x0, y0, 5, END, 0);
    }
    scale_bar(&c, unit);
    return 0;
}

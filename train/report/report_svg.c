/* train/report/report_svg.c — inline SVG line charts for the report: a fixed
 * 480×270 view box that scales with the page width, "nice" axis ranges
 * (ticks at 1, 2 or 5 × 10^k), labelled axes with units, one polyline per
 * series and a legend.  The value→SVG mapping is written on the <svg>
 * element (data-* attributes) so the chart can be read back exactly. */
#include "train/report/report_parts.h"
#include <math.h>
#include <string.h>

#define VIEW_W 480
#define VIEW_H 270
#define PLOT_L 66.0
#define PLOT_T 30.0
#define PLOT_W 398.0
#define PLOT_H 194.0

static const char *const COLOURS[] = {"#3b4cc0", "#d1495b", "#2a9d8f", "#e9a23b", "#6c4f9c"};

typedef struct axis { double lo, hi, step; } axis;

static double nice_step(double raw)
{
    double p = pow(10.0, floor(log10(raw)));
    double m = raw / p;
    return (m <= 1 ? 1 : m <= 2 ? 2 : m <= 5 ? 5 : 10) * p;
}

/* Axis covering [lo, hi] with about five rounded ticks. */
static axis make_axis(double lo, double hi)
{
    axis a;
    if (!(lo <= hi)) { lo = 0; hi = 1; }
    if (hi - lo <= 1e-12 * fmax(fabs(lo), fabs(hi)) || hi == lo) {
        double d = lo == 0 ? 1 : fabs(lo) * 0.1;
        lo -= d;
        hi += d;
    }
    a.step = nice_step((hi - lo) / 5);
    a.lo = floor(lo / a.step) * a.step;
    a.hi = ceil(hi / a.step) * a.step;
    if (a.hi <= a.lo) a.hi = a.lo + a.step;
    return a;
}

static void data_range(const nj_series *s, int ns, int use_x, double *lo, double *hi)
{
    *lo = INFINITY;
    *hi = -INFINITY;
    for (int k = 0; k < ns; k++)
        for (int i = 0; i < s[k].n; i++) {
            double x = s[k].x[i], y = s[k].y[i];
            if (!isfinite(x) || !isfinite(y)) continue;
            double v = use_x ? x : y;
            if (v < *lo) *lo = v;
            if (v > *hi) *hi = v;
        }
}

static double px(const axis *a, double v) { return PLOT_L + (v - a->lo) / (a->hi - a->lo) * PLOT_W; }
static double py(const axis *a, double v) { return PLOT_T + PLOT_H - (v - a->lo) / (a->hi - a->lo) * PLOT_H; }

static void ticks(FILE *f, const axis *ax, const axis *ay)
{
    int nx = (int)lround((ax->hi - ax->lo) / ax->step), ny = (int)lround((ay->hi - ay->lo) / ay->step);
    for (int i = 0; i <= nx; i++) {
        double v = ax->lo + i * ax->step, x = px(ax, v);
        fprintf(f, "<line class=\"grid\" x1=\"%.2f\" y1=\"%.2f\" x2=\"%.2f\" y2=\"%.2f\"/>", x, PLOT_T, x, PLOT_T + PLOT_H);
        fprintf(f, "<text x=\"%.2f\" y=\"%.2f\" text-anchor=\"middle\">%.4g</text>\n", x, PLOT_T + PLOT_H + 15,
                fabs(v) < ax->step * 1e-6 ? 0.0 : v);
    }
    for (int i = 0; i <= ny; i++) {
        double v = ay->lo + i * ay->step, y = py(ay, v);
        fprintf(f, "<line class=\"grid\" x1=\"%.2f\" y1=\"%.2f\" x2=\"%.2f\" y2=\"%.2f\"/>", PLOT_L, y, PLOT_L + PLOT_W, y);
        fprintf(f, "<text x=\"%.2f\" y=\"%.2f\" text-anchor=\"end\">%.4g</text>\n", PLOT_L - 5, y + 4,
                fabs(v) < ay->step * 1e-6 ? 0.0 : v);
    }
    fprintf(f, "<rect class=\"frame\" x=\"%.2f\" y=\"%.2f\" width=\"%.2f\" height=\"%.2f\"/>\n",
            PLOT_L, PLOT_T, PLOT_W, PLOT_H);
}

static void polyline(FILE *f, const nj_series *s, const axis *ax, const axis *ay, const char *colour)
{
    fputs("<polyline class=\"series\" data-series=\"", f);
    nj_html_text(f, s->name);
    fprintf(f, "\" stroke=\"%s\" points=\"", colour);
    int first = 1;
    for (int i = 0; i < s->n; i++) {
        if (!isfinite(s->x[i]) || !isfinite(s->y[i])) continue;
        fprintf(f, "%s%.2f,%.2f", first ? "" : " ", px(ax, s->x[i]), py(ay, s->y[i]));
        first = 0;
    }
    fputs("\"/>\n", f);
}

static void legend(FILE *f, const nj_series *s, int ns)
{
    double x = PLOT_L;
    for (int k = 0; k < ns; k++) {
        fprintf(f, "<rect x=\"%.1f\" y=\"10\" width=\"14\" height=\"4\" fill=\"%s\"/>", x, COLOURS[k % 5]);
        fprintf(f, "<text x=\"%.1f\" y=\"16\">", x + 18);
        nj_html_text(f, s[k].name);
        fputs("</text>\n", f);
        x += 30 + 7.0 * (double)strlen(s[k].name);
    }
}

void nj_svg_chart(FILE *f, const char *title, const char *xlabel, const char *ylabel,
                  const nj_series *s, int ns)
{
    double xlo, xhi, ylo, yhi;
    data_range(s, ns, 1, &xlo, &xhi);
    data_range(s, ns, 0, &ylo, &yhi);
    int empty = !(xlo <= xhi);
    axis ax = make_axis(xlo, xhi), ay = make_axis(ylo, yhi);
    fputs("<figure class=\"chart\"><figcaption>", f);
    nj_html_text(f, title);
    fprintf(f, "</figcaption>\n<svg viewBox=\"0 0 %d %d\" role=\"img\" aria-label=\"", VIEW_W, VIEW_H);
    nj_html_text(f, title);
    fprintf(f, "\" data-x0=\"%.17g\" data-x1=\"%.17g\" data-y0=\"%.17g\" data-y1=\"%.17g\" "
               "data-left=\"%g\" data-top=\"%g\" data-width=\"%g\" data-height=\"%g\">\n",
            ax.lo, ax.hi, ay.lo, ay.hi, PLOT_L, PLOT_T, PLOT_W, PLOT_H);
    ticks(f, &ax, &ay);
    fprintf(f, "<text class=\"axis\" x=\"%.1f\" y=\"%d\" text-anchor=\"middle\">", PLOT_L + PLOT_W / 2, VIEW_H - 6);
    nj_html_text(f, xlabel);
    fprintf(f, "</text>\n<text class=\"axis\" transform=\"translate(14 %.1f) rotate(-90)\" text-anchor=\"middle\">",
            PLOT_T + PLOT_H / 2);
    nj_html_text(f, ylabel);
    fputs("</text>\n", f);
    if (empty)
        fprintf(f, "<text x=\"%.1f\" y=\"%.1f\" text-anchor=\"middle\">no data yet</text>\n",
                PLOT_L + PLOT_W / 2, PLOT_T + PLOT_H / 2);
    for (int k = 0; k < ns; k++) polyline(f, &s[k], &ax, &ay, COLOURS[k % 5]);
    legend(f, s, ns);
    fputs("</svg></figure>\n", f);
}

/* ---- depth colour bar ------------------------------------------------------------ */

#define BAR_W 300
#define BAR_H 76
#define BAR_L 12.0
#define BAR_T 4.0
#define BAR_PW 276.0
#define BAR_PH 18.0
#define MAX_TICKS 12

#define MIN_GAP 24.0             /* SVG units between neighbouring tick labels */

static double bar_x(nj_depth_scale s, double depth)
{
    return BAR_L + nj_depth_scale_pos(s, (float)depth) * BAR_PW;
}

/* Ticks of mantissa set k (1; 1-2-5; 1..9 × 10^k) inside [near, far]; the
 * smallest gap between neighbours goes to *gap. */
static int set_ticks(nj_depth_scale s, int k, double *t, double *gap)
{
    static const int sets[3][9] = {{1}, {1, 2, 5}, {1, 2, 3, 4, 5, 6, 7, 8, 9}};
    static const int sizes[3] = {1, 3, 9};
    int n = 0;
    *gap = INFINITY;
    for (int e = (int)floor(log10(s.near)) - 1; e <= (int)ceil(log10(s.far)); e++)
        for (int m = 0; m < sizes[k] && n < MAX_TICKS; m++) {
            double v = sets[k][m] * pow(10.0, e);
            if (v < s.near * (1 - 1e-6) || v > s.far * (1 + 1e-6)) continue;
            if (n) *gap = fmin(*gap, bar_x(s, v) - bar_x(s, t[n - 1]));
            t[n++] = v;
        }
    return n;
}

/* Round depths inside [near, far] whose labels do not crowd: the coarsest
 * set on the log axis with three or more ticks, else the fullest with two,
 * else linear nice steps (a range narrower than a factor of about 2). */
static int bar_ticks(nj_depth_scale s, double *t)
{
    if (!(s.far > s.near) || !(s.near > 0)) { t[0] = s.near; return 1; }
    int best = -1, nbest = 1;
    for (int k = 0; k < 3; k++) {
        double gap, tmp[MAX_TICKS];
        int n = set_ticks(s, k, tmp, &gap);
        if (n < 2 || gap < MIN_GAP || n <= nbest) continue;
        best = k;
        nbest = n;
        if (n >= 3) break;
    }
    double gap;
    if (best >= 0) return set_ticks(s, best, t, &gap);
    double step = nice_step((s.far - s.near) / 4);
    int n = 0;
    for (double v = ceil(s.near / step) * step; v <= s.far * (1 + 1e-6) && n < MAX_TICKS; v += step) t[n++] = v;
    return n;
}

void nj_svg_depth_bar(FILE *f, nj_depth_scale scale, const char *units, const char *caption)
{
    float lut[NJ_COLORMAP_SIZE][3];
    nj_colormap_table(lut);
    fputs("<figure class=\"bar\"><svg viewBox=\"0 0 " , f);
    fprintf(f, "%d %d\" role=\"img\" aria-label=\"", BAR_W, BAR_H);
    nj_html_text(f, caption);
    fprintf(f, "\" data-near=\"%.9g\" data-far=\"%.9g\" data-left=\"%g\" data-width=\"%g\">\n", scale.near,
            scale.far, BAR_L, BAR_PW);
    double cw = BAR_PW / NJ_COLORMAP_SIZE;
    /* crisp edges and a small overlap: anti-aliased cell edges would show as stripes */
    fputs("<g shape-rendering=\"crispEdges\">", f);
    for (int i = 0; i < NJ_COLORMAP_SIZE; i++)
        fprintf(f, "<rect x=\"%.3f\" y=\"%g\" width=\"%.3f\" height=\"%g\" fill=\"#%02x%02x%02x\"/>", BAR_L + i * cw,
                BAR_T, cw + 0.3, BAR_PH, (unsigned)lrintf(lut[i][0] * 255), (unsigned)lrintf(lut[i][1] * 255),
                (unsigned)lrintf(lut[i][2] * 255));
    fprintf(f, "</g>\n<rect class=\"frame\" x=\"%g\" y=\"%g\" width=\"%g\" height=\"%g\"/>\n", BAR_L, BAR_T, BAR_PW,
            BAR_PH);
    double t[MAX_TICKS];
    int n = bar_ticks(scale, t);
    for (int i = 0; i < n; i++) {
        double x = bar_x(scale, t[i]);
        fprintf(f, "<line class=\"frame\" x1=\"%.2f\" y1=\"%g\" x2=\"%.2f\" y2=\"%g\"/>", x, BAR_T + BAR_PH, x,
                BAR_T + BAR_PH + 5);
        fprintf(f, "<text x=\"%.2f\" y=\"%g\" text-anchor=\"middle\" data-depth=\"%.9g\">%.3g</text>\n", x,
                BAR_T + BAR_PH + 17, t[i], t[i]);
    }
    fprintf(f, "<text class=\"axis\" x=\"%g\" y=\"%d\" text-anchor=\"start\">near = dark</text>"
               "<text class=\"axis\" x=\"%g\" y=\"%d\" text-anchor=\"end\">far = light</text>\n",
            BAR_L, BAR_H - 20, BAR_L + BAR_PW, BAR_H - 20);
    fprintf(f, "<text class=\"axis\" x=\"%g\" y=\"%d\" text-anchor=\"middle\">", BAR_L + BAR_PW / 2, BAR_H - 4);
    nj_html_text(f, units);
    fputs("</text>\n", f);
    fputs("</svg><figcaption>", f);
    nj_html_text(f, caption);
    fputs("</figcaption></figure>\n", f);
}

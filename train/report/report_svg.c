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

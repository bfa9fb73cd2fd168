/* tests/test_report.c — `nightjar report` on a tiny run made here: a
 * synthetic dataset (nightjar synth, 3 sequences of 6 frames at 64×32), a
 * hand-written log.jsonl with known values, two checkpoints of a tiny model
 * and a metrics.json.  Checks:
 *  - the page is self-contained: no "http://" / "https://", no <script>,
 *    every src is an embedded PNG data URI; HTML5 doctype and viewport;
 *  - header values (run name, how it ended, resumes, NaN recoveries) and
 *    metric-table values match what was written;
 *  - every chart polyline, read back through the mapping stated on its
 *    <svg>, reproduces the log values within the chart's rounding (points
 *    printed with 2 decimals: ±0.005 SVG units), and every numeric tick
 *    label sits where that mapping puts its value (so the drawn axes agree);
 *  - the gallery has input + depth + auto-mask + error pictures for 3
 *    frames at both checkpoints;
 *  - the gallery's depth colours: one colour bar per frame whose cells are
 *    the 256 table entries dark → light, whose tick labels sit where the log
 *    scale stated on its <svg> (data-near/-far, computed here independently)
 *    puts their depth, with "near = dark" / "far = light" and the unit note
 *    of a monocular run ("up to scale"); every pixel of every depth picture
 *    (PNG decoded here) is a table entry or the no-depth colour, and the
 *    newest checkpoint's picture, to which the frame's scale is fitted, reaches
 *    both ends of the table (2nd/98th percentiles clamp 2% of pixels each);
 *  - in headless Chromium (Debian package, an independent HTML/SVG/PNG
 *    implementation; networking disabled): every <img> decodes
 *    (naturalWidth > 0), the page does not overflow a 390-px phone width,
 *    the screenshot's chart and gallery regions are not blank
 *    (non-uniform pixels, decoded with stb_image), and the console log has
 *    no "Uncaught", "ERROR:CONSOLE", "Failed to load resource" or "net::ERR"
 *    lines.  The console capture itself is checked on a probe copy of the
 *    page that logs a known console.error message, so the grep can fail. */
#include "tests/check.h"
#include "tests/e2e_support.h"
#include "train/loop/checkpoint.h"
#include "train/eval/colormap.h"
#include "train/cli/commands.h"
#include "train/report/report.h"
#include <math.h>
#include <stb_image.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

#define NSTEP 12
#define NVAL 3

typedef struct logvals {
    double step[NSTEP], loss[NSTEP], pho[NSTEP], smo[NSTEP], lr[NSTEP], el[NSTEP];
    double kept[NSTEP], inv[NSTEP], gap[NSTEP];
    double vstep[NVAL], vpho[NVAL], vabs[NVAL], vdel[NVAL];
} logvals;

static int write_log(const char *dir, logvals *v)
{
    char path[700];
    snprintf(path, sizeof path, "%s/log.jsonl", dir);
    FILE *f = fopen(path, "w");
    if (!f) return -1;
    for (int i = 0; i < NSTEP; i++) {
        v->step[i] = i == 0 ? 1 : 2 * i;
        v->pho[i] = 0.09 * exp(-i / 4.0) + 0.01 * sin(i);
        v->smo[i] = 3e-5 + 1e-6 * i;
        v->loss[i] = v->pho[i] + v->smo[i];
        v->lr[i] = i < 3 ? 1e-4 * i / 3 : 1e-4 * (0.5 + 0.5 * cos(M_PI * (i - 3) / 9.0));
        v->el[i] = 37.5 * (i + 1) + 0.25 * i * i;
        v->kept[i] = 0.9 - 0.02 * i;
        v->inv[i] = 0.3 + 0.2 * sin(i / 2.0);
        v->gap[i] = 0.5 + 0.03 * i;
        fprintf(f, "{\"type\":\"step\",\"step\":%.0f,\"epoch\":%.3f,\"loss\":%.17g,\"photometric\":%.17g,"
                   "\"smoothness\":%.17g,\"lr\":%.17g,\"images_per_s\":%.3f,\"mask_kept\":%.17g,\"saturated\":0.1,"
                   "\"translation\":0.01,\"elapsed_s\":%.17g,\"health\":\"ok\",\"inverted\":%.17g,\"far_half\":0,"
                   "\"depth_p50\":5,\"gap\":%.17g}\n",
                v->step[i], i * 0.1, v->loss[i], v->pho[i], v->smo[i], v->lr[i], 2.0 + i * 0.1, v->kept[i], v->el[i],
                v->inv[i], v->gap[i]);
        if (i == 5) fprintf(f, "{\"type\":\"health\",\"step\":10,\"message\":\"test warning\"}\n");
        if (i % 4 == 3) {
            int k = i / 4;
            v->vstep[k] = v->step[i];
            v->vpho[k] = 0.05 - 0.004 * k * k;
            v->vabs[k] = 0.6 - 0.05 * k;
            v->vdel[k] = 0.2 + 0.03 * k * k;
            fprintf(f, "{\"type\":\"val\",\"step\":%.0f,\"photometric\":%.17g,\"absrel\":%.17g,"
                       "\"delta_1_25\":%.17g,\"elapsed_s\":%.1f}\n",
                    v->vstep[k], v->vpho[k], v->vabs[k], v->vdel[k], v->el[i] + 1);
        }
    }
    fprintf(f, "{\"type\":\"end\",\"step\":22,\"ended\":\"budget reached\",\"elapsed_s\":500.0,"
               "\"resumes\":1,\"nan_recoveries\":2}\n");
    return fclose(f);
}

static int make_run(const char *root, char *run, size_t runlen)
{
    char data[512], ds[600], err[512];
    snprintf(data, sizeof data, "%s/data", root);
    char *argv[] = {"synth", "--out", data, "--sequences", "3", "--frames", "6", "--size", "64x32", NULL};
    if (nj_synth_main(9, argv)) return -1;
    snprintf(ds, sizeof ds, "%s/dataset.json", data);
    snprintf(run, runlen, "%s/run", root);
    if (mkdir(run, 0755)) return -1;
    nj_train_config cfg;
    nj_train_config_default(&cfg);
    snprintf(cfg.name, sizeof cfg.name, "tiny-report-run");
    snprintf(cfg.dataset, sizeof cfg.dataset, "%s", ds);
    cfg.width = 64, cfg.height = 32, cfg.batch = 2;
    cfg.model.stages = 2, cfg.model.scales = 2, cfg.model.width = 0.25f;
    cfg.model.pose_stages = 2, cfg.model.pose_width = 0.25f;
    cfg.minutes = 0, cfg.max_steps = 22;
    if (nj_train_config_check(&cfg, err, sizeof err)) { fprintf(stderr, "%s\n", err); return -1; }
    nj_model_config mc = cfg.model;
    mc.pose = cfg.video;
    nj_model m;
    if (nj_model_init(&m, &mc, err, sizeof err)) { fprintf(stderr, "%s\n", err); return -1; }
    nj_train_state st;
    memset(&st, 0, sizeof st);
    st.best_val = INFINITY;
    st.lr_scale = 1;
    char path[700];
    int rc = 0;
    st.step = 10;
    snprintf(path, sizeof path, "%s/step-00000010.ckpt", run);
    rc |= nj_checkpoint_save(path, &m, &cfg, &st, err, sizeof err);
    st.step = 22;
    snprintf(path, sizeof path, "%s/final.ckpt", run);
    rc |= nj_checkpoint_save(path, &m, &cfg, &st, err, sizeof err);
    if (rc) fprintf(stderr, "%s\n", err);
    nj_model_free(&m);
    return rc;
}

static void write_metrics(const char *run)
{
    char path[700];
    snprintf(path, sizeof path, "%s/metrics.json", run);
    FILE *f = fopen(path, "w");
    if (!f) return;
    fprintf(f, "{\"absrel\":0.123456,\"sqrel\":0.5,\"rmse\":4.25,\"rmse_log\":0.3,\"delta_1_25\":0.8,"
               "\"delta_1_25_2\":0.9,\"delta_1_25_3\":0.95,\"images\":3,\"split\":\"test\","
               "\"baseline_constant\":{\"absrel\":0.654321,\"rmse\":7.5},"
               "\"baseline_untrained\":{\"absrel\":0.432198,\"rmse\":6.5}}\n");
    fclose(f);
}

/* The value of attribute `name` inside the tag starting at `tag`. */
static double attr(const char *tag, const char *name)
{
    char key[64];
    snprintf(key, sizeof key, " %s=\"", name);
    const char *end = strchr(tag, '>'), *p = strstr(tag, key);
    return p && p < end ? strtod(p + strlen(key), NULL) : NAN;
}

typedef struct mapping { double x0, x1, y0, y1, l, t, w, h; } mapping;

static mapping read_mapping(const char *svg)
{
    mapping m = {attr(svg, "data-x0"), attr(svg, "data-x1"), attr(svg, "data-y0"), attr(svg, "data-y1"),
                 attr(svg, "data-left"), attr(svg, "data-top"), attr(svg, "data-width"), attr(svg, "data-height")};
    return m;
}

/* Compares the polyline points of `svg` with (xs, ys); returns the worst
 * error in SVG units (value difference mapped back to units), or +inf on a
 * count mismatch or a missing polyline. */
static double compare_points(const char *svg, const char *end, const double *xs, const double *ys, int n,
                             int *count)
{
    mapping m = read_mapping(svg);
    const char *pl = strstr(svg, "<polyline");
    const char *pts = pl ? strstr(pl, "points=\"") : NULL;
    *count = 0;
    if (!pl || pl > end || !pts) return INFINITY;
    const char *p = pts + 8;
    double worst = 0;
    while (*p && *p != '"') {
        char *q;
        double X = strtod(p, &q);
        if (*q != ',') return INFINITY;
        double Y = strtod(q + 1, &q);
        p = q;
        while (*p == ' ') p++;
        if (*count >= n) return INFINITY;
        double vx = m.x0 + (X - m.l) / m.w * (m.x1 - m.x0);
        double vy = m.y0 + (m.t + m.h - Y) / m.h * (m.y1 - m.y0);
        double ex = fabs(vx - xs[*count]) / (m.x1 - m.x0) * m.w;
        double ey = fabs(vy - ys[*count]) / (m.y1 - m.y0) * m.h;
        worst = fmax(worst, fmax(ex, ey));
        (*count)++;
    }
    return *count == n ? worst : INFINITY;
}

/* Every numeric tick label inside [svg, end): x-axis labels (centred, below
 * the plot) and y-axis labels (right-aligned, left of it) must sit where the
 * mapping puts their value.  Returns the worst offset in SVG units, the
 * number of labels checked into *nlab. */
static double check_ticks(const char *svg, const char *end, int *nlab)
{
    mapping m = read_mapping(svg);
    double worst = 0;
    *nlab = 0;
    for (const char *p = strstr(svg, "<text x=\""); p && p < end; p = strstr(p + 1, "<text x=\"")) {
        double X = attr(p, "x"), Y = attr(p, "y");
        const char *gt = strchr(p, '>');
        char *q;
        double v = strtod(gt + 1, &q);
        if (q == gt + 1 || *q != '<') continue;
        if (strstr(p, "text-anchor=\"middle\"") && strstr(p, "text-anchor=\"middle\"") < gt &&
            fabs(Y - (m.t + m.h + 15)) < 0.01) {
            worst = fmax(worst, fabs(m.l + (v - m.x0) / (m.x1 - m.x0) * m.w - X));
            (*nlab)++;
        } else if (strstr(p, "text-anchor=\"end\"") && strstr(p, "text-anchor=\"end\"") < gt) {
            worst = fmax(worst, fabs(m.t + m.h - (v - m.y0) / (m.y1 - m.y0) * m.h - (Y - 4)));
            (*nlab)++;
        }
    }
    return worst;
}

/* The <svg> following the figcaption `title`; *end receives its </svg>. */
static const char *find_chart(const char *html, const char *title, const char **end)
{
    char key[160];
    snprintf(key, sizeof key, "<figcaption>%s</figcaption>", title);
    const char *p = strstr(html, key);
    const char *svg = p ? strstr(p, "<svg ") : NULL;
    *end = svg ? strstr(svg, "</svg>") : NULL;
    return *end ? svg : NULL;
}

static void check_charts(const char *html, const logvals *v)
{
    double hours[NSTEP];
    for (int i = 0; i < NSTEP; i++) hours[i] = v->el[i] / 3600.0;
    struct { const char *title; const double *x, *y; int n; } C[] = {
        {"Total loss vs step", v->step, v->loss, NSTEP},
        {"Total loss vs wall time", hours, v->loss, NSTEP},
        {"Photometric loss vs step", v->step, v->pho, NSTEP},
        {"Photometric loss vs wall time", hours, v->pho, NSTEP},
        {"Smoothness loss (weighted) vs step", v->step, v->smo, NSTEP},
        {"Smoothness loss (weighted) vs wall time", hours, v->smo, NSTEP},
        {"Learning rate vs step", v->step, v->lr, NSTEP},
        {"Validation photometric loss vs step", v->vstep, v->vpho, NVAL},
        {"Validation AbsRel vs step", v->vstep, v->vabs, NVAL},
        {"Validation share within 1.25x vs step", v->vstep, v->vdel, NVAL},
        {"Auto-mask kept share vs step", v->step, v->kept, NSTEP},
        {"Depth-order inversion vs step", v->step, v->inv, NSTEP},
        {"Frame-gap figure vs step", v->step, v->gap, NSTEP},
    };
    for (size_t k = 0; k < sizeof C / sizeof C[0]; k++) {
        const char *end, *svg = find_chart(html, C[k].title, &end);
        char name[160];
        int count = 0, nlab = 0;
        double worst = svg ? compare_points(svg, end, C[k].x, C[k].y, C[k].n, &count) : INFINITY;
        snprintf(name, sizeof name, "chart points match log.jsonl: %s", C[k].title);
        check(worst <= 0.0051, name, "%d of %d points, worst error %.4g SVG units (rounding allows 0.005)",
              count, C[k].n, worst);
        double tw = svg ? check_ticks(svg, end, &nlab) : INFINITY;
        snprintf(name, sizeof name, "tick labels agree with the mapping: %s", C[k].title);
        check(nlab >= 4 && tw < 0.02, name, "%d labels, worst offset %.4g SVG units", nlab, tw);
    }
}

static int count_of(const char *s, const char *what)
{
    int n = 0;
    for (const char *p = strstr(s, what); p; p = strstr(p + 1, what)) n++;
    return n;
}

static void check_static(const char *html)
{
    check(!strstr(html, "http://") && !strstr(html, "https://"), "report has no http/https references",
          "found a network reference");
    check(!strstr(html, "<script"), "report has no scripts", "found <script");
    int src = count_of(html, " src=\""), data = count_of(html, " src=\"data:image/png;base64,");
    check(src > 0 && src == data, "every src is an embedded PNG", "%d src attributes, %d PNG data URIs", src, data);
    check(!strncmp(html, "<!DOCTYPE html>", 15) && strstr(html, "name=\"viewport\"") && strstr(html, "</html>"),
          "HTML5 doctype, viewport meta, closed document", "start: %.40s", html);
    check(strstr(html, "tiny-report-run") && strstr(html, "<dt>How it ended</dt><dd>budget reached</dd>") &&
          strstr(html, "<dt>Resumes</dt><dd>1</dd>") && strstr(html, "<dt>NaN recoveries</dt><dd>2</dd>") &&
          strstr(html, "<dt>Steps</dt><dd>22</dd>") && strstr(html, "1 health warnings"),
          "header shows run name, ending, resumes, NaN recoveries, steps", "header values missing");
    check(strstr(html, "0h 08m 20s") != NULL, "header wall time from the end record (500 s)", "missing 0h 08m 20s");
    check(strstr(html, "<td>0.1235</td><td>0.6543</td><td>0.4322</td>") && strstr(html, "<td>4.2500</td><td>7.5000</td>"),
          "metric table: model, constant and untrained baselines", "metric rows missing");
    /* 3 frames: input + 2 checkpoints × (disparity, auto-mask, error) */
    int imgs = count_of(html, "<img "), disp = count_of(html, " depth\" src="),
        mask = count_of(html, "auto-mask\" src="), err = count_of(html, "photometric error\" src=");
    check(imgs == 21 && disp == 6 && mask == 6 && err == 6, "gallery: 3 frames at 2 checkpoints",
          "%d images (%d depth, %d auto-mask, %d error), want 21 (6, 6, 6)", imgs, disp, mask, err);
    check(strstr(html, "step 10 depth") && strstr(html, "step 22 depth"), "gallery labels both checkpoints",
          "step labels missing");
}

/* ---- the gallery's depth colours ---------------------------------------------- */

static int b64_value(char c)
{
    static const char A[] = "ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789+/";
    const char *p = c ? strchr(A, c) : NULL;
    return p ? (int)(p - A) : -1;
}

/* Decodes the PNG data URI starting at `uri` ("data:image/png;base64,...")
 * into 8-bit RGB (stbi_image_free it).  NULL when it does not decode. */
static unsigned char *decode_uri(const char *uri, int *w, int *h)
{
    const char *p = uri + strlen("data:image/png;base64,");
    size_t len = strcspn(p, "\""), n = 0;
    unsigned char *bytes = malloc(len);
    unsigned v = 0;
    int bits = 0;
    for (size_t i = 0; bytes && i < len && p[i] != '='; i++) {
        int d = b64_value(p[i]);
        if (d < 0) { free(bytes); return NULL; }
        v = (v << 6) | (unsigned)d;
        bits += 6;
        if (bits >= 8) bytes[n++] = (unsigned char)(v >> (bits -= 8));
    }
    int comp;
    unsigned char *px = bytes ? stbi_load_from_memory(bytes, (int)n, w, h, &comp, 3) : NULL;
    free(bytes);
    return px;
}

/* Index of the table entry with this 8-bit colour, N for the no-depth
 * colour, -1 for anything else. */
static int entry_of(const unsigned char *q, unsigned char lut8[NJ_COLORMAP_SIZE + 1][3])
{
    for (int k = 0; k <= NJ_COLORMAP_SIZE; k++)
        if (q[0] == lut8[k][0] && q[1] == lut8[k][1] && q[2] == lut8[k][2]) return k;
    return -1;
}

/* Checks every depth picture's pixels; the entry range of the step-22 ones. */
static void check_depth_pixels(const char *html, unsigned char lut8[NJ_COLORMAP_SIZE + 1][3])
{
    int pictures = 0, foreign = 0, ends = 0, newest = 0;
    for (const char *p = strstr(html, " depth\" src=\""); p; p = strstr(p + 1, " depth\" src=\"")) {
        const char *alt = p;
        while (alt > html && strncmp(alt, "alt=\"", 5)) alt--;
        int w = 0, h = 0, lo = NJ_COLORMAP_SIZE, hi = -1;
        unsigned char *px = decode_uri(p + strlen(" depth\" src=\""), &w, &h);
        pictures += px != NULL;
        for (int i = 0; px && i < w * h; i++) {
            int k = entry_of(px + 3 * i, lut8);
            if (k < 0) foreign++;
            else if (k < NJ_COLORMAP_SIZE) lo = k < lo ? k : lo, hi = k > hi ? k : hi;
        }
        if (!strncmp(alt, "alt=\"step 22 depth", 18)) newest++, ends += lo <= 5 && hi >= NJ_COLORMAP_SIZE - 6;
        stbi_image_free(px);
    }
    check(pictures == 6 && foreign == 0, "every pixel of the 6 depth pictures is a " NJ_COLORMAP_NAME
          " entry or the no-depth colour", "%d pictures decoded, %d pixels of other colours", pictures, foreign);
    check(newest == 3 && ends == 3, "each frame's newest depth picture reaches both ends of the map (its scale)",
          "%d of %d newest pictures span entries <= 5 .. >= 250", ends, newest);
}

/* One colour bar: its cells, and its ticks against the stated log scale. */
static void check_bar(const char *svg, const char *end, unsigned char lut8[NJ_COLORMAP_SIZE + 1][3], int *cells_ok,
                      int *nticks, double *worst)
{
    double nearv = attr(svg, "data-near"), farv = attr(svg, "data-far"), l = attr(svg, "data-left"),
           w = attr(svg, "data-width");
    int cells = 0, order = 1;
    for (const char *p = strstr(svg, "<rect x=\""); p && p < end; p = strstr(p + 1, "<rect x=\"")) {
        const char *fill = strstr(p, "fill=\"#");
        unsigned r, g, b;
        if (!fill || fill > strchr(p, '>') || sscanf(fill + 7, "%2x%2x%2x", &r, &g, &b) != 3) continue;
        order &= cells < NJ_COLORMAP_SIZE && r == lut8[cells][0] && g == lut8[cells][1] && b == lut8[cells][2];
        cells++;
    }
    *cells_ok = order && cells == NJ_COLORMAP_SIZE;
    *nticks = 0;
    *worst = 0;
    for (const char *p = strstr(svg, " data-depth=\""); p && p < end; p = strstr(p + 1, " data-depth=\"")) {
        const char *tag = p;
        while (strncmp(tag, "<text", 5)) tag--;
        double d = attr(tag, "data-depth"), x = attr(tag, "x");
        double t = log(d / nearv) / log(farv / nearv);
        t = t < 0 ? 0 : t > 1 ? 1 : t;
        *worst = fmax(*worst, fabs(l + t * w - x));
        (*nticks)++;
    }
    if (!(farv > nearv && nearv > 0)) *worst = INFINITY;
}

static void check_gallery_colours(const char *html)
{
    float lut[NJ_COLORMAP_SIZE][3];
    unsigned char lut8[NJ_COLORMAP_SIZE + 1][3];
    nj_colormap_table(lut);
    for (int k = 0; k < NJ_COLORMAP_SIZE; k++)
        for (int c = 0; c < 3; c++) lut8[k][c] = (unsigned char)lrintf(lut[k][c] * 255.0f);
    const float none[3] = {NJ_NO_DEPTH_R, NJ_NO_DEPTH_G, NJ_NO_DEPTH_B};
    for (int c = 0; c < 3; c++) lut8[NJ_COLORMAP_SIZE][c] = (unsigned char)lrintf(none[c] * 255.0f);
    int bars = 0, cells_ok = 0, labelled = 0, few = 0;
    double worst = 0;
    for (const char *p = strstr(html, "<figure class=\"bar\">"); p; p = strstr(p + 1, "<figure class=\"bar\">")) {
        const char *svg = strstr(p, "<svg "), *end = svg ? strstr(svg, "</svg>") : NULL;
        if (!end) break;
        int ok, n;
        double wb;
        check_bar(svg, end, lut8, &ok, &n, &wb);
        bars++;
        cells_ok += ok;
        few += n < 3;
        worst = fmax(worst, wb);
        const char *nd = strstr(svg, ">near = dark<"), *fl = strstr(svg, ">far = light<"),
                   *un = strstr(svg, ">depth (model units, up to scale)<");
        labelled += nd && nd < end && fl && fl < end && un && un < end;
    }
    check(bars == 3 && cells_ok == 3, "a colour bar per frame: 256 cells, the table's entries dark to light",
          "%d bars, %d with the table's cells in order", bars, cells_ok);
    check(bars == 3 && few == 0 && worst < 0.01, "colour-bar ticks sit where the stated log depth scale puts them",
          "%d bars with fewer than 3 ticks, worst offset %.4g SVG units", few, worst);
    check(labelled == 3 && strstr(html, "near = dark, far = light") && strstr(html, "up to an unknown scale"),
          "legend: near = dark, far = light; monocular depth stated as up to scale",
          "%d bars labelled; legend or unit note missing", labelled);
    check_depth_pixels(html, lut8);
}

static const char PROBE[] =
    "<script>console.error(\"nj-probe-console\");window.addEventListener(\"load\",function(){"
    "function r(id){var b=document.getElementById(id).getBoundingClientRect();return [Math.round(b.left+scrollX),"
    "Math.round(b.top+scrollY),Math.round(b.width),Math.round(b.height)].join(\" \");}"
    "var bad=0,n=0;document.querySelectorAll(\"img\").forEach(function(i){n++;if(!(i.complete&&i.naturalWidth>0))bad++;});"
    "document.title=\"PROBE \"+r(\"charts\")+\" \"+r(\"gallery\")+\" \"+n+\" \"+bad+\" \"+"
    "document.documentElement.scrollWidth+\" \"+window.innerWidth+\" \"+document.documentElement.scrollHeight+\" END\";});"
    "</script>";

typedef struct probe { int chart[4], gallery[4], imgs, bad, scroll_w, inner_w, scroll_h; } probe;

/* Runs headless Chromium on `page` with `mode` (--dump-dom or --screenshot=...),
 * stdout into root/OUT.txt, stderr into root/OUT.err.  Returns the exit status. */
static int chromium(const char *root, const char *page, const char *mode, int w, int h, const char *out)
{
    char cmd[3000];
    snprintf(cmd, sizeof cmd,
             "cd '%s' && profile=$(mktemp -d '%s/profile.XXXXXX') && timeout 120 chromium --headless --no-sandbox "
             "--disable-gpu --disable-background-networking --disable-component-update --disable-sync "
             "--no-first-run --user-data-dir=\"$profile\" --force-device-scale-factor=1 --hide-scrollbars "
             "--window-size=%d,%d --enable-logging=stderr --v=0 %s 'file://%s' >'%s.txt' 2>'%s.err'; "
             "s=$?; rm -rf \"$profile\"; exit $s",
             root, root, w, h, mode, page, out, out);
    int rc = system(cmd);
    return WIFEXITED(rc) ? WEXITSTATUS(rc) : -1;
}

static int read_probe(const char *root, const char *out, probe *p)
{
    char path[600];
    snprintf(path, sizeof path, "%s/%s.txt", root, out);
    char *dom = e2e_slurp(path, NULL);
    const char *t = dom ? strstr(dom, "<title>PROBE ") : NULL;
    int n = t ? sscanf(t + 13, "%d %d %d %d %d %d %d %d %d %d %d %d %d", &p->chart[0], &p->chart[1], &p->chart[2],
                       &p->chart[3], &p->gallery[0], &p->gallery[1], &p->gallery[2], &p->gallery[3], &p->imgs,
                       &p->bad, &p->scroll_w, &p->inner_w, &p->scroll_h) : 0;
    free(dom);
    return n == 13 ? 0 : -1;
}

/* Share of pixels in the box that differ (any channel by > 8) from the box's
 * top-left pixel, and the luminance range. */
static double non_uniform(const unsigned char *px, int W, int H, const int box[4], int *range)
{
    int x0 = box[0] < 0 ? 0 : box[0], y0 = box[1] < 0 ? 0 : box[1];
    int x1 = box[0] + box[2] > W ? W : box[0] + box[2], y1 = box[1] + box[3] > H ? H : box[1] + box[3];
    if (x1 <= x0 || y1 <= y0) { *range = 0; return 0; }
    const unsigned char *ref = px + ((size_t)y0 * W + x0) * 3;
    long diff = 0, total = 0;
    int lo = 255, hi = 0;
    for (int y = y0; y < y1; y++)
        for (int x = x0; x < x1; x++, total++) {
            const unsigned char *q = px + ((size_t)y * W + x) * 3;
            int d = 0, l = (q[0] * 3 + q[1] * 6 + q[2]) / 10;
            for (int c = 0; c < 3; c++) d |= abs(q[c] - ref[c]) > 8;
            diff += d;
            lo = l < lo ? l : lo;
            hi = l > hi ? l : hi;
        }
    *range = hi - lo;
    return (double)diff / (double)total;
}

static int log_has(const char *path, const char *const *words, int nwords, char *found, size_t flen)
{
    char *s = e2e_slurp(path, NULL);
    int hit = 0;
    for (int i = 0; s && i < nwords && !hit; i++) {
        const char *p = strstr(s, words[i]);
        if (p) {
            hit = 1;
            const char *e = strchr(p, '\n');
            snprintf(found, flen, "%.*s", e ? (int)(e - p) : 200, p);
        }
    }
    free(s);
    return s ? hit : -1;
}

/* HTML Tidy (Debian package tidy, an independent HTML checker): exit 0 means
 * neither errors nor warnings. */
static void check_tidy(const char *report)
{
    char cmd[1200];
    snprintf(cmd, sizeof cmd, "tidy -q -e '%s' > /dev/null 2>&1", report);
    int st = system(cmd);
    int rc = st == -1 ? -1 : WIFEXITED(st) ? WEXITSTATUS(st) : 128;
    check(rc == 0, "HTML Tidy finds no errors or warnings in the report",
          "tidy exit %d (1 = warnings, 2 = errors; run tidy -q -e %s)", rc, report);
}

static void check_browser(const char *root, const char *report)
{
    if (system("command -v chromium >/dev/null 2>&1") != 0) {
        check(0, "headless Chromium available", "install Debian chromium (tools/deps.sh test)");
        return;
    }
    char probe_path[600], shot[600], found[300] = "";
    size_t len;
    char *html = e2e_slurp(report, &len);
    snprintf(probe_path, sizeof probe_path, "%s/probe.html", root);
    char *body = html ? strstr(html, "</body>") : NULL;
    FILE *f = body ? fopen(probe_path, "w") : NULL;
    if (f) {
        fwrite(html, 1, (size_t)(body - html), f);
        fputs(PROBE, f);
        fputs(body, f);
        fclose(f);
    }
    free(html);
    probe desk, phone;
    memset(&desk, 0, sizeof desk);
    memset(&phone, 0, sizeof phone);
    int rc1 = chromium(root, probe_path, "--dump-dom", 1200, 900, "desk");
    int rc2 = chromium(root, probe_path, "--dump-dom", 390, 844, "phone");
    int ok = rc1 == 0 && rc2 == 0 && read_probe(root, "desk", &desk) == 0 && read_probe(root, "phone", &phone) == 0;
    check(ok, "Chromium loads the page (desktop and phone width)", "exit %d/%d, no probe title", rc1, rc2);
    if (!ok) return;
    check(desk.imgs == 21 && desk.bad == 0, "Chromium decodes every embedded PNG", "%d images, %d not decoded",
          desk.imgs, desk.bad);
    check(desk.scroll_w <= desk.inner_w && phone.scroll_w <= phone.inner_w, "no horizontal overflow",
          "desktop %d > %d or phone %d > %d px", desk.scroll_w, desk.inner_w, phone.scroll_w, phone.inner_w);
    const char *probe_words[] = {"nj-probe-console"};
    char pe[600];
    snprintf(pe, sizeof pe, "%s/desk.err", root);
    check(log_has(pe, probe_words, 1, found, sizeof found) == 1, "console capture works (probe message seen)",
          "the probe's console.error did not reach the log");
    int h = desk.scroll_h < 12000 ? desk.scroll_h : 12000;
    snprintf(shot, sizeof shot, "--screenshot='%s/shot.png'", root);
    int rc3 = chromium(root, report, shot, 1200, h, "shot");
    snprintf(pe, sizeof pe, "%s/shot.err", root);
    const char *bad_words[] = {"Uncaught", "ERROR:CONSOLE", "CONSOLE(", "INFO:CONSOLE", "Failed to load resource",
                               "net::ERR"};
    check(rc3 == 0 && log_has(pe, bad_words, 6, found, sizeof found) == 0, "no console errors in Chromium",
          "exit %d, log line: %s", rc3, found);
    snprintf(pe, sizeof pe, "%s/shot.png", root);
    int W = 0, H = 0, comp = 0;
    unsigned char *px = stbi_load(pe, &W, &H, &comp, 3);
    check(px && W == 1200 && H == h, "screenshot decodes at the window size", "%dx%d (want 1200x%d)", W, H, h);
    if (!px) return;
    int rc_range, rg_range;
    double c = non_uniform(px, W, H, desk.chart, &rc_range), g = non_uniform(px, W, H, desk.gallery, &rg_range);
    check(c > 0.02 && rc_range > 60, "chart region is not blank", "%.3f of pixels differ, luminance range %d", c,
          rc_range);
    check(g > 0.2 && rg_range > 60 && desk.gallery[3] > 300, "gallery region is not blank",
          "%.3f of pixels differ, luminance range %d, height %d px", g, rg_range, desk.gallery[3]);
    stbi_image_free(px);
}

int main(void)
{
    char root[] = "/tmp/nj_test_report.XXXXXX", run[600], err[512], report[700];
    if (!mkdtemp(root)) return 1;
    logvals v;
    int ok = make_run(root, run, sizeof run) == 0 && write_log(run, &v) == 0;
    check(ok, "tiny run created (synth data, checkpoints, log)", "see stderr");
    if (!ok) return test_exit();
    write_metrics(run);
    int rc = nj_report_write(run, NULL, err, sizeof err);
    check(rc == 0, "nj_report_write succeeds", "%s", err);
    snprintf(report, sizeof report, "%s/report.html", run);
    char *html = e2e_slurp(report, NULL);
    check(html != NULL, "report.html written", "missing %s", report);
    if (html) {
        check_static(html);
        check_gallery_colours(html);
        check_tidy(report);
        check_charts(html, &v);
        check_browser(root, report);
    }
    free(html);
    char cmd[700];
    snprintf(cmd, sizeof cmd, "rm -rf '%s'", root);
    if (test_failures() == 0 && system(cmd) != 0) fprintf(stderr, "could not remove %s\n", root);
    return test_exit();
}

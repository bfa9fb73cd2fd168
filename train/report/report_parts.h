/* train/report/report_parts.h — pieces of the run report (internal to report*.c):
 * the parsed log, the SVG line chart, the gallery and the PNG/base64 embedding. */
#ifndef NJ_REPORT_PARTS_H
#define NJ_REPORT_PARTS_H
#include "train/loop/loop.h"
#include "train/eval/eval.h"
#include <stdio.h>

/* The records of log.jsonl that the report shows. */
typedef struct nj_log_step {
    long step;
    double loss, photometric, smoothness, lr, images_per_s, elapsed_s;
    /* figures that need no ground truth (NaN when the line lacks them):
     * the auto-mask's kept share, the drift alarm's `inverted` and the pose
     * net's frame-gap figure (train/loop/health.h, step.h) */
    double mask_kept, inverted, gap;
} nj_log_step;

typedef struct nj_log_val {
    long step;
    double photometric, elapsed_s;
    double absrel, delta1;      /* NaN when the val split has no ground truth */
} nj_log_val;

typedef struct nj_run_log {
    nj_log_step *steps;
    int nsteps;
    nj_log_val *vals;
    int nvals;
    int health, nonfinite;      /* counts of those records */
    int bad_lines;              /* lines that are not JSON objects (e.g. a torn tail) */
    int has_end;
    long end_step;
    char ended[128];
    double end_elapsed;
    int resumes, nan_recoveries;
} nj_run_log;

/* Reads PATH into *log.  A missing file gives an empty log.  Returns 0, or -1
 * with err when out of memory. */
int nj_run_log_read(const char *path, nj_run_log *log, char *err, size_t errlen);
void nj_run_log_free(nj_run_log *log);

/* One polyline of a chart: n points (x[i], y[i]); non-finite points skipped. */
typedef struct nj_series {
    const char *name;           /* data-series attribute and legend label */
    const double *x, *y;
    int n;
} nj_series;

/* Writes <figure> with an SVG line chart: axes with rounded ("nice") ticks,
 * axis titles (with units), one polyline per series, a legend.  The plot
 * mapping is stated on the <svg> as data-x0/-x1/-y0/-y1 (value range) and
 * data-left/-top/-width/-height (plot box in SVG units); points are printed
 * with two decimals. */
void nj_svg_chart(FILE *f, const char *title, const char *xlabel, const char *ylabel,
                  const nj_series *s, int ns);

/* Writes <figure class="bar"> with an SVG colour bar of the depth colour map
 * under `scale` (colormap.h): near (dark) at the left, far (light) at the
 * right, the table's entries as equal-width cells, ticks at round depths
 * (1-2-5 or 1..9 × 10^k on the log axis, else linear steps for a narrow range)
 * labelled with their value and the axis title `units`, and `caption`.  The
 * mapping is stated on the <svg> (data-near, data-far, data-left, data-width)
 * and each tick label carries its depth (data-depth) so it can be read back. */
void nj_svg_depth_bar(FILE *f, nj_depth_scale scale, const char *units, const char *caption);

/* Writes "data:image/png;base64,..." of an 8-bit RGB w×h image (interleaved)
 * to f.  Returns 0, or -1 when encoding fails. */
int nj_png_data_uri(FILE *f, const unsigned char *rgb, int w, int h);
/* HTML-escapes s into f. */
void nj_html_text(FILE *f, const char *s);

/* Writes the gallery <section> for run_dir (checkpoints, frames of the
 * dataset named in cfg).  Problems become a note in the page. */
void nj_report_gallery(FILE *f, const char *run_dir);

/* Writes the metric <section>: the table of `nightjar eval --out` JSON at
 * metrics_path (model and the baselines: constant, untrained and, when the
 * file has it, the row-layout oracle; then the per-region table — depth
 * bands, obstacle and lead-vehicle pixels — when present) and the sizes of
 * the files in export_dir; either may be missing (NULL or absent), which is
 * stated. */
void nj_report_metrics(FILE *f, const char *metrics_path, const char *export_dir);
/* <section id="map">: the top-down picture of `nightjar map` (its PNG file
 * embedded as it is) and the figures of its summary; nothing when the folder
 * has no picture. */
void nj_report_map(FILE *f, const char *map_dir);
/* A whole file, NUL-terminated (malloc'd); *n (may be NULL) gets its size.
 * NULL when path is NULL or the file cannot be read. */
char *nj_report_slurp(const char *path, size_t *n);
/* Bytes as a base64 data URI of the given media type. */
void nj_data_uri(FILE *f, const char *mime, const unsigned char *p, size_t n);

#endif

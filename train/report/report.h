/* train/report/report.h — the run report: one self-contained HTML page (inline CSS,
 * inline SVG charts, PNGs embedded as base64 data URIs, no network
 * references) summarising a run directory: header (run, data, config,
 * hardware, wall time, how it ended), loss / learning-rate / validation
 * charts from RUN_DIR/log.jsonl, a gallery of fixed validation frames at up
 * to three checkpoints (input with a depth colour bar, depth in the "bracken"
 * map scaled as `predict` scales it with near = dark, auto-mask, photometric
 * error), the metric table of `nightjar eval` when present and the top-down
 * picture of `nightjar map` with its figures when a map folder is there. */
#ifndef NJ_REPORT_H
#define NJ_REPORT_H
#include <stddef.h>

typedef struct nj_report_options {
    const char *run_dir;
    const char *out;          /* NULL: RUN_DIR/report.html */
    const char *metrics;      /* `nightjar eval --out` JSON; NULL: RUN_DIR/metrics.json when present */
    const char *export_dir;   /* exported models to list; NULL: RUN_DIR/export */
    const char *map_dir;      /* `nightjar map --out` folder; NULL: RUN_DIR/map when present */
} nj_report_options;

/* Writes the report page atomically (the command: train/cli/cmd_report.c).
 * Returns 0, or -1 with a one-line message in err. */
int nj_report_run(const nj_report_options *o, char *err, size_t errlen);
/* nj_report_run with the defaults but for out_path (the trainer's report at
 * the end of a run). */
int nj_report_write(const char *run_dir, const char *out_path, char *err, size_t errlen);

#endif

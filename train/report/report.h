/* train/report/report.h — the run report: one self-contained HTML page (inline CSS,
 * inline SVG charts, PNGs embedded as base64 data URIs, no network
 * references) summarising a run directory: header (run, data, config,
 * hardware, wall time, how it ended), loss / learning-rate / validation
 * charts from RUN_DIR/log.jsonl, a gallery of fixed validation frames at up
 * to three checkpoints (input with a depth colour bar, depth in the "bracken"
 * map scaled as `predict` scales it with near = dark, auto-mask, photometric
 * error) and the metric table of `nightjar eval` when present. */
#ifndef NJ_REPORT_H
#define NJ_REPORT_H
#include <stddef.h>

/* Writes the report of run_dir to out_path (NULL: RUN_DIR/report.html)
 * atomically, using RUN_DIR/metrics.json and RUN_DIR/export/ when present.
 * Returns 0, or -1 with a one-line message in err. */
int nj_report_write(const char *run_dir, const char *out_path, char *err, size_t errlen);
/* `nightjar report RUN_DIR [--out FILE] [--metrics FILE] [--export DIR]`. */
int nj_report_main(int argc, char **argv);

#endif

/* train/report/report.c — `nightjar report`: assembles the run report page
 * (train/report/report.h): inline CSS, the summary header, the training-curve
 * charts (report_svg.c), the gallery (report_gallery.c) and the metric
 * table (report_metrics.c), written atomically. */
#include "train/report/report.h"
#include "train/report/report_parts.h"
#include "data/atomic.h"
#include "train/loop/loop.h"
#include "train/version.h"
#include <math.h>
#include <stddef.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <unistd.h>

static const char CSS[] =
    "*{box-sizing:border-box}"
    "body{margin:0;font:15px/1.45 system-ui,-apple-system,'Segoe UI',sans-serif;color:#1d2230;background:#fbfbfd}"
    "main{max-width:1200px;margin:0 auto;padding:12px}"
    "h1{font-size:1.4em;margin:.3em 0}h2{font-size:1.15em;margin:1.2em 0 .4em;border-bottom:1px solid #d8dbe4}"
    "h3{font-size:1em;margin:.8em 0 .3em}"
    "dl{display:grid;grid-template-columns:max-content 1fr;gap:2px 14px;margin:0}dt{font-weight:600}dd{margin:0}"
    ".charts{display:grid;grid-template-columns:repeat(auto-fill,minmax(min(100%,380px),1fr));gap:12px}"
    ".chart{margin:0;background:#fff;border:1px solid #e1e3ea;border-radius:6px;padding:6px}"
    ".chart figcaption{font-weight:600;font-size:.92em}"
    "svg{width:100%;height:auto;display:block;font-size:11px}"
    "svg text{fill:#333}svg .axis{font-size:12px}"
    ".grid{stroke:#e6e8ee;stroke-width:1}.frame{fill:none;stroke:#9aa0ad}"
    ".series{fill:none;stroke-width:1.6;stroke-linejoin:round}"
    ".tiles{display:grid;grid-template-columns:repeat(3,minmax(0,1fr));gap:8px;max-width:900px;margin-bottom:6px}"
    ".tiles figure{margin:0}.tiles img{width:100%;height:auto;image-rendering:pixelated;display:block}"
    ".tiles figcaption{font-size:.85em;color:#555}"
    /* the gallery's frame <div> is class "frame" too: keep its stroke off the colour bar's cells */
    ".bar svg{stroke:none}"
    ".note{color:#555}.scroll{overflow-x:auto}"
    "table{border-collapse:collapse;margin:.5em 0}th,td{padding:3px 10px;border-bottom:1px solid #e1e3ea;"
    "text-align:right}th:first-child{text-align:left}caption{text-align:left;font-weight:600}"
    "@media (max-width:600px){body{font-size:14px}main{padding:6px}dl{grid-template-columns:1fr}"
    "dd{margin-bottom:4px}}";

static void hms(char *out, size_t len, double s)
{
    if (!isfinite(s) || s < 0) { snprintf(out, len, "unknown"); return; }
    long t = lround(s);
    snprintf(out, len, "%ldh %02ldm %02lds (%.2f hours)", t / 3600, t / 60 % 60, t % 60, s / 3600.0);
}

static void item(FILE *f, const char *term, const char *value)
{
    fprintf(f, "<dt>%s</dt><dd>", term);
    nj_html_text(f, value);
    fputs("</dd>\n", f);
}

static void config_summary(char *out, size_t len, const nj_train_config *c)
{
    const char *norm = c->model.norm == NJ_NORM_BATCH ? "batch" : c->model.norm == NJ_NORM_GROUP ? "group" : "no";
    snprintf(out, len,
             "%d×%d px, batch %d; depth net %d stages, width ×%g, %d scales, %s norm; pose net %s; "
             "lr %g → %g (%s, %d warm-up steps); SSIM weight %g, smoothness %g, auto-mask %s; "
             "budget %g min, %ld steps (0 = none); seed %u",
             c->width, c->height, c->batch, c->model.stages, c->model.width, c->model.scales, norm,
             c->video ? "on" : "off", c->lr, c->lr_min, c->cosine ? "cosine" : "step", c->warmup_steps,
             c->loss.alpha, c->loss.smooth_weight, c->loss.automask ? "on" : "off", c->minutes,
             c->max_steps, c->seed);
}

/* Config and state of the newest readable checkpoint; 0 when found. */
static int newest_config(const char *run_dir, nj_train_config *cfg, nj_train_state *st)
{
    const char *names[2] = {"final.ckpt", "best.ckpt"};
    char path[4200], err[256];
    long steps[1];
    int n = nj_run_list_steps(run_dir, steps, 1);
    for (int i = -1; i < 2; i++) {
        if (i < 0 && n < 1) continue;
        if (i < 0) nj_run_step_path(run_dir, steps[0], path, sizeof path);
        else snprintf(path, sizeof path, "%s/%s", run_dir, names[i]);
        nj_model m;
        if (access(path, R_OK) == 0 && nj_checkpoint_load(path, &m, cfg, st, err, sizeof err) == 0) {
            nj_model_free(&m);
            return 0;
        }
    }
    return -1;
}

static void header(FILE *f, const char *run_dir, const nj_run_log *log)
{
    nj_train_config cfg;
    nj_train_state st;
    int have = newest_config(run_dir, &cfg, &st) == 0;
    char v[1400];
    const nj_log_step *last = log->nsteps ? &log->steps[log->nsteps - 1] : NULL;
    fputs("<header id=\"summary\"><h1>Run ", f);
    nj_html_text(f, have ? cfg.name : run_dir);
    fputs("</h1>\n<dl>\n", f);
    item(f, "Run folder", run_dir);
    item(f, "Dataset", have ? cfg.dataset : "unknown (no checkpoint yet)");
    if (have) config_summary(v, sizeof v, &cfg);
    item(f, "Configuration", have ? v : "unknown (no checkpoint yet)");
    long cores = sysconf(_SC_NPROCESSORS_ONLN);
    if (have && cfg.threads > 0) snprintf(v, sizeof v, "%ld cores, %d threads", cores, cfg.threads);
    else snprintf(v, sizeof v, "%ld cores, threads: all cores", cores);
    item(f, "Hardware", v);
    hms(v, sizeof v, log->has_end ? log->end_elapsed : last ? last->elapsed_s : NAN);
    item(f, "Wall time", v);
    snprintf(v, sizeof v, "%ld", log->has_end ? log->end_step : last ? last->step : (have ? st.step : 0));
    item(f, "Steps", v);
    double sum = 0;
    int n = 0;
    for (int i = 0; i < log->nsteps; i++)
        if (isfinite(log->steps[i].images_per_s)) sum += log->steps[i].images_per_s, n++;
    if (n) snprintf(v, sizeof v, "%.2f images/s (mean of %d logged rates; last %.2f)", sum / n, n,
                    last->images_per_s);
    else snprintf(v, sizeof v, "no steps logged");
    item(f, "Speed", v);
    if (log->has_end) snprintf(v, sizeof v, "%s", log->ended);
    else snprintf(v, sizeof v, "no end record: still running, or stopped without a clean end");
    item(f, "How it ended", v);
    snprintf(v, sizeof v, "%d", log->has_end ? log->resumes : have ? st.resumes : 0);
    item(f, "Resumes", v);
    snprintf(v, sizeof v, "%d", log->has_end ? log->nan_recoveries : have ? st.nan_recoveries : 0);
    item(f, "NaN recoveries", v);
    snprintf(v, sizeof v, "%d health warnings, %d non-finite events, %d unreadable log lines",
             log->health, log->nonfinite, log->bad_lines);
    item(f, "Log events", v);
    fputs("</dl></header>\n", f);
}

static void charts(FILE *f, const nj_run_log *log)
{
    int n = log->nsteps, nv = log->nvals;
    double *a = malloc(((size_t)6 * n + 5 * nv + 1) * sizeof *a);
    fputs("<section id=\"charts\"><h2>Training curves</h2><div class=\"charts\">\n", f);
    if (!a) { fputs("<p class=\"note\">out of memory</p></div></section>\n", f); return; }
    double *step = a, *hours = a + n, *tot = a + 2 * n, *pho = a + 3 * n, *smo = a + 4 * n, *lr = a + 5 * n;
    double *vstep = a + 6 * n, *vpho = vstep + nv, *vabs = vpho + nv, *vdel = vabs + nv, *dstep = vdel + nv;
    int nd = 0;   /* validations that carry depth metrics */
    for (int i = 0; i < n; i++) {
        const nj_log_step *s = &log->steps[i];
        step[i] = (double)s->step;
        hours[i] = s->elapsed_s / 3600.0;
        tot[i] = s->loss, pho[i] = s->photometric, smo[i] = s->smoothness, lr[i] = s->lr;
    }
    for (int i = 0; i < nv; i++) {
        vstep[i] = (double)log->vals[i].step, vpho[i] = log->vals[i].photometric;
        if (isfinite(log->vals[i].absrel)) nd++;
    }
    const char *names[3] = {"total", "photometric", "smoothness"};
    const char *titles[3] = {"Total loss", "Photometric loss", "Smoothness loss (weighted)"};
    double *ys[3] = {tot, pho, smo};
    for (int k = 0; k < 3; k++) {
        char t[96];
        nj_series s = {names[k], step, ys[k], n};
        snprintf(t, sizeof t, "%s vs step", titles[k]);
        nj_svg_chart(f, t, "training step", "loss (dimensionless)", &s, 1);
        nj_series h = {names[k], hours, ys[k], n};
        snprintf(t, sizeof t, "%s vs wall time", titles[k]);
        nj_svg_chart(f, t, "wall time (hours)", "loss (dimensionless)", &h, 1);
    }
    nj_series l = {"lr", step, lr, n};
    nj_svg_chart(f, "Learning rate vs step", "training step", "learning rate (per step)", &l, 1);
    nj_series v = {"val photometric", vstep, vpho, nv};
    nj_svg_chart(f, "Validation photometric loss vs step", "training step", "loss (dimensionless)", &v, 1);
    if (nd > 0) {
        int k = 0;   /* the validations that carry depth metrics, in order */
        for (int i = 0; i < nv; i++)
            if (isfinite(log->vals[i].absrel))
                vabs[k] = log->vals[i].absrel, vdel[k] = log->vals[i].delta1, dstep[k] = vstep[i], k++;
        nj_series d1 = {"val AbsRel", dstep, vabs, nd};
        nj_svg_chart(f, "Validation AbsRel vs step", "training step", "AbsRel (dimensionless)", &d1, 1);
        nj_series d2 = {"val delta<1.25", dstep, vdel, nd};
        nj_svg_chart(f, "Validation share within 1.25x vs step", "training step", "share of pixels", &d2, 1);
        fputs("</div>\n</section>\n", f);
    } else {
        fputs("</div>\n<p class=\"note\">The validation split has no ground-truth depth, so there are no "
              "depth-metric curves; see the final table.</p></section>\n", f);
    }
    free(a);
}

/* The step lines' figures that need no ground truth, one chart each, for
 * the runs whose log carries them: what a user without depth ground truth
 * can read the run's health from. */
static void health_charts(FILE *f, const nj_run_log *log)
{
    int n = log->nsteps;
    double *a = malloc(((size_t)2 * n + 1) * sizeof *a), *step = a, *y = a + n;
    if (!a) return;
    static const struct { const char *title, *name, *ylabel, *note; size_t at; } C[] = {
        {"Auto-mask kept share vs step", "mask kept", "share of pixels",
         "Near 0: nothing moves relative to the camera (stopped vehicle, frames too close together).",
         offsetof(nj_log_step, mask_kept)},
        {"Depth-order inversion vs step", "inverted", "share of lower-half pixels",
         "Share of lower-half pixels predicted farther than the upper half's median depth; the drift alarm "
         "fires when its median over the last logged steps exceeds the threshold", offsetof(nj_log_step, inverted)},
        {"Frame-gap figure vs step", "gap", "ratio (dimensionless)",
         "The pose net's translation per frame at the widest frame offset over that at the smallest: about 1 "
         "when it measures the gap between frames, 0.5 with offsets [1, 2] when it gives every gap the same "
         "motion.", offsetof(nj_log_step, gap)},
    };
    int any = 0;
    for (int i = 0; i < n; i++) step[i] = (double)log->steps[i].step;
    for (size_t k = 0; k < sizeof C / sizeof C[0]; k++) {
        int finite = 0;
        for (int i = 0; i < n; i++) {
            y[i] = *(const double *)((const char *)&log->steps[i] + C[k].at);
            finite += isfinite(y[i]) != 0;
        }
        if (!finite) continue;
        if (!any++) fputs("<section id=\"health\"><h2>Health figures (no ground truth needed)</h2>\n", f);
        fputs("<p class=\"note\">", f);
        nj_html_text(f, C[k].note);
        if (C[k].at == offsetof(nj_log_step, inverted))
            fprintf(f, " (%d steps, %.2g).", NJ_HEALTH_WINDOW, (double)NJ_HEALTH_DRIFT_INVERTED);
        fputs("</p>\n<div class=\"charts\">\n", f);
        nj_series s = {C[k].name, step, y, n};
        nj_svg_chart(f, C[k].title, "training step", C[k].ylabel, &s, 1);
        fputs("</div>\n", f);
    }
    if (any) fputs("</section>\n", f);
    free(a);
}

static void page(FILE *f, const nj_report_options *o, const nj_run_log *log, const char *metrics,
                 const char *export_dir, const char *map_dir)
{
    fputs("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">\n"
          "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n<title>nightjar report: ", f);
    nj_html_text(f, o->run_dir);
    fprintf(f, "</title>\n<style>%s</style></head>\n<body><main>\n", CSS);
    header(f, o->run_dir, log);
    charts(f, log);
    health_charts(f, log);
    nj_report_gallery(f, o->run_dir);
    nj_report_metrics(f, metrics, export_dir);
    nj_report_map(f, map_dir);
    char when[64];
    time_t now = time(NULL);
    strftime(when, sizeof when, "%Y-%m-%d %H:%M:%S UTC", gmtime(&now));
    fprintf(f, "<footer class=\"note\"><p>nightjar %s, %s</p></footer>\n</main></body></html>\n", NJ_VERSION, when);
}

int nj_report_run(const nj_report_options *o, char *err, size_t errlen)
{
    char out[4200], logp[4200], met[4200], exp[4200], map[4200];
    /* nj_atomic_close keeps a caller's message already in err: start clean */
    if (err && errlen) err[0] = 0;
    snprintf(out, sizeof out, "%s", o->out ? o->out : "");
    if (!o->out) snprintf(out, sizeof out, "%s/report.html", o->run_dir);
    snprintf(logp, sizeof logp, "%s/log.jsonl", o->run_dir);
    snprintf(met, sizeof met, "%s/metrics.json", o->run_dir);
    snprintf(exp, sizeof exp, "%s/export", o->run_dir);
    snprintf(map, sizeof map, "%s/map", o->run_dir);
    if (access(o->run_dir, R_OK | X_OK) != 0) {
        snprintf(err, errlen, "%.900s: not a readable folder", o->run_dir);
        return -1;
    }
    nj_run_log log;
    if (nj_run_log_read(logp, &log, err, errlen)) return -1;
    nj_atomic_file a;
    if (nj_atomic_open(&a, out, err, errlen)) { nj_run_log_free(&log); return -1; }
    page(a.f, o, &log, o->metrics ? o->metrics : met, o->export_dir ? o->export_dir : exp, o->map_dir ? o->map_dir : map);
    nj_run_log_free(&log);
    return nj_atomic_close(&a, !ferror(a.f), err, errlen);
}

int nj_report_write(const char *run_dir, const char *out_path, char *err, size_t errlen)
{
    nj_report_options o = {run_dir, out_path, NULL, NULL, NULL};
    return nj_report_run(&o, err, errlen);
}

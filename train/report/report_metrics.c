/* train/report/report_metrics.c — the report's final metric table: the depth
 * metrics of `nightjar eval --out metrics.json` for the model beside the
 * constant and untrained baselines (and the row-layout oracle when the file
 * has it), the per-region table (depth bands, obstacle and lead-vehicle
 * pixels) when present, the pose metrics when present, and the sizes of
 * exported model files. */
#include "train/report/report_parts.h"
#include <cjson/cJSON.h>
#include <dirent.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

typedef struct metric_row { const char *key, *label, *better; } metric_row;

static const metric_row ROWS[] = {
    {"absrel", "AbsRel", "lower"},       {"sqrel", "SqRel", "lower"},
    {"rmse", "RMSE (m)", "lower"},       {"rmse_log", "RMSE log", "lower"},
    {"delta_1_25", "δ < 1.25", "higher"}, {"delta_1_25_2", "δ < 1.25²", "higher"},
    {"delta_1_25_3", "δ < 1.25³", "higher"},
};

static cJSON *read_json(const char *path)
{
    char *text = nj_report_slurp(path, NULL);
    cJSON *j = text ? cJSON_Parse(text) : NULL;
    free(text);
    return j;
}

static void cell(FILE *f, const cJSON *obj, const char *key)
{
    const cJSON *v = cJSON_GetObjectItemCaseSensitive(obj, key);
    if (cJSON_IsNumber(v)) fprintf(f, "<td>%.4f</td>", v->valuedouble);
    else fputs("<td>–</td>", f);
}

static void depth_table(FILE *f, const cJSON *j)
{
    const cJSON *c = cJSON_GetObjectItemCaseSensitive(j, "baseline_constant");
    const cJSON *u = cJSON_GetObjectItemCaseSensitive(j, "baseline_untrained");
    const cJSON *o = cJSON_GetObjectItemCaseSensitive(j, "baseline_row_layout_oracle");
    const cJSON *split = cJSON_GetObjectItemCaseSensitive(j, "split");
    const cJSON *images = cJSON_GetObjectItemCaseSensitive(j, "images");
    fputs("<div class=\"scroll\"><table><caption>Depth on the ", f);
    nj_html_text(f, cJSON_IsString(split) ? split->valuestring : "evaluation");
    if (cJSON_IsNumber(images)) fprintf(f, " split, %d images", images->valueint);
    fputs("</caption>\n<thead><tr><th>metric</th><th>better</th><th>model</th><th>constant baseline</th>"
          "<th>untrained baseline</th>", f);
    if (cJSON_IsObject(o)) fputs("<th>row-layout oracle</th>", f);
    fputs("</tr></thead><tbody>\n", f);
    for (size_t i = 0; i < sizeof ROWS / sizeof ROWS[0]; i++) {
        fprintf(f, "<tr><th>%s</th><td>%s</td>", ROWS[i].label, ROWS[i].better);
        cell(f, j, ROWS[i].key);
        cell(f, c, ROWS[i].key);
        cell(f, u, ROWS[i].key);
        if (cJSON_IsObject(o)) cell(f, o, ROWS[i].key);
        fputs("</tr>\n", f);
    }
    fputs("</tbody></table></div>\n", f);
    if (cJSON_IsObject(o))
        fputs("<p class=\"note\">Row-layout oracle: each pixel at the median true depth of its image row; a model "
              "that only learned \"lower is nearer\" cannot beat it.</p>\n", f);
}

/* ---- per region ------------------------------------------------------------- */

static void region_row(FILE *f, const char *label, const cJSON *e)
{
    static const char *const BASELINES[3] = {"baseline_constant", "baseline_untrained", "baseline_row_layout_oracle"};
    const cJSON *px = cJSON_GetObjectItemCaseSensitive(e, "pixels"), *im = cJSON_GetObjectItemCaseSensitive(e, "images");
    const cJSON *m = cJSON_GetObjectItemCaseSensitive(e, "model");
    fputs("<tr><th>", f);
    nj_html_text(f, label);
    fputs("</th>", f);
    if (cJSON_IsNumber(px) && cJSON_IsNumber(im)) fprintf(f, "<td>%.0f in %d</td>", px->valuedouble, im->valueint);
    else fputs("<td>–</td>", f);
    cell(f, m, "absrel");
    cell(f, m, "delta_1_25");
    cell(f, m, "ratio_median");
    for (int b = 0; b < 3; b++) cell(f, cJSON_GetObjectItemCaseSensitive(e, BASELINES[b]), "absrel");
    fputs("</tr>\n", f);
}

/* Bands of true depth, obstacle pixels and lead-vehicle pixels, when the
 * file has them (eval since issue 18). */
static void region_table(FILE *f, const cJSON *j)
{
    const cJSON *bands = cJSON_GetObjectItemCaseSensitive(j, "by_depth_band");
    const cJSON *ob = cJSON_GetObjectItemCaseSensitive(j, "obstacle_pixels");
    const cJSON *lead = cJSON_GetObjectItemCaseSensitive(j, "lead_vehicle_pixels");
    if (!cJSON_IsArray(bands) && !cJSON_IsObject(ob) && !cJSON_IsObject(lead)) return;
    fputs("<div class=\"scroll\"><table><caption>Depth by region</caption>\n<thead><tr><th>region</th>"
          "<th>pixels in images</th><th>model AbsRel</th><th>model δ &lt; 1.25</th><th>model prediction / truth "
          "(median)</th><th>constant AbsRel</th><th>untrained AbsRel</th><th>row-layout oracle AbsRel</th></tr>"
          "</thead><tbody>\n", f);
    int nb = cJSON_IsArray(bands) ? cJSON_GetArraySize(bands) : 0;
    for (int i = 0; i < nb; i++) {
        const cJSON *e = cJSON_GetArrayItem(bands, i);
        const cJSON *lo = cJSON_GetObjectItemCaseSensitive(e, "from_m"), *hi = cJSON_GetObjectItemCaseSensitive(e, "to_m");
        char label[64];
        if (cJSON_IsNumber(lo) && cJSON_IsNumber(hi))
            snprintf(label, sizeof label, "true depth %g–%g m", lo->valuedouble, hi->valuedouble);
        else
            snprintf(label, sizeof label, "depth band");
        region_row(f, label, e);
    }
    if (cJSON_IsObject(ob)) region_row(f, "obstacle pixels", ob);
    if (cJSON_IsObject(lead)) region_row(f, "lead vehicle", lead);
    fputs("</tbody></table></div>\n<p class=\"note\">Per image, then the mean over the images that have such "
          "pixels. Obstacle pixels: true depth more than 20% off the median true depth of their row. Prediction / "
          "truth below 1: placed too near, above 1: too far.</p>\n", f);
}

static void pose_line(FILE *f, const cJSON *j)
{
    const cJSON *p = cJSON_GetObjectItemCaseSensitive(j, "pose");
    const cJSON *ate = cJSON_GetObjectItemCaseSensitive(p, "ate");
    const cJSON *sn = cJSON_GetObjectItemCaseSensitive(p, "snippets");
    if (!cJSON_IsNumber(ate)) return;
    fprintf(f, "<p>Pose: ATE %.4f m", ate->valuedouble);
    if (cJSON_IsNumber(sn)) fprintf(f, " over %d snippets", sn->valueint);
    fputs(".</p>\n", f);
}

static void export_sizes(FILE *f, const char *dir)
{
    DIR *d = dir ? opendir(dir) : NULL;
    if (!d) {
        fputs("<p class=\"note\">Not exported.</p>\n", f);
        return;
    }
    fputs("<table><caption>Exported files</caption><thead><tr><th>file</th><th>size</th></tr></thead><tbody>\n", f);
    struct dirent *e;
    while ((e = readdir(d))) {
        char path[4096];
        struct stat st;
        snprintf(path, sizeof path, "%s/%s", dir, e->d_name);
        if (e->d_name[0] == '.' || stat(path, &st) || !S_ISREG(st.st_mode)) continue;
        fputs("<tr><td>", f);
        nj_html_text(f, e->d_name);
        fprintf(f, "</td><td>%.1f kB</td></tr>\n", (double)st.st_size / 1000.0);
    }
    closedir(d);
    fputs("</tbody></table>\n", f);
}

void nj_report_metrics(FILE *f, const char *metrics_path, const char *export_dir)
{
    fputs("<section id=\"metrics\"><h2>Final metrics</h2>\n", f);
    cJSON *j = read_json(metrics_path);
    if (cJSON_IsObject(j)) {
        depth_table(f, j);
        region_table(f, j);
        pose_line(f, j);
    } else {
        fputs("<p class=\"note\">No metrics: run <code>nightjar eval --out RUN_DIR/metrics.json</code> "
              "(or give <code>--metrics FILE</code>).</p>\n", f);
    }
    cJSON_Delete(j);
    export_sizes(f, export_dir);
    fputs("</section>\n", f);
}

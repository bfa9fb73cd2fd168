/* train/report/report_map.c — the report's map section: the top-down picture
 * `nightjar map` wrote (embedded byte for byte as a data URI, so the page
 * stays self-contained) and the figures of its summary. */
#include "train/report/report_parts.h"
#include "train/map/map.h"
#include <cjson/cJSON.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

static double num(const cJSON *j, const char *key)
{
    const cJSON *v = cJSON_GetObjectItemCaseSensitive(j, key);
    return cJSON_IsNumber(v) ? v->valuedouble : NAN;
}

static const char *str(const cJSON *j, const char *key)
{
    const cJSON *v = cJSON_GetObjectItemCaseSensitive(j, key);
    return cJSON_IsString(v) ? v->valuestring : "?";
}

static void caption(FILE *f, const cJSON *j)
{
    fputs("<figcaption>Sequence ", f);
    nj_html_text(f, str(j, "sequence"));
    fputs(" from ", f);
    nj_html_text(f, str(j, "source"));
    fprintf(f, ": %.0f frames, scale from ", num(j, "frames"));
    nj_html_text(f, str(j, "scaled_by"));
    fprintf(f, " (x%.4g); voxel %g, truncation %g; %.0f blocks (%.1f MiB), %.0f triangles; path %.2f",
            num(j, "scale"), num(j, "voxel"), num(j, "truncation"), num(j, "blocks"), num(j, "memory_mb"),
            num(j, "triangles"), num(j, "path_length"));
    if (isfinite(num(j, "drift_per_10m")))
        fprintf(f, "; drift %.3f per 10 m against the recorded poses", num(j, "drift_per_10m"));
    fputs(". Seen from above: height in the " NJ_COLORMAP_NAME " map (low = dark), the path from the disc (start) to the "
          "square (end). Doubled walls, bent ground and smeared obstacles mean scale drift, rotation error or bad "
          "depth. Depth from a learned model is an estimate, not a certified safety sensor.</figcaption>\n", f);
}

void nj_report_map(FILE *f, const char *map_dir)
{
    char png[4200], js[4200];
    snprintf(png, sizeof png, "%s/%s", map_dir, NJ_MAP_PICTURE);
    snprintf(js, sizeof js, "%s/%s", map_dir, NJ_MAP_SUMMARY);
    size_t n = 0;
    unsigned char *p = (unsigned char *)nj_report_slurp(png, &n);
    if (!p) return;
    char *text = nj_report_slurp(js, NULL);
    cJSON *j = text ? cJSON_Parse(text) : NULL;
    free(text);
    fputs("<section id=\"map\"><h2>Map</h2><figure><img alt=\"top-down map\" style=\"max-width:100%\" src=\"", f);
    nj_data_uri(f, "image/png", p, n);
    fputs("\">\n", f);
    if (j) caption(f, j);
    fputs("</figure></section>\n", f);
    cJSON_Delete(j);
    free(p);
}

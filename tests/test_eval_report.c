/* tests/test_eval_report.c — the report's metric section (train/report/report_metrics.c)
 * shows eval's row-layout oracle and per-region figures when metrics.json has
 * them, and is unchanged for a file without them.
 *
 * Source of truth: hand-written metrics.json files with distinct values; the
 * HTML must carry each value (4 decimals) in the right row and column order. */
#include "tests/check.h"
#include "tests/test_data_util.h"
#include "train/report/report_parts.h"
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static const char *NEW_JSON =
    "{\"absrel\":0.25,\"sqrel\":0.5,\"rmse\":4.25,\"rmse_log\":0.3,\"delta_1_25\":0.8,\"delta_1_25_2\":0.9,"
    "\"delta_1_25_3\":0.95,\"pixels\":1000,\"images\":3,\"split\":\"test\","
    "\"baseline_constant\":{\"absrel\":0.6543,\"rmse\":7.5},\"baseline_untrained\":{\"absrel\":0.4321,\"rmse\":6.5},"
    "\"baseline_row_layout_oracle\":{\"absrel\":0.1831,\"rmse\":3.125},"
    "\"by_depth_band\":[{\"from_m\":0,\"to_m\":3,\"pixels\":400,\"images\":3,"
    "\"model\":{\"absrel\":0.1111,\"delta_1_25\":0.7777,\"ratio_median\":0.75},"
    "\"baseline_constant\":{\"absrel\":0.2222},\"baseline_untrained\":{\"absrel\":0.3333},"
    "\"baseline_row_layout_oracle\":{\"absrel\":0.4444}},"
    "{\"from_m\":20,\"to_m\":80,\"pixels\":0,\"images\":0,\"model\":{\"absrel\":null,\"delta_1_25\":null,"
    "\"ratio_median\":null}}],"
    "\"obstacle_pixels\":{\"pixels\":120,\"images\":2,\"model\":{\"absrel\":0.3456,\"delta_1_25\":0.5,"
    "\"ratio_median\":1.125},\"baseline_row_layout_oracle\":{\"absrel\":0.6612}},"
    "\"lead_vehicle_pixels\":{\"pixels\":50,\"images\":1,\"sequences\":1,\"model\":{\"absrel\":8.66,"
    "\"delta_1_25\":0,\"ratio_median\":10.5}}}\n";

static const char *OLD_JSON =
    "{\"absrel\":0.25,\"sqrel\":0.5,\"rmse\":4.25,\"rmse_log\":0.3,\"delta_1_25\":0.8,\"delta_1_25_2\":0.9,"
    "\"delta_1_25_3\":0.95,\"images\":3,\"split\":\"test\",\"baseline_constant\":{\"absrel\":0.6543},"
    "\"baseline_untrained\":{\"absrel\":0.4321}}\n";

/* The metric section for a metrics.json with `text`, as a string. */
static char *section(const char *dir, const char *text)
{
    char path[256];
    snprintf(path, sizeof path, "%s/metrics.json", dir);
    FILE *f = fopen(path, "w");
    if (!f) return NULL;
    fputs(text, f);
    fclose(f);
    char *buf = NULL;
    size_t len = 0;
    FILE *m = open_memstream(&buf, &len);
    if (!m) return NULL;
    nj_report_metrics(m, path, NULL);
    fclose(m);
    return buf;
}

int main(void)
{
    char dir[64];
    if (!check(tdu_tmpdir(dir, sizeof dir) == 0, "scratch folder", "mkdtemp failed")) return test_exit();
    char *h = section(dir, NEW_JSON);
    check(h && strstr(h, "<th>untrained baseline</th><th>row-layout oracle</th>") &&
              strstr(h, "<td>0.2500</td><td>0.6543</td><td>0.4321</td><td>0.1831</td>") &&
              strstr(h, "<td>4.2500</td><td>7.5000</td><td>6.5000</td><td>3.1250</td>"),
          "depth table: the oracle column after the baselines", "%s", h ? h : "no output");
    check(h && strstr(h, "<caption>Depth by region</caption>") &&
              strstr(h, "<tr><th>true depth 0–3 m</th><td>400 in 3</td><td>0.1111</td><td>0.7777</td><td>0.7500</td>"
                        "<td>0.2222</td><td>0.3333</td><td>0.4444</td></tr>"),
          "region table: a band row (pixels, model AbsRel, δ, ratio, three baselines)", "row missing");
    check(h && strstr(h, "<tr><th>true depth 20–80 m</th><td>0 in 0</td><td>–</td><td>–</td><td>–</td>"),
          "region table: an empty band shows dashes", "row missing");
    check(h && strstr(h, "<tr><th>obstacle pixels</th><td>120 in 2</td><td>0.3456</td><td>0.5000</td><td>1.1250</td>"
                         "<td>–</td><td>–</td><td>0.6612</td></tr>"),
          "region table: the obstacle row", "row missing");
    check(h && strstr(h, "<tr><th>lead vehicle</th><td>50 in 1</td><td>8.6600</td><td>0.0000</td><td>10.5000</td>"),
          "region table: the lead-vehicle row", "row missing");
    free(h);
    h = section(dir, OLD_JSON);
    check(h && strstr(h, "<th>untrained baseline</th></tr>") && strstr(h, "<td>0.2500</td><td>0.6543</td><td>0.4321</td></tr>") &&
              !strstr(h, "row-layout") && !strstr(h, "Depth by region"),
          "a metrics.json without the new keys gives the table as before", "%s", h ? h : "no output");
    free(h);
    tdu_rmtree(dir);
    return test_exit();
}

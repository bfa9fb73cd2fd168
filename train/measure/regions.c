/* train/measure/regions.c — `nightjar eval` per depth band, on obstacle pixels
 * and on lead-vehicle pixels: accumulation over images, the compact table and
 * the metrics.json entries (see regions.h). */
#include "train/measure/regions.h"
#include <math.h>
#include <stdio.h>
#include <string.h>

void nj_eval_regions_init(nj_eval_regions *r, float depth_cap)
{
    memset(r, 0, sizeof *r);
    r->depth_cap = depth_cap;
    r->nbands = nj_depth_bands(depth_cap, r->from, r->to);
    for (int m = 0; m < NJ_EVAL_METHODS; m++)
        for (int g = 0; g < NJ_REGIONS; g++) nj_region_acc_init(&r->acc[m][g]);
}

static void add_region(nj_eval_regions *r, int region, const float *gsel, const float *const *psel,
                       const double *scale, size_t k, const float *flag, float lo, float hi, float *scratch)
{
    for (int m = 0; m < NJ_EVAL_METHODS; m++) {
        nj_region_metrics rm;
        if (nj_region_metrics_compute(gsel, psel[m], flag, k, lo, hi, scale[m], NJ_EVAL_DEPTH_FLOOR, r->depth_cap,
                                      scratch, &rm) == 0)
            nj_region_acc_add(&r->acc[m][region], &rm);
    }
}

void nj_eval_regions_add(nj_eval_regions *r, const float *gsel, const float *const *psel, const double *scale,
                         size_t k, const float *obstacle, const float *lead, float *scratch)
{
    for (int b = 0; b < r->nbands; b++)
        add_region(r, b, gsel, psel, scale, k, NULL, r->from[b], r->to[b], scratch);
    add_region(r, NJ_REGION_OBSTACLE, gsel, psel, scale, k, obstacle, 0, INFINITY, scratch);
    if (lead) add_region(r, NJ_REGION_LEAD, gsel, psel, scale, k, lead, 0, INFINITY, scratch);
}

/* ---- table ------------------------------------------------------------------ */

static void print_row(const nj_eval_regions *r, const char *label, int region)
{
    const nj_region_acc *a0 = &r->acc[0][region];
    printf("  %-14s %9ld %5d", label, a0->pixels, a0->images);
    for (int m = 0; m < NJ_EVAL_METHODS; m++) {
        nj_region_metrics v;
        nj_region_acc_result(&r->acc[m][region], &v);
        if (r->acc[m][region].images) printf("  %6.3f %5.3f %5.2f", v.absrel, v.delta1, v.ratio);
        else printf("  %18s", "n/a");
    }
    printf("\n");
}

void nj_eval_regions_print(const nj_eval_regions *r, const char *const *names)
{
    printf("\nby region: AbsRel, d<1.25 and median(scaled prediction / truth) of each method\n");
    printf("  %-14s %9s %5s", "region", "pixels", "imgs");
    for (int m = 0; m < NJ_EVAL_METHODS; m++) printf(m + 1 < NJ_EVAL_METHODS ? "  %-18s" : "  %s", names[m]);
    printf("\n");
    for (int b = 0; b < r->nbands; b++) {
        char label[48];
        snprintf(label, sizeof label, "%g-%g m", r->from[b], r->to[b]);
        print_row(r, label, b);
    }
    print_row(r, "obstacles", NJ_REGION_OBSTACLE);
    if (r->lead_sequences) print_row(r, "lead vehicle", NJ_REGION_LEAD);
    printf("  (bands of the true depth; obstacles: true depth more than %g%% off its row's median)\n",
           100 * NJ_OBSTACLE_REL);
}

/* ---- metrics.json ----------------------------------------------------------- */

static void add_number_or_null(cJSON *o, const char *key, int have, double v)
{
    if (have) cJSON_AddNumberToObject(o, key, v);
    else cJSON_AddNullToObject(o, key);
}

static void region_json(const nj_eval_regions *r, cJSON *o, int region, const char *const *keys)
{
    cJSON_AddNumberToObject(o, "pixels", (double)r->acc[0][region].pixels);
    cJSON_AddNumberToObject(o, "images", r->acc[0][region].images);
    for (int m = 0; m < NJ_EVAL_METHODS; m++) {
        nj_region_metrics v;
        nj_region_acc_result(&r->acc[m][region], &v);
        int have = r->acc[m][region].images > 0;
        cJSON *e = cJSON_AddObjectToObject(o, keys[m]);
        add_number_or_null(e, "absrel", have, v.absrel);
        add_number_or_null(e, "delta_1_25", have, v.delta1);
        add_number_or_null(e, "ratio_median", have, v.ratio);
    }
}

void nj_eval_regions_json(const nj_eval_regions *r, cJSON *root, const char *const *keys)
{
    cJSON *bands = cJSON_AddArrayToObject(root, "by_depth_band");
    for (int b = 0; bands && b < r->nbands; b++) {
        cJSON *e = cJSON_CreateObject();
        if (!e) break;
        cJSON_AddItemToArray(bands, e);
        cJSON_AddNumberToObject(e, "from_m", r->from[b]);
        cJSON_AddNumberToObject(e, "to_m", r->to[b]);
        region_json(r, e, b, keys);
    }
    cJSON *o = cJSON_AddObjectToObject(root, "obstacle_pixels");
    if (o) {
        char rule[128];
        snprintf(rule, sizeof rule, "true depth more than %g%% off the median true depth of its image row",
                 100 * NJ_OBSTACLE_REL);
        cJSON_AddStringToObject(o, "rule", rule);
        region_json(r, o, NJ_REGION_OBSTACLE, keys);
    }
    if (r->lead_sequences) {
        cJSON *l = cJSON_AddObjectToObject(root, "lead_vehicle_pixels");
        if (l) {
            cJSON_AddNumberToObject(l, "sequences", r->lead_sequences);
            region_json(r, l, NJ_REGION_LEAD, keys);
        }
    }
}

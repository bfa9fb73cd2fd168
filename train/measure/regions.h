/* train/measure/regions.h — the figures of `nightjar eval` beyond the all-pixel
 * table (internal to eval*.c): AbsRel, δ<1.25 and the median of scaled
 * prediction / truth per band of true depth, on obstacle pixels and on
 * lead-vehicle pixels, for every method (definitions in train/measure/metrics.h),
 * printed compactly and written into metrics.json. */
#ifndef NJ_EVAL_REGIONS_H
#define NJ_EVAL_REGIONS_H
#include "train/measure/metrics.h"
#include <cjson/cJSON.h>

/* model, constant depth, untrained network, row-layout oracle (this order) */
#define NJ_EVAL_METHODS 4
enum { NJ_REGION_OBSTACLE = NJ_DEPTH_BANDS, NJ_REGION_LEAD, NJ_REGIONS };

typedef struct nj_eval_regions {
    float depth_cap;
    int nbands;
    float from[NJ_DEPTH_BANDS], to[NJ_DEPTH_BANDS];
    int lead_sequences;        /* sequences of the split with lead-vehicle masks */
    nj_region_acc acc[NJ_EVAL_METHODS][NJ_REGIONS];
} nj_eval_regions;

void nj_eval_regions_init(nj_eval_regions *r, float depth_cap);
/* One image: the k selected ground-truth depths gsel, each method's selected
 * prediction psel[m] and scale factor scale[m], the selected obstacle flags
 * and lead-vehicle flags (NULL when the image has no mask).  `scratch` needs
 * room for k floats. */
void nj_eval_regions_add(nj_eval_regions *r, const float *gsel, const float *const *psel, const double *scale,
                         size_t k, const float *obstacle, const float *lead, float *scratch);
/* The compact table on stdout; names[m]: the methods' printed names. */
void nj_eval_regions_print(const nj_eval_regions *r, const char *const *names);
/* "by_depth_band", "obstacle_pixels" and (with masks) "lead_vehicle_pixels"
 * into root; keys[m]: the methods' keys inside each entry:
 *   "by_depth_band": [{"from_m": 0, "to_m": 3, "pixels": P, "images": I,
 *                      "model": {"absrel", "delta_1_25", "ratio_median"},
 *                      "baseline_constant": {...}, ...}, ...]
 *   "obstacle_pixels": {"rule": "...", "pixels", "images", METHOD: {...}}
 *   "lead_vehicle_pixels": {"sequences", "pixels", "images", METHOD: {...}}
 * pixels and images are the same for every method; a region without pixels
 * has null metrics. */
void nj_eval_regions_json(const nj_eval_regions *r, cJSON *root, const char *const *keys);

#endif

/* losses/view_synthesis.h — the self-supervised training signal.
 *
 * For each disparity scale s (0 = full resolution): upsample the disparity to
 * the input size, convert to depth (in the input's depth range), warp every
 * source frame into the target view with its pose, and take the per-pixel
 * photometric error.  Then:
 *  - per-pixel minimum over sources (Godard et al. 2019) — with each_offset,
 *    within each group of sources, the groups' terms averaged;
 *  - auto-masking (Godard et al. 2019): the un-warped sources' errors, plus a
 *    tiny random tie-break, compete; pixels where an un-warped source is at
 *    least as good (static relative to the camera) contribute nothing;
 *    pixels whose warped point leaves every source view are excluded too;
 *  - with gain_match, every source (warped and un-warped alike) is first
 *    multiplied by one gain per item, mean(target)/mean(source) over all
 *    pixels and channels, clamped to [1/GAIN_LIMIT, GAIN_LIMIT]: a global
 *    exposure change between frames is not read as geometry.  A gain-only
 *    form of the affine brightness model of Yang et al. 2020 (D3VO), fitted in
 *    closed form instead of predicted; the closed-form fit is our choice;
 *  - edge-aware smoothness of the scale's own disparity against the image
 *    downsampled to that scale, weight halved per scale (Godard et al. 2017).
 * total = mean over scales of (photometric_s + smooth_weight/2^s · smooth_s).
 */
#ifndef NJ_VIEW_SYNTHESIS_H
#define NJ_VIEW_SYNTHESIS_H
#include "nn/graph.h"
#include "nn/rng.h"
#include "nn/geom/camera.h"
#include "losses/depth.h"

#define NJ_MAX_SOURCES 4
#define NJ_MAX_SCALES 4

typedef struct nj_vs_config {
    float alpha;           /* SSIM weight in the photometric error, 0.85 */
    float smooth_weight;   /* 1e-3 */
    int automask;          /* 1: auto-mask static pixels */
    float tie_break;       /* std-dev of the identity errors' noise, 1e-5; 0 = none */
    float saturation_guard;/* weight of the saturation guard (below), 0 = none */
    int gain_match;        /* 1: scale each source by mean(target)/mean(source) first */
    int automask_widest;   /* 1: the auto-mask's un-warped error comes from the sources of
                              the widest frame offset only (nj_vs_input.mask_skip, set by
                              the training step): far structure that barely moves between
                              neighbouring frames does move there, and is not masked */
    float arc_motion;      /* weight of the predicted motions' arc slip (losses/pose.h
                              nj_arc_slip), added by the training step; 0 = none */
    int each_offset;       /* 1: the per-pixel minimum and the auto-mask are taken within
                              each group of sources (nj_vs_input.group: a frame offset's
                              two sources, the stereo partner), and the photometric term
                              is the mean over every used (pixel, group) term, so every
                              offset must explain the pixel; mask_skip is not used.
                              With one minimum over all sources an offset-2 source with
                              a wrong motion is not chosen where an offset-1 source
                              fits, and nothing teaches the pose net the frame gap */
} nj_vs_config;

typedef struct nj_vs_input {
    nj_tensor *target;                      /* N×3×H×W, values in [0, 1] */
    nj_tensor *sources[NJ_MAX_SOURCES];     /* N×3×H×W */
    nj_tensor *poses[NJ_MAX_SOURCES];       /* N×1×3×4, target → source */
    int nsources;
    unsigned mask_skip;                     /* bit s: source s is left out of the auto-mask's
                                               un-warped minimum (never all of them); 0 = none */
    unsigned char group[NJ_MAX_SOURCES];    /* with cfg.each_offset: source s's group,
                                               0, 1, ... (below NJ_MAX_SOURCES) */
    const nj_camera *cams;                  /* N intrinsics at H×W */
    nj_tensor *disp[NJ_MAX_SCALES];         /* sigmoid outputs, N×1×(H/2^s)×(W/2^s) */
    nj_depth_range depth_range;             /* what the disparities mean (the model's
                                               depth range, losses/depth.h) */
    int nscales;
    nj_rng *rng;                            /* tie-break noise; NULL = none */
} nj_vs_input;

typedef struct nj_vs_output {
    nj_tensor *total;          /* 1×1×1×1, differentiable */
    float photometric;         /* mean over scales, for logging */
    float smoothness;          /* mean over scales of the weighted term */
    nj_tensor *automask;       /* N×1×H×W at scale 0: 1 = pixel used (each_offset: by any group) */
    nj_tensor *error;          /* N×1×H×W minimum photometric error at scale 0 */
    float mask_fraction;       /* share of scale-0 pixels used (each_offset: of the
                                  (pixel, group) terms) */
} nj_vs_output;

void nj_vs_config_default(nj_vs_config *cfg);
/* Returns 0, or -1 with the graph's error set. */
int nj_view_synthesis_loss(nj_graph *g, const nj_vs_config *cfg,
                           const nj_vs_input *in, nj_vs_output *out);

#endif

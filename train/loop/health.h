/* train/loop/health.h — watches a run for the known ways self-supervised depth
 * training fails, and says so with a one-line hint:
 *  - disparity saturated at a range bound over most pixels;
 *  - predicted translation collapsing towards zero (the pose net gave up,
 *    so the depth net gets no geometric signal);
 *  - the auto-mask excluding more than 90% of pixels (nothing moves relative
 *    to the camera: stopped vehicle, or frames too close together);
 *  - the loss flat over a long stretch;
 *  - depth drifting towards the far bound (below).
 * Each of the first four must persist over a window of logged steps before it
 * is reported, and is reported once until it clears.
 *
 * The drift alarm needs no ground truth.  On small data some model seeds
 * learn depth whose lower image half (the ground just in front of the
 * camera) goes out towards the far bound while the upper half comes near:
 * the depth order of the scene inverts, and the photometric loss keeps
 * falling all the same (DEVELOPERS.md, "Training recipe").  The figure is
 * `inverted`: per image, the share of lower-half pixels predicted farther
 * than the median depth of the upper half, averaged over the batch's
 * scale-0 disparity (it does not depend on the monocular scale).  The rule:
 * from step NJ_HEALTH_DRIFT_FROM on, when more than half of the last
 * NJ_HEALTH_WINDOW logged values exceed NJ_HEALTH_DRIFT_INVERTED (their
 * median lies above it).  The median ignores single-batch spikes; the first
 * steps are left out because an untrained net's depth is a near-uniform
 * haze with no order.  It is printed and logged ({"type":"health"}) once per
 * run; "drifting" stays in the step lines' "health" summary while it holds.
 * Step lines carry the figures as "inverted", "far_half" (share beyond half
 * of the depth range's far end) and "depth_p50" (median depth, m).  It
 * assumes a forward-looking camera on a
 * ground vehicle with the ground in the lower half of the (upright) image,
 * which is what nightjar trains on.
 * Measured (tests/test_health.c replays the recorded sequences), e2e data
 * (160×96, logging every 10 steps): the median of 20 stays at most 0.11 for
 * the healthy seed 2 (single batches reach 0.53) and at most 0.09 and 0.13
 * for seeds 3 and 4 with head_init 0.1, which learn; the drifting seeds 3
 * and 4 (default head_init 0.01) sit at 0.6–0.85 once drifted.  The alarm
 * fires at step 300 for seed 3 (validation AbsRel by ground truth then 0.88,
 * seed 2's 0.82: ground truth tells them apart only at step 400, 1.02 vs
 * 0.58; 2.87 at step 900) and at step 340 for seed 4 (1.14 at step 300,
 * 4.76 at 900).  With the near-duplicate rule of commit 06908bd the same
 * seeds drift again and the alarm fires at steps 460 (seed 3: validation
 * AbsRel 0.53 at step 500, 0.98 at 600, 1.27 at 900) and 360 (seed 4: 0.77
 * at step 400, 2.53 at 900); seed 2 learns (0.26) and stays at most 0.03.
 * Short 96×64 runs (tests/test_drift_alarm.c, logging every 5): healthy at
 * most 0.011, the drifting one (pose_scale 0.1) 0.63–0.66, firing at step
 * 195, its first chance.  Threshold 0.4: 3× the largest healthy median
 * (0.13); drifted runs settle at 0.63–0.85.  0.2 also separates every
 * recorded run and fires 70–160 steps earlier on the 06908bd seeds (300,
 * 290), but with 1.5× margin on the healthy side. */
#ifndef NJ_HEALTH_H
#define NJ_HEALTH_H
#include "losses/depth.h"

#define NJ_HEALTH_WINDOW 20
/* The drift alarm's threshold on the windowed median of `inverted`, and the
 * first step it looks at. */
#define NJ_HEALTH_DRIFT_INVERTED 0.4f
#define NJ_HEALTH_DRIFT_FROM 100

enum {
    NJ_HEALTH_SATURATED = 1,
    NJ_HEALTH_NO_TRANSLATION = 2,
    NJ_HEALTH_MASKED = 4,
    NJ_HEALTH_FLAT = 8,
    NJ_HEALTH_DRIFT = 16
};
#define NJ_HEALTH_LAST NJ_HEALTH_DRIFT

/* Figures of one step's scale-0 disparity map (no ground truth needed). */
typedef struct nj_disp_figures {
    float inverted;    /* share of lower-half pixels farther than the upper half's median depth */
    float far_half;    /* share of pixels beyond half of the range's far end */
    float depth_p50;   /* median depth (m) */
} nj_disp_figures;

/* Figures of a sigmoid disparity tensor d (N×1×H×W) read as depth in range r
 * (the losses' mapping, losses/depth.h). */
void nj_health_disp_figures(const float *d, int n, int h, int w, nj_depth_range r, nj_disp_figures *f);

typedef struct nj_health {
    int streak[4];          /* consecutive observations per condition */
    int active;             /* bit set of conditions currently reported */
    int reported;           /* conditions reported once per run (the drift alarm) */
    double loss_hist[NJ_HEALTH_WINDOW * 4];
    int nloss;
    float inv_hist[NJ_HEALTH_WINDOW];   /* last `inverted` values from NJ_HEALTH_DRIFT_FROM on */
    int ninv;
    nj_disp_figures disp;   /* of the last observation (logged with its step) */
    int have_disp;
    int video;              /* translation only matters with a pose net */
} nj_health;

void nj_health_init(nj_health *h, int video);
/* Feeds one logged step.  disp: that step's disparity figures, or NULL.
 * Returns the bits of conditions that became active now (to print once);
 * nj_health_message gives their text. */
int nj_health_observe(nj_health *h, long step, float loss, float saturated,
                      float translation, float mask_fraction, const nj_disp_figures *disp);
const char *nj_health_message(int condition);
/* Short comma-separated list of active conditions ("ok" if none). */
const char *nj_health_summary(const nj_health *h, char *buf, int len);

#endif

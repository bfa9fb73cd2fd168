/* train/health.h — watches a run for the known ways self-supervised depth
 * training fails, and says so with a one-line hint:
 *  - disparity saturated at a range bound over most pixels;
 *  - predicted translation collapsing towards zero (the pose net gave up,
 *    so the depth net gets no geometric signal);
 *  - the auto-mask excluding more than 90% of pixels (nothing moves relative
 *    to the camera: stopped vehicle, or frames too close together);
 *  - the loss flat over a long stretch.
 * Each condition must persist over a window of logged steps before it is
 * reported, and is reported once until it clears. */
#ifndef NJ_HEALTH_H
#define NJ_HEALTH_H

#define NJ_HEALTH_WINDOW 20

enum {
    NJ_HEALTH_SATURATED = 1,
    NJ_HEALTH_NO_TRANSLATION = 2,
    NJ_HEALTH_MASKED = 4,
    NJ_HEALTH_FLAT = 8
};

typedef struct nj_health {
    int streak[4];          /* consecutive observations per condition */
    int active;             /* bit set of conditions currently reported */
    double loss_hist[NJ_HEALTH_WINDOW * 4];
    int nloss;
    int video;              /* translation only matters with a pose net */
} nj_health;

void nj_health_init(nj_health *h, int video);
/* Feeds one logged step.  Returns the bits of conditions that became active
 * now (to print once); nj_health_message gives their text. */
int nj_health_observe(nj_health *h, long step, float loss, float saturated,
                      float translation, float mask_fraction);
const char *nj_health_message(int condition);
/* Short comma-separated list of active conditions ("ok" if none). */
const char *nj_health_summary(const nj_health *h, char *buf, int len);

#endif

/* train/health.c — failure-mode detection for training runs (see health.h). */
#include "train/health.h"
#include <math.h>
#include <stdio.h>
#include <string.h>

#define LOSS_HIST (NJ_HEALTH_WINDOW * 4)

void nj_health_init(nj_health *h, int video)
{
    memset(h, 0, sizeof *h);
    h->video = video;
}

/* Relative improvement of the mean loss between the older and newer half of
 * the history: flat when below 0.2%. */
static int loss_flat(const nj_health *h)
{
    if (h->nloss < LOSS_HIST) return 0;
    double old = 0, recent = 0;
    for (int i = 0; i < LOSS_HIST / 2; i++) {
        old += h->loss_hist[i];
        recent += h->loss_hist[LOSS_HIST / 2 + i];
    }
    return fabs(old - recent) < 0.002 * fabs(old);
}

static int update(nj_health *h, int idx, int bit, int cond)
{
    h->streak[idx] = cond ? h->streak[idx] + 1 : 0;
    if (!cond) { h->active &= ~bit; return 0; }
    if (h->streak[idx] >= NJ_HEALTH_WINDOW && !(h->active & bit)) {
        h->active |= bit;
        return bit;
    }
    return 0;
}

int nj_health_observe(nj_health *h, long step, float loss, float saturated,
                      float translation, float mask_fraction)
{
    (void)step;
    if (h->nloss == LOSS_HIST) {
        memmove(h->loss_hist, h->loss_hist + 1, sizeof(double) * (LOSS_HIST - 1));
        h->nloss--;
    }
    h->loss_hist[h->nloss++] = loss;
    int fired = 0;
    fired |= update(h, 0, NJ_HEALTH_SATURATED, saturated > 0.8f);
    fired |= update(h, 1, NJ_HEALTH_NO_TRANSLATION, h->video && translation < 1e-3f);
    fired |= update(h, 2, NJ_HEALTH_MASKED, mask_fraction < 0.1f);
    fired |= update(h, 3, NJ_HEALTH_FLAT, loss_flat(h));
    return fired;
}

const char *nj_health_message(int condition)
{
    switch (condition) {
    case NJ_HEALTH_SATURATED:
        return "disparity saturated at a range bound on >80% of pixels: check min_depth/max_depth, "
               "lower the learning rate or raise loss.smoothness";
    case NJ_HEALTH_NO_TRANSLATION:
        return "predicted translation collapsed to ~0: the camera may rarely move in this data, or "
               "raise model.pose_scale / frame_offsets";
    case NJ_HEALTH_MASKED:
        return "auto-mask excludes >90% of pixels: frames barely change (stopped vehicle?); "
               "raise data.duplicate_threshold or use larger frame_offsets";
    case NJ_HEALTH_FLAT:
        return "loss flat for a long stretch: the learning rate may be too low, or training has "
               "converged";
    default:
        return "";
    }
}

const char *nj_health_summary(const nj_health *h, char *buf, int len)
{
    static const char *names[4] = {"saturated", "no-translation", "masked", "flat"};
    buf[0] = 0;
    for (int i = 0; i < 4; i++)
        if (h->active & (1 << i))
            snprintf(buf + strlen(buf), (size_t)(len - (int)strlen(buf)), "%s%s", buf[0] ? "," : "", names[i]);
    if (!buf[0]) snprintf(buf, (size_t)len, "ok");
    return buf;
}

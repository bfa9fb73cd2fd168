/* train/loop/health.c — failure-mode detection for training runs (see health.h). */
#include "train/loop/health.h"
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

/* The drift alarm: more than half of the last NJ_HEALTH_WINDOW values of
 * `inverted` (from NJ_HEALTH_DRIFT_FROM on) above the threshold — their
 * median above it.  Reported once per run; active while it holds. */
static int drift(nj_health *h, long step, const nj_disp_figures *disp)
{
    if (!disp || step < NJ_HEALTH_DRIFT_FROM || !(disp->inverted == disp->inverted)) return 0;
    if (h->ninv == NJ_HEALTH_WINDOW) {
        memmove(h->inv_hist, h->inv_hist + 1, sizeof(float) * (NJ_HEALTH_WINDOW - 1));
        h->ninv--;
    }
    h->inv_hist[h->ninv++] = disp->inverted;
    int above = 0;
    for (int i = 0; i < h->ninv; i++) above += h->inv_hist[i] > NJ_HEALTH_DRIFT_INVERTED;
    if (h->ninv < NJ_HEALTH_WINDOW || 2 * above <= NJ_HEALTH_WINDOW) {
        h->active &= ~NJ_HEALTH_DRIFT;
        return 0;
    }
    h->active |= NJ_HEALTH_DRIFT;
    if (h->reported & NJ_HEALTH_DRIFT) return 0;
    h->reported |= NJ_HEALTH_DRIFT;
    return NJ_HEALTH_DRIFT;
}

int nj_health_observe(nj_health *h, long step, float loss, float saturated,
                      float translation, float mask_fraction, const nj_disp_figures *disp)
{
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
    fired |= drift(h, step, disp);
    h->have_disp = disp != NULL;
    if (disp) h->disp = *disp;
    return fired;
}

const char *nj_health_message(int condition)
{
    switch (condition) {
    case NJ_HEALTH_SATURATED:
        return "disparity saturated at a range bound on >80% of pixels: check model.depth_range, "
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
    case NJ_HEALTH_DRIFT:
        return "depth drifting towards the far bound: the ground in the lower image half is predicted "
               "farther than the upper half (depth order inverted) while the loss still falls; runs "
               "measured like this did not recover: restart with another run.seed or model.head_init 0.1";
    default:
        return "";
    }
}

const char *nj_health_summary(const nj_health *h, char *buf, int len)
{
    static const char *names[5] = {"saturated", "no-translation", "masked", "flat", "drifting"};
    buf[0] = 0;
    for (int i = 0; i < 5; i++)
        if (h->active & (1 << i))
            snprintf(buf + strlen(buf), (size_t)(len - (int)strlen(buf)), "%s%s", buf[0] ? "," : "", names[i]);
    if (!buf[0]) snprintf(buf, (size_t)len, "ok");
    return buf;
}

/* Depth histogram bins over log depth (1.35% of depth per bin for 0.1–100 m). */
#define DISP_BINS 512

static int depth_bin(double depth, double lmin, double lspan)
{
    int b = (int)((log(depth) - lmin) / lspan * DISP_BINS);
    return b < 0 ? 0 : b >= DISP_BINS ? DISP_BINS - 1 : b;
}

/* Bin of the median of hist (count values). */
static int median_bin(const long *hist, long count)
{
    long acc = 0;
    for (int b = 0; b < DISP_BINS; b++)
        if ((acc += hist[b]) * 2 >= count) return b;
    return DISP_BINS - 1;
}

/* Per image: the upper half's depths into a histogram, its median bin, then
 * the lower half's pixels in a farther bin (a pixel within the median's
 * 1.35% bin counts as not farther: within 0.011 of NumPy's exact share on
 * the recorded runs' maps from step 100 on, up to 0.07 below it on the
 * near-uniform maps of the first 30 steps, which the alarm skips). */
void nj_health_disp_figures(const float *d, int n, int h, int w, nj_depth_range r, nj_disp_figures *f)
{
    long all[DISP_BINS] = {0}, total = 0, far = 0;
    double lo = 1.0 / r.far, span = 1.0 / r.near - 1.0 / r.far;
    double lmin = log(r.near), lspan = log(r.far) - lmin, inv_sum = 0;
    int images = 0;
    memset(f, 0, sizeof *f);
    for (int i = 0; i < n; i++) {
        long up[DISP_BINS] = {0}, nup = 0, nlow = 0, farther = 0;
        const float *im = d + (size_t)i * h * w;
        for (int pass = 0; pass < 2; pass++) {
            int ub = pass ? median_bin(up, nup) : 0;
            for (int y = pass ? h / 2 : 0; y < (pass ? h : h / 2); y++)
                for (int x = 0; x < w; x++) {
                    double v = im[(size_t)y * w + x];
                    if (!(v == v)) continue;
                    double depth = 1.0 / (lo + span * (v < 0 ? 0 : v > 1 ? 1 : v));
                    int b = depth_bin(depth, lmin, lspan);
                    all[b]++;
                    total++;
                    far += depth > 0.5 * r.far;
                    if (!pass) { up[b]++; nup++; }
                    else { nlow++; farther += b > ub; }
                }
        }
        if (nup && nlow) { inv_sum += (double)farther / nlow; images++; }
    }
    if (!total) return;
    f->inverted = images ? (float)(inv_sum / images) : 0.0f;
    f->far_half = (float)far / total;
    f->depth_p50 = (float)exp(lmin + lspan * (median_bin(all, total) + 0.5) / DISP_BINS);
}

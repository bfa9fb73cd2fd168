/* tests/test_health.c — the training health monitor reports each known
 * failure mode once it persists for a window, stays quiet on a healthy run,
 * and clears when the condition goes away.  Inputs are constructed series
 * with known answers (no outside reference applies). */
#include "tests/check.h"
#include "train/health.h"
#include <stdio.h>
#include <string.h>

/* Feeds `n` observations; returns the OR of all conditions that fired. */
static int feed(nj_health *h, int n, float loss0, float loss_step, float sat, float tr, float kept)
{
    int fired = 0;
    for (int i = 0; i < n; i++)
        fired |= nj_health_observe(h, i, loss0 + loss_step * (float)i, sat, tr, kept);
    return fired;
}

int main(void)
{
    nj_health h;
    char buf[64];
    nj_health_init(&h, 1);
    int f = feed(&h, 200, 0.2f, -0.0005f, 0.05f, 0.05f, 0.7f);
    check(f == 0 && !strcmp(nj_health_summary(&h, buf, sizeof buf), "ok"),
          "healthy run: nothing reported", "fired %d, summary %s", f, buf);

    nj_health_init(&h, 1);
    f = feed(&h, NJ_HEALTH_WINDOW - 1, 0.2f, -0.001f, 0.95f, 0.05f, 0.7f);
    int g = feed(&h, 1, 0.18f, 0, 0.95f, 0.05f, 0.7f);
    check(f == 0 && g == NJ_HEALTH_SATURATED, "saturated disparity reported after a full window, once",
          "before %d, at window %d", f, g);
    g = feed(&h, 10, 0.17f, -0.001f, 0.95f, 0.05f, 0.7f);
    check(g == 0, "a reported condition is not repeated while it lasts", "fired again: %d", g);
    feed(&h, 1, 0.16f, 0, 0.1f, 0.05f, 0.7f);
    check(!(h.active & NJ_HEALTH_SATURATED), "the condition clears when disparity recovers", "active %d", h.active);

    nj_health_init(&h, 1);
    f = feed(&h, 40, 0.2f, -0.001f, 0.05f, 1e-5f, 0.7f);
    check(f == NJ_HEALTH_NO_TRANSLATION, "translation collapsing to ~0 is reported", "fired %d", f);
    nj_health_init(&h, 0);
    f = feed(&h, 40, 0.2f, -0.001f, 0.05f, 0.0f, 0.7f);
    check(f == 0, "no translation check without a pose net (stereo)", "fired %d", f);

    nj_health_init(&h, 1);
    f = feed(&h, 40, 0.2f, -0.001f, 0.05f, 0.05f, 0.05f);
    check(f == NJ_HEALTH_MASKED, "auto-mask excluding >90% of pixels is reported", "fired %d", f);

    nj_health_init(&h, 1);
    f = feed(&h, 200, 0.1f, 0.0f, 0.05f, 0.05f, 0.7f);
    check(f == NJ_HEALTH_FLAT && strstr(nj_health_summary(&h, buf, sizeof buf), "flat"),
          "a flat loss over a long stretch is reported", "fired %d, summary %s", f, buf);
    for (int c = 1; c <= NJ_HEALTH_FLAT; c <<= 1) {
        char name[64];
        snprintf(name, sizeof name, "condition %d has a one-line hint", c);
        check(strlen(nj_health_message(c)) > 20 && !strchr(nj_health_message(c), '\n'),
              name, "'%s'", nj_health_message(c));
    }
    return test_exit();
}

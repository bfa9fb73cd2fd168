/* tests/test_train_loop.c — behaviours of the training loop.
 * Auto-masking that starts at loss.automask_from_step: before that step the
 * run is identical to one without auto-masking, from it on it is not.
 * NaN/Inf recovery, driven by the
 * NJ_TEST_HOOKS=nonfinite=STEP:COUNT hook (nn/testhook.h: the next COUNT losses
 * from STEP on are NaN):
 *  - one or two bad steps are skipped and logged, training goes on;
 *  - three in a row reload the last good checkpoint with a halved learning
 *    rate, logged, and the run finishes with finite weights;
 *  - bad steps that never stop end the run non-zero after a bounded number of
 *    recoveries, without writing final.ckpt. */
#include "tests/check.h"
#include "tests/e2e_support.h"
#include "tests/torch_ref.h"
#include "train/loop/checkpoint.h"
#include <cjson/cJSON.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

static const char *CONFIG =
    "{ \"run\": { \"name\": \"nonfinite\", \"seed\": 3, \"threads\": 2, \"log_every\": 1,\n"
    "           \"validate_every\": 0, \"checkpoint_minutes\": 1000, \"checkpoint_steps\": 5,\n"
    "           \"keep_last\": 3, \"max_steps\": 24 },\n"
    "  \"data\": { \"width\": 64, \"height\": 32, \"batch\": 2, \"frame_offsets\": [1],\n"
    "            \"video\": true, \"duplicate_threshold\": 0 },\n"
    "  \"model\": { \"width\": 0.5, \"stages\": 4 },\n"
    "  \"optim\": { \"lr\": 3e-4, \"warmup_steps\": 4, \"schedule\": \"step\" } }\n";

static char dir[256], cfg[512], data[512];

typedef struct { int nonfinite, step_lines; double lr_at[64]; int recoveries_end; long end_step; } run_log;

/* Reads RUN/log.jsonl: counts non-finite records, the LR per logged step and
 * the end record. */
static int read_log(const char *run, run_log *L)
{
    char path[600];
    snprintf(path, sizeof path, "%s/log.jsonl", run);
    char *text = e2e_slurp(path, NULL);
    if (!text) return -1;
    memset(L, 0, sizeof *L);
    L->recoveries_end = -1;
    for (char *line = strtok(text, "\n"); line; line = strtok(NULL, "\n")) {
        cJSON *j = cJSON_Parse(line);
        const char *type = j ? cJSON_GetStringValue(cJSON_GetObjectItem(j, "type")) : NULL;
        double step = j ? cJSON_GetNumberValue(cJSON_GetObjectItem(j, "step")) : NAN;
        if (type && !strcmp(type, "nonfinite")) L->nonfinite++;
        if (type && !strcmp(type, "step") && step >= 0 && step < 64) {
            L->lr_at[(int)step] = cJSON_GetNumberValue(cJSON_GetObjectItem(j, "lr"));
            L->step_lines++;
        }
        if (type && !strcmp(type, "end")) {
            L->recoveries_end = (int)cJSON_GetNumberValue(cJSON_GetObjectItem(j, "nan_recoveries"));
            L->end_step = (long)step;
        }
        cJSON_Delete(j);
    }
    free(text);
    return 0;
}

/* Runs training with the fault hook; returns the exit status. */
static int run_with_fault(const char *name, const char *fault, char *out, size_t outlen, char **text)
{
    char cmd[2048], log[700];
    snprintf(out, outlen, "%s/%s", dir, name);
    snprintf(log, sizeof log, "%s.log", out);
    snprintf(cmd, sizeof cmd, "NJ_TEST_HOOKS=nonfinite=%s %s train --config %s --data %s --out %s",
             fault, e2e_bin(), cfg, data, out);
    int rc = e2e_run(cmd, log);
    *text = e2e_slurp(log, NULL);
    return rc;
}

static int weights_finite(const char *path)
{
    nj_model m;
    char err[512];
    if (nj_checkpoint_load(path, &m, NULL, NULL, err, sizeof err)) return 0;
    int ok = 1;
    for (int i = 0; i < m.params.count; i++) {
        size_t k = nj_param_numel(m.params.items[i]);
        for (size_t j = 0; j < k; j++) ok &= isfinite(m.params.items[i]->data[j]) != 0;
    }
    nj_model_free(&m);
    return ok;
}

/* "loss", "mask_kept" and "gap" of step line `step` of RUN/log.jsonl (NAN when absent). */
static void step_values(const char *run, int step, double *loss, double *kept, double *gap)
{
    char path[600];
    snprintf(path, sizeof path, "%s/log.jsonl", run);
    *loss = *kept = *gap = NAN;
    char *text = e2e_slurp(path, NULL);
    for (char *line = text ? strtok(text, "\n") : NULL; line; line = strtok(NULL, "\n")) {
        cJSON *j = cJSON_Parse(line);
        const char *type = j ? cJSON_GetStringValue(cJSON_GetObjectItem(j, "type")) : NULL;
        if (type && !strcmp(type, "step") && cJSON_GetNumberValue(cJSON_GetObjectItem(j, "step")) == step) {
            *loss = cJSON_GetNumberValue(cJSON_GetObjectItem(j, "loss"));
            *kept = cJSON_GetNumberValue(cJSON_GetObjectItem(j, "mask_kept"));
            *gap = cJSON_GetNumberValue(cJSON_GetObjectItem(j, "gap"));
        }
        cJSON_Delete(j);
    }
    free(text);
}

/* Same run three times, 10 steps: auto-masking off, on from step 6, and off
 * with frame offsets [1, 2] (the step lines' "gap", step.h). */
static void automask_warmup(void)
{
    char cmd[2048], log[400], runs[3][300], mcfg[300];
    const char *loss_keys[3] = {"\"automask\": false", "\"automask\": true, \"automask_from_step\": 6",
                                "\"automask\": false"};
    for (int i = 0; i < 3; i++) {
        char text[4096], *cut;
        snprintf(text, sizeof text, "%s", CONFIG);
        if (i == 2) {
            char *o = strstr(text, "[1],");
            memmove(o + 6, o + 3, strlen(o + 3) + 1);
            memcpy(o, "[1, 2]", 6);
        }
        cut = strrchr(text, '}');
        snprintf(cut, sizeof text - (size_t)(cut - text), ", \"loss\": { %s } }\n", loss_keys[i]);
        snprintf(mcfg, sizeof mcfg, "%s/mask%d.json", dir, i);
        e2e_write(mcfg, text);
        snprintf(runs[i], sizeof runs[i], "%s/mask%d", dir, i);
        snprintf(log, sizeof log, "%s/mask%d.log", dir, i);
        snprintf(cmd, sizeof cmd, "%s train --config %s --data %s --out %s/mask%d --steps 10", e2e_bin(), mcfg, data, dir, i);
        if (!check(e2e_run(cmd, log) == 0, "auto-mask warm-up run", "config %s, log %s", mcfg, log)) return;
    }
    int same_before = 1, differ_after = 0, gap_one = 0, gap_two = 0;
    for (int step = 1; step <= 10; step++) {
        double l0, k0, l1, k1, g0, g1, l2, k2, g2;
        step_values(runs[0], step, &l0, &k0, &g0);
        step_values(runs[1], step, &l1, &k1, &g1);
        step_values(runs[2], step, &l2, &k2, &g2);
        if (step <= 6) same_before &= l0 == l1 && k0 == k1;
        else differ_after |= k1 < k0;
        gap_one += !isnan(l0) && isnan(g0);
        gap_two += l2 > 0 && g2 > 0 && isfinite(g2);
    }
    check(gap_one == 10 && gap_two == 10, "step lines carry \"gap\" with two frame offsets, not with one",
          "%d of 10 one-offset lines without it, %d of 10 two-offset lines with a positive figure (%s, %s)", gap_one,
          gap_two, runs[0], runs[2]);
    check(same_before, "before automask_from_step the run equals one without auto-masking",
          "steps 1-6 differ (%s, %s)", runs[0], runs[1]);
    check(differ_after, "from automask_from_step on, auto-masking removes pixels",
          "mask_kept not lower in steps 7-10 (%s, %s)", runs[0], runs[1]);
}

static void skipped_steps(void)
{
    char out[512], *text, final[600];
    run_log L;
    int rc = run_with_fault("skip", "7:2", out, sizeof out, &text);
    snprintf(final, sizeof final, "%s/final.ckpt", out);
    int ok = rc == 0 && read_log(out, &L) == 0;
    check(ok && L.nonfinite == 2 && L.recoveries_end == 0 && L.end_step == 24,
          "two NaN losses are skipped and logged; no reload; run completes",
          "exit %d, nonfinite records %d, recoveries %d, end step %ld", rc, ok ? L.nonfinite : -1,
          ok ? L.recoveries_end : -1, ok ? L.end_step : -1);
    check(text && e2e_count(text, "non-finite loss, update skipped") == 2,
          "each skipped update is reported on the terminal", "log:\n%s", text ? text : "");
    free(text);
}

static void recovery(void)
{
    char out[512], *text, final[600];
    run_log L;
    int rc = run_with_fault("recover", "12:3", out, sizeof out, &text);
    snprintf(final, sizeof final, "%s/final.ckpt", out);
    int ok = rc == 0 && read_log(out, &L) == 0;
    check(ok && L.nonfinite == 3 && L.recoveries_end == 1 && L.end_step == 24,
          "three NaN losses in a row: checkpoint reloaded once, run completes",
          "exit %d, nonfinite %d, recoveries %d, end step %ld", rc, ok ? L.nonfinite : -1,
          ok ? L.recoveries_end : -1, ok ? L.end_step : -1);
    check(text && strstr(text, "reloaded the checkpoint of step 10 with the learning rate halved"),
          "the reload names the checkpoint step (last good: step 10) and the halved LR", "log:\n%s",
          text ? text : "");
    /* step schedule: constant LR after the warm-up, so the halving is visible directly */
    check(ok && L.lr_at[20] > 0 && fabs(L.lr_at[20] / L.lr_at[8] - 0.5) < 1e-3,
          "learning rate after the recovery is half the one before", "lr(8) %.6g lr(20) %.6g",
          ok ? L.lr_at[8] : NAN, ok ? L.lr_at[20] : NAN);
    check(weights_finite(final), "final weights after recovery are finite", "%s", final);
    free(text);
}

static void persistent(void)
{
    char out[512], *text, final[600];
    struct stat st;
    int rc = run_with_fault("persist", "6:100000", out, sizeof out, &text);
    snprintf(final, sizeof final, "%s/final.ckpt", out);
    check(rc != 0 && text && strstr(text, "non-finite steps persist after"),
          "NaN losses that never stop end the run non-zero with a message", "exit %d, log:\n%s", rc,
          text ? text : "");
    check(stat(final, &st) != 0, "no final.ckpt is written by a run that gave up on NaNs", "%s exists", final);
    char good[600];
    snprintf(good, sizeof good, "%s/step-00000005.ckpt", out);
    check(weights_finite(good), "the last good checkpoint stays loadable and finite", "%s", good);
    free(text);
}

int main(void)
{
    if (!check(e2e_have_binary(), "./nightjar is built", "run from the repository root after make")) return test_exit();
    if (ref_mkdtemp(dir, sizeof dir, "loop")) { check(0, "temp folder", "%s", dir); return test_exit(); }
    char cmd[2048], log[600];
    snprintf(cfg, sizeof cfg, "%s/nonfinite.json", dir);
    snprintf(data, sizeof data, "%s/data/dataset.json", dir);
    e2e_write(cfg, CONFIG);
    snprintf(cmd, sizeof cmd, "%s synth --out %s/data --seed 4 --sequences 2 --frames 10 --size 96x64", e2e_bin(), dir);
    snprintf(log, sizeof log, "%s/synth.txt", dir);
    if (check(e2e_run(cmd, log) == 0, "synth renders the data", "see %s", log)) {
        automask_warmup();
        skipped_steps();
        recovery();
        persistent();
    }
    if (!test_failures()) ref_rmtree(dir);
    else printf("# kept %s for inspection\n", dir);
    return test_exit();
}

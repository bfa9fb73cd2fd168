/* tests/test_run_files.c — what a training run leaves in its folder, and
 * what it takes from another run, on tiny runs (tests/train_runs.h: 64x32
 * synthetic data, a 0.25-wide model, one thread; the runs go two at a time):
 *  - best.ckpt is the checkpoint of the best validation: the step it records
 *    is the step of the lowest validation photometric loss in log.jsonl (read
 *    here), its stored best value is that loss, and its weights equal the
 *    numbered checkpoint of that step; the run is set up so that the best
 *    validation is neither the first nor the last one (so "save at every
 *    validation" and "save once" both fail);
 *  - keep_last N: of the numbered checkpoints only the newest N remain, and
 *    best.ckpt and final.ckpt are kept;
 *  - train --init RUN/final.ckpt starts from that checkpoint's weights: one
 *    step whose learning rate is 0 (the first warm-up step) leaves every
 *    parameter bit for bit as in the file, with another seed (whose own
 *    initial weights differ from the file's); batch-norm statistics move by
 *    the (tiny, configured) momentum only;
 *  - optim.freeze_encoder: three steps from that checkpoint leave every
 *    depth-encoder parameter bit for bit unchanged while the decoder's and
 *    the pose net's change. */
#include "tests/check.h"
#include "tests/e2e_support.h"
#include "tests/run_support.h"
#include "tests/torch_ref.h"
#include "tests/train_runs.h"
#include "train/loop/checkpoint.h"
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define GUARD 600.0   /* hang guard for each run, seconds (never reached by a working build) */

static char dir[256], data[512];

/* Max |a − b| over the parameters of group `group` (−1: every parameter;
 * −2: the batch-norm buffers) of two checkpoints; INFINITY with err when
 * either cannot be loaded or their tensors differ in name or size. */
static double diff_group(const char *a, const char *b, int group, char *err, size_t len)
{
    nj_model ma, mb;
    if (nj_checkpoint_load(a, &ma, NULL, NULL, err, len)) return INFINITY;
    if (nj_checkpoint_load(b, &mb, NULL, NULL, err, len)) {
        nj_model_free(&ma);
        return INFINITY;
    }
    const nj_params *pa = group == -2 ? &ma.buffers : &ma.params, *pb = group == -2 ? &mb.buffers : &mb.params;
    double worst = pa->count == pb->count ? 0 : INFINITY;
    int seen = 0;
    for (int i = 0; isfinite(worst) && i < pa->count; i++) {
        const nj_param *x = pa->items[i], *y = pb->items[i];
        if (strcmp(x->name, y->name) || nj_param_numel(x) != nj_param_numel(y)) {
            snprintf(err, len, "tensor %d: %s vs %s", i, x->name, y->name);
            worst = INFINITY;
            break;
        }
        if (group >= 0 && x->group != group) continue;
        seen++;
        for (size_t k = 0; k < nj_param_numel(x); k++) {
            double d = fabs((double)x->data[k] - y->data[k]);
            if (!(d <= worst)) worst = d;
        }
    }
    if (!seen && isfinite(worst)) {
        snprintf(err, len, "no tensors in group %d", group);
        worst = INFINITY;
    }
    nj_model_free(&ma);
    nj_model_free(&mb);
    return worst;
}

static void path_in(char *out, size_t n, const char *run, const char *file)
{
    snprintf(out, n, "%s/%s/%s", dir, run, file);
}

static void best_checkpoint(void)
{
    char run[600], best[700], err[512] = "";
    snprintf(run, sizeof run, "%s/best", dir);
    path_in(best, sizeof best, "best", "best.ckpt");
    long step[64];
    double photo[64];
    int n = tr_vals(run, step, photo, 64);
    if (!check(n >= 3, "best: the run logged its validations", "%d val records in %s/log.jsonl", n, run)) return;
    int k = 0;                       /* the first lowest: a later equal value is no improvement */
    for (int i = 1; i < n; i++)
        if (photo[i] < photo[k]) k = i;
    int last = n - 1;
    while (last > 0 && step[last] == step[last - 1]) last--;    /* the end-of-run repeat of the last one */
    printf("# best: validation minimum %.6g at step %ld (validations at steps %ld..%ld)\n", photo[k], step[k],
           step[0], step[last]);
    check(k != 0 && step[k] != step[last],
          "best: the lowest validation is neither the first nor the last (the check below can tell)",
          "lowest at step %ld of %ld..%ld: change the run's learning rate", step[k], step[0], step[last]);
    nj_model m;
    nj_train_state st;
    int rc = nj_checkpoint_load(best, &m, NULL, &st, err, sizeof err);
    if (rc == 0) nj_model_free(&m);
    check(rc == 0 && st.step == step[k] && fabs(st.best_val - photo[k]) <= 1e-5 * photo[k],
          "best.ckpt is the checkpoint of the lowest validation loss in log.jsonl",
          "rc %d %s: best.ckpt step %ld best_val %.6g; log minimum %.6g at step %ld", rc, err, rc ? -1 : st.step,
          rc ? NAN : st.best_val, photo[k], step[k]);
    char numbered[700];
    snprintf(numbered, sizeof numbered, "%s/step-%08ld.ckpt", run, step[k]);
    double d = rs_weight_diff(best, numbered, err, sizeof err);
    check(d == 0, "best.ckpt holds the weights of the numbered checkpoint of its step",
          "max |difference| %g from %s %s", d, numbered, isinf(d) ? err : "");
}

static void keep_last(void)
{
    char run[600], p[700], why[512] = "";
    snprintf(run, sizeof run, "%s/keep", dir);
    long s[64];
    int n = tr_numbered(run, s, 64);
    char list[512] = "";
    for (int i = 0; i < n; i++) snprintf(list + strlen(list), sizeof list - strlen(list), " %ld", s[i]);
    check(n == 3 && s[0] == 5 && s[1] == 6 && s[2] == 7,
          "keep_last 3: of the checkpoints of steps 1..7 only steps 5, 6 and 7 remain", "numbered:%s", list);
    int ok = 1;
    path_in(p, sizeof p, "keep", "best.ckpt");
    ok &= tr_exists(p);
    path_in(p, sizeof p, "keep", "final.ckpt");
    ok &= tr_exists(p);
    int count = 0, bad = rs_check_checkpoints(run, &count, why, sizeof why);
    check(ok && bad == 0 && count == n + 2, "keep_last spares best.ckpt and final.ckpt; every file left loads",
          "best+final present %d, %d of %d files unreadable %s", ok, bad, count, why);
}

static void init_from_checkpoint(void)
{
    char src[700], got[700], err[512] = "";
    path_in(src, sizeof src, "source", "final.ckpt");
    path_in(got, sizeof got, "init", "final.ckpt");
    double d = diff_group(src, got, -1, err, sizeof err);
    /* the control: the run's own initial weights (seed 11) are far from the file's */
    nj_model own, file;
    nj_train_config cfg;
    double control = NAN;
    if (nj_checkpoint_load(src, &file, &cfg, NULL, err, sizeof err) == 0) {
        nj_model_config mc = file.cfg;
        mc.seed = 11;
        if (nj_model_init(&own, &mc, err, sizeof err) == 0) {
            control = 0;
            for (int i = 0; i < own.params.count; i++)
                for (size_t k = 0; k < nj_param_numel(own.params.items[i]); k++)
                    control = fmax(control, fabs(own.params.items[i]->data[k] - file.params.items[i]->data[k]));
            nj_model_free(&own);
        }
        nj_model_free(&file);
    }
    printf("# init: the seed-11 initial weights differ from the file's by up to %g\n", control);
    check(d == 0 && control > 1e-3,
          "train --init FILE.ckpt: after a step at learning rate 0 every parameter equals the file's",
          "max |difference| %g %s (seed-11 weights differ from the file's by %g)", d, isinf(d) ? err : "", control);
    double b = diff_group(src, got, -2, err, sizeof err);
    checkv(b <= 1e-4, "train --init FILE.ckpt: batch-norm statistics come from the file (moved by momentum 1e-6 only)",
           "max |difference| %g %s", b, isinf(b) ? err : "");
}

static void frozen_encoder(void)
{
    char src[700], got[700], err[512] = "";
    path_in(src, sizeof src, "source", "final.ckpt");
    path_in(got, sizeof got, "freeze", "final.ckpt");
    double enc = diff_group(src, got, NJ_GROUP_ENCODER, err, sizeof err);
    check(enc == 0, "freeze_encoder: every encoder parameter is unchanged after 3 steps",
          "max |difference| %g %s", enc, isinf(enc) ? err : "");
    double dec = diff_group(src, got, NJ_GROUP_DECODER, err, sizeof err);
    double pose = diff_group(src, got, NJ_GROUP_POSE, err, sizeof err);
    checkv(isfinite(dec) && dec > 1e-5 && isfinite(pose) && pose > 1e-5,
           "freeze_encoder: the decoder and the pose net still train",
           "max |change| decoder %g, pose net %g", dec, pose);
}

int main(void)
{
    if (tr_setup("runfiles", dir, sizeof dir, data, sizeof data)) return test_exit();
    char cfg[5][600], log[5][700];
    const char *names[5] = {"best", "keep", "source", "init", "freeze"};
    for (int i = 0; i < 5; i++) {
        snprintf(cfg[i], sizeof cfg[i], "%s/%s.json", dir, names[i]);
        snprintf(log[i], sizeof log[i], "%s/%s.log", dir, names[i]);
    }
    /* best: lr 1e-3 after a 3-step warm-up validates best at step 2 of 1..8 (measured) */
    int ok = !tr_config(cfg[0],
                        "\"validate_every\": 1, \"checkpoint_minutes\": 1000, \"checkpoint_steps\": 1, "
                        "\"keep_last\": 100, \"max_steps\": 8",
                        "", "\"lr\": 1e-3, \"warmup_steps\": 3");
    ok &= !tr_config(cfg[1],
                     "\"validate_every\": 3, \"checkpoint_minutes\": 1000, \"checkpoint_steps\": 1, "
                     "\"keep_last\": 3, \"max_steps\": 7",
                     "", "\"lr\": 1e-3, \"warmup_steps\": 0");
    ok &= !tr_config(cfg[2], "\"validate_every\": 0, \"checkpoint_minutes\": 1000, \"max_steps\": 2", "",
                     "\"lr\": 1e-3, \"warmup_steps\": 0");
    /* the first step of a warm-up has learning rate 0 (config.c: lr · step / warmup) */
    ok &= !tr_config(cfg[3], "\"validate_every\": 0, \"checkpoint_minutes\": 1000, \"max_steps\": 1",
                     "\"bn_momentum\": 1e-6", "\"lr\": 1e-3, \"warmup_steps\": 4");
    ok &= !tr_config(cfg[4], "\"validate_every\": 0, \"checkpoint_minutes\": 1000, \"max_steps\": 3", "",
                     "\"lr\": 1e-3, \"warmup_steps\": 0, \"freeze_encoder\": true");
    if (!check(ok, "configurations written", "in %s", dir)) return test_exit();
    int rc[5];
    pid_t p[3];
    for (int i = 0; i < 3; i++)
        p[i] = tr_start(log[i], "train --config %s --data %s --out %s/%s", cfg[i], data, dir, names[i]);
    for (int i = 0; i < 3; i++) rc[i] = tr_wait(p[i], GUARD);
    char src[700];
    path_in(src, sizeof src, "source", "final.ckpt");
    p[0] = tr_start(log[3], "train --config %s --data %s --out %s/init --init %s --seed 11", cfg[3], data, dir, src);
    p[1] = tr_start(log[4], "train --config %s --data %s --out %s/freeze --init %s", cfg[4], data, dir, src);
    rc[3] = tr_wait(p[0], GUARD);
    rc[4] = tr_wait(p[1], GUARD);
    for (int i = 0; i < 5; i++) {
        char name[96];
        snprintf(name, sizeof name, "run '%s' completes", names[i]);
        check(rc[i] == 0, name, "exit %d, see %s", rc[i], log[i]);
    }
    if (rc[0] == 0) best_checkpoint();
    if (rc[1] == 0) keep_last();
    if (rc[2] == 0 && rc[3] == 0) init_from_checkpoint();
    if (rc[2] == 0 && rc[4] == 0) frozen_encoder();
    if (!test_failures()) ref_rmtree(dir);
    else printf("# kept %s for inspection\n", dir);
    return test_exit();
}

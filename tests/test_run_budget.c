/* tests/test_run_budget.c — time budgets and time-based checkpoints on tiny
 * runs (tests/train_runs.h).  Nothing here times the program: the checks
 * read what the run recorded.
 *  - a time budget ends the run: --minutes 0.05, --hours 0.001, run.minutes
 *    0.05 and run.hours 0.001 in the config, each with a step budget of a
 *    million steps that cannot be what ended it; the run exits 0, writes
 *    final.ckpt (loadable, at the end record's step, with at least the
 *    budget's seconds of training recorded in it) and ends log.jsonl with an
 *    end record "budget reached" at a step below the step budget and an
 *    elapsed time of at least the budget;
 *  - checkpoint_minutes alone (checkpoint_steps 0): with an interval of
 *    1e-6 minutes (60 µs, less than any training step takes) a numbered
 *    checkpoint is due after every step, so a 4-step run leaves the
 *    checkpoints of steps 1, 2, 3 and 4, with no step-based schedule. */
#include "tests/check.h"
#include "tests/e2e_support.h"
#include "tests/torch_ref.h"
#include "tests/train_runs.h"
#include "train/loop/checkpoint.h"
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* Hang guard per run, seconds: a build whose time budget does not work would
 * otherwise train for a million steps. */
#define GUARD 180.0
#define MILLION 1000000L

static char dir[256], data[512];

typedef struct budget_case {
    const char *name;
    const char *run_keys;     /* config run section */
    const char *cli;          /* extra command-line options */
    double seconds;           /* the budget */
} budget_case;

static const budget_case CASES[] = {
    {"cli-minutes", "", "--minutes 0.05", 3.0},
    {"cli-hours", "", "--hours 0.001", 3.6},
    {"config-minutes", ", \"minutes\": 0.05", "", 3.0},
    {"config-hours", ", \"hours\": 0.001", "", 3.6},
};
#define NCASES (int)(sizeof CASES / sizeof CASES[0])

static void budget_checks(const budget_case *c, int rc, const char *log)
{
    char run[600], final[700], name[200], err[512] = "";
    snprintf(run, sizeof run, "%s/%s", dir, c->name);
    snprintf(final, sizeof final, "%s/final.ckpt", run);
    tr_end e;
    int have_end = tr_end_record(run, &e) == 0;
    snprintf(name, sizeof name, "%s: the time budget ends the run with an end record \"budget reached\"", c->name);
    checkv(rc == 0 && have_end && !strcmp(e.ended, "budget reached") && e.step >= 1 && e.step < MILLION &&
               e.elapsed >= c->seconds - 0.05,
           name, "exit %d (log %s); end record: %s, step %ld of a %ld-step budget, elapsed %.1f s of a %.1f s budget",
           rc, log, have_end ? e.ended : "none", have_end ? e.step : -1, MILLION, have_end ? e.elapsed : NAN,
           c->seconds);
    nj_model m;
    nj_train_state st;
    int lrc = nj_checkpoint_load(final, &m, NULL, &st, err, sizeof err);
    if (lrc == 0) nj_model_free(&m);
    snprintf(name, sizeof name, "%s: final.ckpt is written at the end step with the budget's time in it", c->name);
    check(lrc == 0 && have_end && st.step == e.step && st.elapsed_seconds >= c->seconds, name,
          "load %d %s; checkpoint step %ld elapsed %.2f s, end step %ld", lrc, err, lrc ? -1 : st.step,
          lrc ? NAN : st.elapsed_seconds, have_end ? e.step : -1);
}

static void clock_checks(int rc, const char *log)
{
    char run[600];
    snprintf(run, sizeof run, "%s/clock", dir);
    long s[64];
    int n = rc == 0 ? tr_numbered(run, s, 64) : 0;
    char list[512] = "";
    for (int i = 0; i < n; i++) snprintf(list + strlen(list), sizeof list - strlen(list), " %ld", s[i]);
    check(rc == 0 && n == 4 && s[0] == 1 && s[1] == 2 && s[2] == 3 && s[3] == 4,
          "checkpoint_minutes without checkpoint_steps: a numbered checkpoint after every step once the interval "
          "has passed",
          "exit %d (log %s); numbered checkpoints of steps:%s", rc, log, list);
}

int main(void)
{
    if (tr_setup("budget", dir, sizeof dir, data, sizeof data)) return test_exit();
    char cfg[NCASES + 1][600], log[NCASES + 1][700], keys[256];
    int ok = 1;
    for (int i = 0; i < NCASES; i++) {
        snprintf(cfg[i], sizeof cfg[i], "%s/%s.json", dir, CASES[i].name);
        snprintf(log[i], sizeof log[i], "%s/%s.log", dir, CASES[i].name);
        snprintf(keys, sizeof keys,
                 "\"validate_every\": 0, \"checkpoint_minutes\": 1000, \"max_steps\": %ld%s", MILLION,
                 CASES[i].run_keys);
        ok &= !tr_config(cfg[i], keys, "", "\"lr\": 1e-4, \"warmup_steps\": 0");
    }
    snprintf(cfg[NCASES], sizeof cfg[NCASES], "%s/clock.json", dir);
    snprintf(log[NCASES], sizeof log[NCASES], "%s/clock.log", dir);
    ok &= !tr_config(cfg[NCASES],
                     "\"validate_every\": 0, \"checkpoint_minutes\": 1e-6, \"checkpoint_steps\": 0, "
                     "\"keep_last\": 100, \"max_steps\": 4",
                     "", "\"lr\": 1e-4, \"warmup_steps\": 0");
    if (!check(ok, "configurations written", "in %s", dir)) return test_exit();
    /* all at once: the budgets run on the clock, not on the CPU they get */
    pid_t p[NCASES + 1];
    for (int i = 0; i < NCASES; i++)
        p[i] = tr_start(log[i], "train --config %s --data %s --out %s/%s %s", cfg[i], data, dir, CASES[i].name,
                        CASES[i].cli);
    p[NCASES] = tr_start(log[NCASES], "train --config %s --data %s --out %s/clock", cfg[NCASES], data, dir);
    int rc[NCASES + 1];
    for (int i = 0; i <= NCASES; i++) rc[i] = tr_wait(p[i], GUARD);
    for (int i = 0; i < NCASES; i++) budget_checks(&CASES[i], rc[i], log[i]);
    clock_checks(rc[NCASES], log[NCASES]);
    if (!test_failures()) ref_rmtree(dir);
    else printf("# kept %s for inspection\n", dir);
    return test_exit();
}

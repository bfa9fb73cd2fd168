/* tests/test_kill_random.c — SIGKILL at 20 random moments (issue 8).
 *
 * Tiny synthetic data, a tiny model, a checkpoint after every step and a
 * validation (best.ckpt, report.html) every few steps.  An uninterrupted
 * reference run, then the same run killed with SIGKILL 20 times and resumed
 * with --resume after each kill until it finishes.  The kill moments are
 * random (seeded, the seed is printed) and spread over the whole run: kill i
 * waits until the run has checkpointed step ≈ i/20 of the budget, then either
 * sleeps a random 0–40 ms or waits (at most 80 ms) until a temporary file
 * appears (a write in progress) and kills a random 0–8 ms later.  The test hook
 * NJ_TEST_HOOKS=write_pause_ms=MS (nn/testhook.h) holds every atomic write open for a
 * moment half-way and before its rename, so many kills land inside writes.
 * Checked: at every kill point every *.ckpt in the run folder loads and the
 * JSONL log's complete lines all parse; at the end the weights equal the
 * uninterrupted run's within 1e-6 (same thread count, 1), the log parses line
 * by line with no torn line and ends with the run's end record, no
 * temporary file is left; and that kills did land inside writes.  A torn last
 * line written by a crash is cut when the log is reopened (runlog.c). */
#include "tests/check.h"
#include "tests/e2e_support.h"
#include "tests/run_support.h"
#include "tests/torch_ref.h"
#include "train/loop/runfiles.h"
#include "train/loop/runlog.h"
#include <math.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

#define KILLS 20
#define STEPS 30
#define SEED 20261202u

static const char *CONFIG =
    "{ \"run\": { \"name\": \"kill\", \"seed\": 5, \"threads\": 1, \"log_every\": 1,\n"
    "           \"validate_every\": 7, \"checkpoint_minutes\": 1000, \"checkpoint_steps\": 1,\n"
    "           \"keep_last\": 2, \"max_steps\": 30 },\n"
    "  \"data\": { \"width\": 32, \"height\": 16, \"batch\": 2, \"frame_offsets\": [1],\n"
    "            \"video\": true, \"duplicate_threshold\": 0 },\n"
    "  \"model\": { \"width\": 0.25, \"stages\": 3, \"scales\": 3, \"pose_width\": 0.25, \"pose_stages\": 3 },\n"
    "  \"optim\": { \"lr\": 3e-4, \"warmup_steps\": 4 } }\n";

static char dir[256], cfg[512], data[512];

static pid_t start(const char *out, const char *log)
{
    long steps[4];
    int resume = nj_run_list_steps(out, steps, 4) > 0;
    char *argv[] = {"nightjar", "train", "--config", cfg, "--data", data, "--out", (char *)out,
                    "--threads", "1", resume ? "--resume" : NULL, NULL};
    return rs_spawn(argv, log, NULL);
}

static long newest_step(const char *out)
{
    long steps[4];
    return nj_run_list_steps(out, steps, 4) > 0 ? steps[0] : -1;
}

/* Waits for the moment of kill i; 0 when the run ended by itself first. */
static int await_moment(pid_t pid, const char *out, int i)
{
    long target = (long)((double)i * STEPS / KILLS) - rand() % 2;
    double t0 = rs_now();
    while (newest_step(out) < target) {
        if (waitpid(pid, NULL, WNOHANG) == pid) return 0;
        if (rs_now() - t0 > 60) return 1;          /* stuck: kill anyway, the checks will tell */
        rs_sleep_ms(1);
    }
    if (i % 2 == 0) {
        rs_sleep_ms(rand() % 41);
        return 1;
    }
    for (t0 = rs_now(); rs_count_temps(out) == 0 && rs_now() - t0 < 0.08; ) rs_sleep_ms(0.5);
    rs_sleep_ms(rand() % 9);
    return 1;
}

typedef struct {
    int kills, in_write, ckpt_files, ckpt_bad, log_bad, early_exit;
    char why[512];
} tally;

/* After a kill: every checkpoint present loads; the log's complete lines parse. */
static void inspect(const char *out, tally *t)
{
    char path[600], why[512];
    int n, bad = rs_check_checkpoints(out, &n, why, sizeof why);
    t->ckpt_files += n;
    if (bad && !t->ckpt_bad) snprintf(t->why, sizeof t->why, "%s", why);
    t->ckpt_bad += bad;
    snprintf(path, sizeof path, "%s/log.jsonl", out);
    rs_log_stats s;
    if (rs_log_check(path, &s) == 0) t->log_bad += s.bad;
    t->in_write += rs_count_temps(out) > 0;
}

static void kill_loop(const char *ref)
{
    char out[512], log[600], final[600], err[512];
    snprintf(out, sizeof out, "%s/killed", dir);
    snprintf(log, sizeof log, "%s/killed.txt", dir);
    setenv("NJ_TEST_HOOKS", "write_pause_ms=12", 1);
    srand(SEED);
    printf("# kill seed %u\n", SEED);
    tally t;
    memset(&t, 0, sizeof t);
    for (int i = 0; i < KILLS; i++) {
        pid_t pid = start(out, log);
        if (!await_moment(pid, out, i)) { t.early_exit++; continue; }
        kill(pid, SIGKILL);
        if (rs_wait(pid) == 128 + SIGKILL) t.kills++;
        inspect(out, &t);
    }
    unsetenv("NJ_TEST_HOOKS");
    printf("# %d kills, %d inside a write, %d checkpoint files loaded at kill points\n", t.kills, t.in_write,
           t.ckpt_files);
    int rc = rs_wait(start(out, log));
    check(t.kills == KILLS && rc == 0, "20 SIGKILLs at random moments, each followed by --resume; the run completes",
          "%d kills delivered (%d runs ended before their kill), final exit %d (log %s)", t.kills, t.early_exit, rc, log);
    check(t.ckpt_bad == 0 && t.ckpt_files > 0, "at every kill point every checkpoint in the run folder loads",
          "%d of %d checkpoint files unreadable: %s", t.ckpt_bad, t.ckpt_files, t.why);
    check(t.in_write >= KILLS / 4, "kills landed inside checkpoint/report writes (temporary file present)",
          "only %d of %d kills found a write in progress", t.in_write, t.kills);
    check(t.log_bad == 0, "at every kill point the log's complete lines parse", "%d unparseable lines", t.log_bad);
    snprintf(final, sizeof final, "%s/final.ckpt", out);
    double d = rs_weight_diff(ref, final, err, sizeof err);
    check(d <= 1e-6, "weights after 20 kills + resumes equal the uninterrupted run (1 thread) within 1e-6",
          "max |difference| %.3g %s", d, isinf(d) ? err : "");
    char path[600];
    snprintf(path, sizeof path, "%s/log.jsonl", out);
    rs_log_stats s;
    int ok = rs_log_check(path, &s) == 0;
    check(ok && s.lines > STEPS && s.bad == 0 && !s.torn_tail && s.last_end_step == STEPS,
          "log.jsonl parses line by line with cJSON after the kills: no torn line, ends with the end record",
          "%d lines, %d bad, torn tail %d, end step %ld", s.lines, s.bad, s.torn_tail, s.last_end_step);
    char *text = e2e_slurp(log, NULL);
    check(rs_count_temps(out) == 0 && text && strstr(text, "unfinished temporary file"),
          "temporary files of interrupted writes are removed on resume", "%d left in %s", rs_count_temps(out), out);
    free(text);
}

/* A crash can leave a last line without its newline: reopening cuts it. */
static void torn_line_cut(void)
{
    char sub[512], path[600];
    snprintf(sub, sizeof sub, "%s/torn", dir);
    snprintf(path, sizeof path, "%s/log.jsonl", sub);
    mkdir(sub, 0755);
    e2e_write(path, "{\"type\":\"step\",\"step\":1}\n{\"type\":\"step\",\"st");
    nj_runlog l;
    char err[512];
    int rc = nj_runlog_open(&l, sub, err, sizeof err);
    if (rc == 0) {
        nj_runlog_json(&l, "{\"type\":\"step\",\"step\":2}");
        nj_runlog_close(&l);
    }
    rs_log_stats s;
    rs_log_check(path, &s);
    check(rc == 0 && s.lines == 2 && s.bad == 0 && !s.torn_tail, "a torn last log line is cut when the log is reopened",
          "open %d, %d lines, %d bad, torn %d", rc, s.lines, s.bad, s.torn_tail);
}

int main(void)
{
    if (!check(e2e_have_binary(), "./nightjar is built", "run from the repository root after make")) return test_exit();
    if (ref_mkdtemp(dir, sizeof dir, "kill")) { check(0, "temp folder", "%s", dir); return test_exit(); }
    char cmd[2048], log[600], ref[600];
    snprintf(cfg, sizeof cfg, "%s/kill.json", dir);
    snprintf(data, sizeof data, "%s/data/dataset.json", dir);
    e2e_write(cfg, CONFIG);
    torn_line_cut();
    snprintf(cmd, sizeof cmd, "%s synth --out %s/data --seed 4 --sequences 3 --frames 12 --size 64x32", e2e_bin(), dir);
    snprintf(log, sizeof log, "%s/synth.txt", dir);
    if (check(e2e_run(cmd, log) == 0, "synth renders the kill-test data", "see %s", log)) {
        snprintf(cmd, sizeof cmd, "%s train --config %s --data %s --out %s/ref --threads 1", e2e_bin(), cfg, data, dir);
        snprintf(log, sizeof log, "%s/ref.txt", dir);
        snprintf(ref, sizeof ref, "%s/ref/final.ckpt", dir);
        if (check(e2e_run(cmd, log) == 0, "uninterrupted reference run", "see %s", log)) kill_loop(ref);
    }
    if (!test_failures()) ref_rmtree(dir);
    else printf("# kept %s for inspection\n", dir);
    return test_exit();
}

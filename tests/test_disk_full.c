/* tests/test_disk_full.c — training when the disk fills up or the run folder
 * cannot be written (issue 8).  In every case training stops with one line
 * naming the file and the system's reason, exits non-zero, leaves the last
 * good checkpoint (and the older ones, and final.ckpt of an earlier run)
 * intact and loadable, leaves no temporary file, keeps log.jsonl parseable,
 * and a later --resume with room again finishes the run.
 *
 * How "full" is made, so it works as root and as a normal user:
 *  - RLIMIT_FSIZE (both): the resumed run may not grow any file beyond
 *    64 KiB, with SIGXFSZ ignored; the next checkpoint (~200 KiB) then fails
 *    with EFBIG ("File too large") as a full disk would with ENOSPC;
 *  - a real full file system (root, where mount is permitted): a 2 MiB tmpfs
 *    filled up to 100 KiB, so the next checkpoint fails with ENOSPC;
 *  - a read-only run folder (normal user only: chmod does not stop root);
 *  - log.jsonl pointing at /dev/full (both): every log write fails with ENOSPC;
 *  - the log's own rollback: a line cut short by RLIMIT_FSIZE is removed. */
#include "tests/check.h"
#include "tests/e2e_support.h"
#include "tests/run_support.h"
#include "tests/torch_ref.h"
#include "train/loop/runlog.h"
#include <errno.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <sys/stat.h>
#include <sys/statvfs.h>
#include <sys/wait.h>
#include <unistd.h>

static const char *CONFIG =
    "{ \"run\": { \"name\": \"full\", \"seed\": 5, \"threads\": 1, \"log_every\": 1,\n"
    "           \"validate_every\": 0, \"checkpoint_minutes\": 1000, \"checkpoint_steps\": 2,\n"
    "           \"keep_last\": 2, \"max_steps\": 4 },\n"
    "  \"data\": { \"width\": 32, \"height\": 16, \"batch\": 2, \"frame_offsets\": [1],\n"
    "            \"video\": true, \"duplicate_threshold\": 0 },\n"
    "  \"model\": { \"width\": 0.25, \"stages\": 3, \"scales\": 3, \"pose_width\": 0.25, \"pose_stages\": 3 },\n"
    "  \"optim\": { \"lr\": 3e-4, \"warmup_steps\": 4 } }\n";

static char dir[256], cfg[512], data[512];

static int train(const char *out, const char *steps, int resume, const char *log, const rs_limits *lim)
{
    char *argv[] = {"nightjar", "train", "--config", cfg, "--data", data, "--out", (char *)out, "--threads", "1",
                    "--steps", (char *)steps, resume ? "--resume" : NULL, NULL};
    return rs_run(argv, log, lim);
}

/* The one line of `text` containing `needle` (copied to line), and how many
 * lines contain it.  A "report not written:" line is left out: on a full disk
 * the run's report legitimately fails too, for the same reason — it is
 * counted in *report_lines, and *stale is set when it gives the reason
 * without naming report.html (a message carried over from the checkpoint's
 * failure). */
static int find_line(const char *text, const char *needle, char *line, size_t len, int *report_lines, int *stale)
{
    int n = 0;
    line[0] = 0;
    *report_lines = *stale = 0;
    for (const char *p = text; p && *p; ) {
        const char *nl = strchr(p, '\n');
        size_t k = nl ? (size_t)(nl - p) : strlen(p);
        char buf[2048];
        snprintf(buf, sizeof buf, "%.*s", (int)(k < sizeof buf - 1 ? k : sizeof buf - 1), p);
        if (!strncmp(buf, "report not written:", 19)) {
            (*report_lines)++;
            if (strstr(buf, needle) && !strstr(buf, "report.html")) *stale = 1;
        } else if (strstr(buf, needle)) {
            if (!n++) snprintf(line, len, "%s", buf);
        }
        p = nl ? nl + 1 : NULL;
    }
    return n;
}

/* After a failed resume in `out`: the message, the exit code and the files. */
static void after_failure(const char *what, const char *out, const char *log, int rc, const char *file,
                          const char *reason)
{
    char name[256], line[2048], why[512], path[700];
    char *text = e2e_slurp(log, NULL);
    int report_lines = 0, stale = 0;
    int n = text ? find_line(text, reason, line, sizeof line, &report_lines, &stale) : 0;
    snprintf(name, sizeof name, "%s: training stops, exit non-zero, one line naming %s, \"%s\" and the last good "
             "checkpoint", what, file, reason);
    int names_last = !strstr(reason, "Permission") && !strstr(reason, "Read-only") ? strstr(line, "last good checkpoint: ") &&
                     strstr(line, "step-00000004.ckpt") : 1;   /* a read-only folder stops before training */
    check(rc != 0 && rc < 128 && n == 1 && strstr(line, file) && strstr(line, "nightjar train: ") && names_last &&
              report_lines <= 1 && !stale, name,
          "exit %d, %d lines with the reason, %d report lines%s: %s", rc, n, report_lines,
          stale ? " (one not naming report.html)" : "", text ? text : "(no output)");
    free(text);
    int count, bad = rs_check_checkpoints(out, &count, why, sizeof why);
    snprintf(path, sizeof path, "%s/step-00000004.ckpt", out);
    struct stat st;
    snprintf(name, sizeof name, "%s: the last good checkpoint and final.ckpt are intact and load", what);
    check(bad == 0 && count >= 3 && stat(path, &st) == 0, name, "%d of %d unreadable (%s); step 4 %s", bad, count, why,
          stat(path, &st) == 0 ? "present" : "missing");
    snprintf(path, sizeof path, "%s/log.jsonl", out);
    rs_log_stats s;
    int lr = rs_log_check(path, &s);
    snprintf(name, sizeof name, "%s: no temporary file left, log.jsonl parses", what);
    check(rs_count_temps(out) == 0 && lr == 0 && s.bad == 0 && !s.torn_tail, name, "%d temps, log %d bad %d torn",
          rs_count_temps(out), lr == 0 ? s.bad : -1, s.torn_tail);
}

/* A 4-step run in `out` (step-2, step-4, final.ckpt). */
static int first_run(const char *out, const char *tag)
{
    char log[700], name[128];
    snprintf(log, sizeof log, "%s.first.txt", out);
    snprintf(name, sizeof name, "%s: a 4-step run to start from", tag);
    return check(train(out, "4", 0, log, NULL) == 0, name, "see %s", log);
}

static void recovers(const char *what, const char *out)
{
    char log[700], name[256], path[700];
    snprintf(log, sizeof log, "%s.again.txt", out);
    int rc = train(out, "8", 1, log, NULL);
    snprintf(path, sizeof path, "%s/log.jsonl", out);
    rs_log_stats s;
    rs_log_check(path, &s);
    snprintf(name, sizeof name, "%s: with room again, --resume finishes the run", what);
    check(rc == 0 && s.last_end_step == 8 && s.bad == 0, name, "exit %d, end step %ld (see %s)", rc, s.last_end_step, log);
}

static void file_size_limit(void)
{
    char out[512], log[700];
    snprintf(out, sizeof out, "%s/fsize", dir);
    if (!first_run(out, "RLIMIT_FSIZE")) return;
    snprintf(log, sizeof log, "%s.full.txt", out);
    rs_limits lim = {.fsize = 64 << 10};
    int rc = train(out, "8", 1, log, &lim);
    after_failure("RLIMIT_FSIZE 64 KiB", out, log, rc, "step-00000006.ckpt", "File too large");
    recovers("RLIMIT_FSIZE", out);
}

/* Fills the file system of `path` up to `leave` bytes with one file. */
static int fill(const char *path, long long leave)
{
    struct statvfs v;
    if (statvfs(path, &v)) return -1;
    long long room = (long long)v.f_bavail * (long long)v.f_frsize - leave;
    char filler[700];
    snprintf(filler, sizeof filler, "%s/filler", path);
    FILE *f = fopen(filler, "wb");
    if (!f) return -1;
    static char block[65536];
    for (; room > 0; room -= (long long)sizeof block)
        if (fwrite(block, 1, room < (long long)sizeof block ? (size_t)room : sizeof block, f) == 0) break;
    return fclose(f) == 0 ? 0 : -1;
}

static void full_tmpfs(void)
{
    char mnt[512], out[600], log[700], cmd[1200], filler[700];
    snprintf(mnt, sizeof mnt, "%s/tmpfs", dir);
    snprintf(out, sizeof out, "%s/run", mnt);
    mkdir(mnt, 0755);
    snprintf(cmd, sizeof cmd, "mount -t tmpfs -o size=2m nj-test-full '%s'", mnt);
    snprintf(log, sizeof log, "%s/mount.txt", dir);
    if (e2e_run(cmd, log) != 0) {
        printf("SKIP full 2 MiB tmpfs: mount refused (a root without mount permission; see %s); "
               "ENOSPC is still covered by /dev/full\n", log);
        return;
    }
    if (first_run(out, "tmpfs")) {
        check(fill(mnt, 100 << 10) == 0, "tmpfs filled up to 100 KiB", "%s", mnt);
        snprintf(log, sizeof log, "%s/tmpfs-full.txt", dir);
        int rc = train(out, "8", 1, log, NULL);
        after_failure("full 2 MiB tmpfs", out, log, rc, "step-00000006.ckpt", "No space left on device");
        snprintf(filler, sizeof filler, "%s/filler", mnt);
        unlink(filler);
        recovers("full tmpfs", out);
    }
    snprintf(cmd, sizeof cmd, "umount '%s'", mnt);
    e2e_run(cmd, log);
}

/* A run folder that became read-only.  A normal user: chmod 0555 (EACCES).
 * Root ignores permissions, so as root the folder is on a small tmpfs that
 * is remounted read-only (EROFS). */
static void read_only_folder(void)
{
    char out[600], log[700], mnt[512], cmd[1200];
    int root = geteuid() == 0;
    snprintf(mnt, sizeof mnt, "%s/romount", dir);
    snprintf(out, sizeof out, root ? "%s/romount/run" : "%s/readonly", dir);
    snprintf(log, sizeof log, "%s/romount.txt", dir);
    if (root) {
        mkdir(mnt, 0755);
        snprintf(cmd, sizeof cmd, "mount -t tmpfs -o size=8m nj-test-ro '%s'", mnt);
        if (e2e_run(cmd, log) != 0) {
            printf("SKIP read-only run folder: mount refused (a root without mount permission; see %s)\n", log);
            return;
        }
    }
    if (first_run(out, "read-only folder")) {
        snprintf(cmd, sizeof cmd, "mount -o remount,ro '%s'", mnt);
        if (root && e2e_run(cmd, log) != 0) {
            printf("SKIP read-only run folder: remount read-only refused (see %s)\n", log);
        } else {
            if (!root) chmod(out, 0555);
            snprintf(log, sizeof log, "%s.full.txt", out);
            if (root) snprintf(log, sizeof log, "%s/romount-full.txt", dir);
            int rc = train(out, "8", 1, log, NULL);
            if (!root) chmod(out, 0755);
            char mlog[700];
            snprintf(mlog, sizeof mlog, "%s/romount-rw.txt", dir);
            snprintf(cmd, sizeof cmd, "mount -o remount,rw '%s'", mnt);
            if (root) e2e_run(cmd, mlog);
            after_failure("read-only run folder", out, log, rc, out, root ? "Read-only file system" : "Permission denied");
            recovers("read-only folder", out);
        }
    }
    if (root) {
        snprintf(cmd, sizeof cmd, "umount '%s'", mnt);
        e2e_run(cmd, log);
    }
}

static void log_on_dev_full(void)
{
    char out[512], link[600], log[700], line[2048];
    snprintf(out, sizeof out, "%s/devfull", dir);
    snprintf(link, sizeof link, "%s/log.jsonl", out);
    mkdir(out, 0755);
    if (symlink("/dev/full", link)) { check(0, "log.jsonl -> /dev/full", "symlink: %s", strerror(errno)); return; }
    snprintf(log, sizeof log, "%s.txt", out);
    int rc = train(out, "4", 0, log, NULL);
    char *text = e2e_slurp(log, NULL);
    int report_lines = 0, stale = 0;
    int n = text ? find_line(text, "No space left on device", line, sizeof line, &report_lines, &stale) : 0;
    check(rc != 0 && rc < 128 && n == 1 && strstr(line, "log.jsonl: write failed") && !stale,
          "log.jsonl on a full device: training stops with one line naming log.jsonl and ENOSPC",
          "exit %d, %d lines: %s", rc, n, text ? text : "");
    free(text);
}

/* In a child: a log line cut short by RLIMIT_FSIZE is rolled back. */
static void log_rollback(void)
{
    char sub[512], path[600];
    snprintf(sub, sizeof sub, "%s/rollback", dir);
    snprintf(path, sizeof path, "%s/log.jsonl", sub);
    mkdir(sub, 0755);
    e2e_write(path, "{\"type\":\"step\",\"step\":1}\n");
    fflush(stdout);
    pid_t pid = fork();
    if (pid == 0) {
        nj_runlog l;
        char err[512], big[1200];
        if (nj_runlog_open(&l, sub, err, sizeof err)) _exit(2);
        signal(SIGXFSZ, SIG_IGN);
        struct rlimit r = {100, 100};
        if (setrlimit(RLIMIT_FSIZE, &r)) _exit(3);
        snprintf(big, sizeof big, "{\"type\":\"note\",\"text\":\"%0900d\"}", 0);
        int rc = nj_runlog_json(&l, big);
        _exit(rc == -1 && nj_runlog_error(&l) && strstr(nj_runlog_error(&l), "File too large") ? 0 : 4);
    }
    int rc = rs_wait(pid);
    rs_log_stats s;
    rs_log_check(path, &s);
    check(rc == 0 && s.lines == 1 && s.bad == 0 && !s.torn_tail,
          "a log line cut short by a full disk is removed again and the error names the reason",
          "child %d, %d lines, %d bad, torn %d", rc, s.lines, s.bad, s.torn_tail);
}

int main(void)
{
    if (!check(e2e_have_binary(), "./nightjar is built", "run from the repository root after make")) return test_exit();
    if (ref_mkdtemp(dir, sizeof dir, "full")) { check(0, "temp folder", "%s", dir); return test_exit(); }
    char cmd[1024], log[600];
    snprintf(cfg, sizeof cfg, "%s/full.json", dir);
    snprintf(data, sizeof data, "%s/data/dataset.json", dir);
    e2e_write(cfg, CONFIG);
    log_rollback();
    snprintf(cmd, sizeof cmd, "%s synth --out %s/data --seed 4 --sequences 3 --frames 12 --size 64x32", e2e_bin(), dir);
    snprintf(log, sizeof log, "%s/synth.txt", dir);
    if (check(e2e_run(cmd, log) == 0, "synth renders the disk-full data", "see %s", log)) {
        file_size_limit();
        if (geteuid() == 0) full_tmpfs();
        else printf("SKIP full 2 MiB tmpfs: mounting needs root; ENOSPC is still covered by /dev/full\n");
        read_only_folder();
        log_on_dev_full();
    }
    if (!test_failures()) ref_rmtree(dir);
    else printf("# kept %s for inspection\n", dir);
    return test_exit();
}

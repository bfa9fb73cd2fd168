/* tests/test_mpi.c — data-parallel training over Open MPI (issue 9), with the
 * MPI build build/mpi/nightjar (the Makefile builds it when mpicc exists):
 *  - mpirun -np 2 with batch 2 per rank gives, after K steps, the weights
 *    (and batch-norm running statistics) and logged losses of one process
 *    with batch 4 (the plain ./nightjar), within 1e-5 relative; only rank 0
 *    writes; the checkpoint records the process count; the MPI build run
 *    without mpirun gives the plain build's weights bit for bit; the same
 *    with 2 threads per rank (the rank's batch split again over thread
 *    replicas, train/loop/step_replicas.h) stays within 1e-5;
 *  - a 2-rank checkpoint at step K/2 resumed with 2 ranks ends equal to the
 *    uninterrupted 2-rank run;
 *  - SIGKILL to rank 1 mid-run: non-zero exit with a message, the newest
 *    checkpoint loads and resuming it with 2 ranks finishes;
 *  - resuming with another process count and a rank with other data are
 *    refused with a message.
 * Skipped, with the reason printed, only when mpirun or mpicc is missing. */
#include "tests/check.h"
#include "tests/e2e_support.h"
#include "tests/torch_ref.h"
#include "train/loop/checkpoint.h"
#include "train/loop/runfiles.h"
#include <dirent.h>
#include <fcntl.h>
#include <math.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <time.h>
#include <unistd.h>

enum { K = 6 };

static const char *CONFIG =
    "{ \"run\": { \"name\": \"mpi\", \"seed\": 5, \"threads\": 1, \"log_every\": 1,\n"
    "           \"validate_every\": 0, \"checkpoint_minutes\": 1000, \"checkpoint_steps\": 3,\n"
    "           \"keep_last\": 5, \"max_steps\": %d },\n"
    "  \"data\": { \"width\": 64, \"height\": 32, \"batch\": %d, \"frame_offsets\": [1],\n"
    "            \"video\": true, \"duplicate_threshold\": 0 },\n"
    "  \"model\": { \"width\": 0.5, \"stages\": 4 },\n"
    "  \"optim\": { \"lr\": 3e-4, \"warmup_steps\": 2 } }\n";

static char dir[256], cfg2[512], cfg4[512], data[512], launch[512], mpirun[600], plain[600], mpi_alone[600];

/* The MPI build under test: $NJ_MPI_BIN (make sanitize points it at its own
 * sanitized MPI build), else build/mpi/nightjar. */
static const char *mpi_bin(void);

/* Under make sanitize the MPI build is sanitized too, with leak checking off
 * for it alone: Open MPI's own components leak at finalize (libmpi and its
 * dlopen'ed modules: nothing of ours); every other check stays on.  The
 * prefix for the MPI build's command lines ("" outside the sanitizer). */
static const char *mpi_env(void)
{
    static char env[400];
    const char *asan = getenv("ASAN_OPTIONS");
    if (asan && asan[0] && !env[0]) snprintf(env, sizeof env, "env ASAN_OPTIONS='%s:detect_leaks=0' ", asan);
    return env;
}

static const char *mpi_bin(void)
{
    const char *b = getenv("NJ_MPI_BIN");
    return b && b[0] ? b : "build/mpi/nightjar";
}

static int have(const char *tool)
{
    char cmd[256];
    snprintf(cmd, sizeof cmd, "command -v %s >/dev/null 2>&1", tool);
    return system(cmd) == 0;
}

/* ‖a − b‖₂ / ‖a‖₂ over every parameter and batch-norm buffer of two
 * checkpoints; *tensor_worst gets the worst single tensor's max|a−b|/max|a|
 * (information: tensors that start at 0, such as BN shifts, are dominated by
 * Adam's normalisation of rounding-level gradient differences). */
static double rel_diff(const char *a, const char *b, double *tensor_worst, char *err, size_t len)
{
    nj_model ma, mb;
    if (nj_checkpoint_load(a, &ma, NULL, NULL, err, len)) return INFINITY;
    if (nj_checkpoint_load(b, &mb, NULL, NULL, err, len)) { nj_model_free(&ma); return INFINITY; }
    int same = ma.params.count == mb.params.count && ma.buffers.count == mb.buffers.count;
    double d2 = 0, a2 = 0, worst = 0;
    nj_params *pa[2] = {&ma.params, &ma.buffers}, *pb[2] = {&mb.params, &mb.buffers};
    for (int s = 0; s < 2 && same; s++)
        for (int i = 0; i < pa[s]->count; i++) {
            const float *x = pa[s]->items[i]->data, *y = pb[s]->items[i]->data;
            double d = 0, m = 0;
            for (size_t j = 0, k = nj_param_numel(pa[s]->items[i]); j < k; j++) {
                double e = (double)x[j] - y[j];
                d2 += e * e;
                a2 += (double)x[j] * x[j];
                if (!(fabs(e) <= d)) d = fabs(e);
                if (fabs(x[j]) > m) m = fabs(x[j]);
            }
            if (!(d / (m > 0 ? m : 1e-30) <= worst)) worst = d / (m > 0 ? m : 1e-30);
        }
    nj_model_free(&ma);
    nj_model_free(&mb);
    if (tensor_worst) *tensor_worst = worst;
    return same && a2 > 0 ? sqrt(d2 / a2) : INFINITY;
}

/* The "loss" of every step line of RUN/log.jsonl, in order; returns the count. */
static int logged_losses(const char *run, double *loss, int max)
{
    char path[600];
    snprintf(path, sizeof path, "%s/log.jsonl", run);
    char *text = e2e_slurp(path, NULL);
    int n = 0;
    for (char *p = text; p && (p = strstr(p, "\"type\":\"step\"")) != NULL; p++) {
        char *l = strstr(p, "\"loss\":");
        if (l && n < max) loss[n] = atof(l + 7);
        n++;
    }
    free(text);
    return n;
}

static int train(const char *launcher, const char *config, const char *out, const char *extra, const char *log)
{
    char cmd[3072];
    /* one thread per rank unless `extra` sets --threads (an option may be given once) */
    snprintf(cmd, sizeof cmd, "%s train --config %s --data %s --out %s %s %s", launcher, config, data, out,
             strstr(extra, "--threads") ? "" : "--threads 1", extra);
    return e2e_run(cmd, log);
}

static int contains(const char *log, const char *needle)
{
    char *text = e2e_slurp(log, NULL);
    int yes = text && strstr(text, needle);
    free(text);
    return yes;
}

/* 2 ranks × batch 2 against 1 process × batch 4. */
static int same_as_big_batch(void)
{
    char single[512], dual[512], log[600], a[600], b[600], err[512];
    snprintf(single, sizeof single, "%s/single", dir);
    snprintf(dual, sizeof dual, "%s/dual", dir);
    snprintf(log, sizeof log, "%s.log", single);
    if (!check(train(plain, cfg4, single, "", log) == 0, "mpi: 1 process x batch 4 trains",
               "see %s", log))
        return -1;
    snprintf(log, sizeof log, "%s.log", dual);
    int rc = train(mpirun, cfg2, dual, "", log);
    if (!check(rc == 0 && contains(log, "2 processes x batch 2 = global batch 4"),
               "mpi: mpirun -np 2 x batch 2 trains (global batch 4)", "exit %d, see %s", rc, log))
        return -1;
    double tw = 0;
    snprintf(a, sizeof a, "%s/final.ckpt", single);
    snprintf(b, sizeof b, "%s/final.ckpt", dual);
    double d = rel_diff(a, b, &tw, err, sizeof err);
    snprintf(b, sizeof b, "%s/step-00000003.ckpt", single);
    double three = rel_diff(a, b, NULL, err, sizeof err);
    check(d <= 1e-5 && three > 1e-3,
          "mpi: 2 ranks x batch 2 == 1 process x batch 4 after 6 steps (weights and BN statistics within 1e-5 relative)",
          "relative L2 difference %.3g (the last 3 steps alone move the model by %.3g) %s", d, three,
          isinf(d) ? err : "");
    printf("   (relative L2 difference %.3g; worst single tensor max|diff|/max|w| %.3g; 3 steps move the model "
           "by %.3g)\n", d, tw, three);
    /* each rank's batch of 2 split again over 2 threads: 4 shards in all */
    char threads[512];
    snprintf(threads, sizeof threads, "%s/threads", dir);
    snprintf(log, sizeof log, "%s.log", threads);
    rc = train(mpirun, cfg2, threads, "--threads 2", log);
    snprintf(a, sizeof a, "%s/final.ckpt", single);
    snprintf(b, sizeof b, "%s/final.ckpt", threads);
    d = rc == 0 ? rel_diff(a, b, NULL, err, sizeof err) : INFINITY;
    check(d <= 1e-5, "mpi: 2 ranks x 2 threads x batch 2 (thread replicas inside ranks) == 1 process x batch 4 "
          "after 6 steps (within 1e-5 relative)", "exit %d, relative L2 difference %.3g (see %s)", rc, d, log);
    printf("   (2 ranks x 2 threads: relative L2 difference %.3g)\n", d);
    char alone[512];
    snprintf(alone, sizeof alone, "%s/alone", dir);
    snprintf(log, sizeof log, "%s.log", alone);
    rc = train(mpi_alone, cfg4, alone, "", log);
    snprintf(b, sizeof b, "%s/final.ckpt", alone);
    snprintf(a, sizeof a, "%s/final.ckpt", single);
    d = rc == 0 ? rel_diff(a, b, NULL, err, sizeof err) : INFINITY;
    check(d == 0, "mpi: the MPI build started without mpirun trains exactly like the plain build",
          "exit %d, relative difference %.3g (see %s)", rc, d, log);
    double l1[64], l2[64];
    int n1 = logged_losses(single, l1, 64), n2 = logged_losses(dual, l2, 64), same = n1 == K && n2 == K;
    /* 1e-3: float rounding may flip the auto-mask of a few pixels (each ~1e-4 of
     * the mean); a rank logging only its own half-batch loss differs by far more */
    for (int i = 0; same && i < K; i++) same = fabs(l1[i] - l2[i]) <= 1e-3 * fabs(l1[i]) + 1e-9;
    check(same, "mpi: rank 0 alone logs, and logs the whole batch's loss (equal to the single process's)",
          "%d and %d step lines (want %d); first losses %.6g vs %.6g", n1, n2, K, n1 ? l1[0] : 0, n2 ? l2[0] : 0);
    nj_train_state st;
    nj_model m;
    snprintf(a, sizeof a, "%s/step-00000003.ckpt", dual);
    int ok = nj_checkpoint_load(a, &m, NULL, &st, err, sizeof err) == 0;
    check(ok && st.ranks == 2 && st.loader_cursor == 3 * 4, "mpi: the checkpoint records 2 processes and the loader position",
          "%s ranks %d cursor %ld", ok ? "" : err, ok ? st.ranks : 0, ok ? st.loader_cursor : 0);
    if (ok) nj_model_free(&m);
    return 0;
}

static int copy_file(const char *from, const char *to)
{
    size_t n;
    char *bytes = e2e_slurp(from, &n);
    FILE *f = bytes ? fopen(to, "wb") : NULL;
    int ok = f && fwrite(bytes, 1, n, f) == n;
    if (f) ok = fclose(f) == 0 && ok;
    free(bytes);
    return ok ? 0 : -1;
}

/* The uninterrupted 2-rank run's step-3 checkpoint, resumed with 2 ranks. */
static void resume_two_ranks(void)
{
    char out[512], from[600], to[600], log[600], a[600], b[600], err[512];
    snprintf(out, sizeof out, "%s/resumed", dir);
    mkdir(out, 0755);
    snprintf(from, sizeof from, "%s/dual/step-00000003.ckpt", dir);
    snprintf(to, sizeof to, "%s/step-00000003.ckpt", out);
    if (!check(copy_file(from, to) == 0, "mpi: copy the step-3 checkpoint", "%s", from)) return;
    snprintf(log, sizeof log, "%s.log", out);
    int rc = train(mpirun, cfg2, out, "--resume", log);
    snprintf(a, sizeof a, "%s/dual/final.ckpt", dir);
    snprintf(b, sizeof b, "%s/final.ckpt", out);
    double d = rc == 0 ? rel_diff(a, b, NULL, err, sizeof err) : INFINITY;
    check(rc == 0 && contains(log, "resuming at step 3") && d <= 1e-6,
          "mpi: checkpoint at step 3 with 2 ranks, resumed with 2 ranks == uninterrupted",
          "exit %d, relative difference %.3g (see %s)", rc, d, log);
}

/* pid of the process whose environment has NJ_TEST_TAG=tag and the rank. */
static pid_t find_rank(const char *tag, int rank)
{
    char want_tag[300], want_rank[64];
    snprintf(want_tag, sizeof want_tag, "NJ_TEST_TAG=%s", tag);
    snprintf(want_rank, sizeof want_rank, "OMPI_COMM_WORLD_RANK=%d", rank);
    DIR *d = opendir("/proc");
    struct dirent *e;
    pid_t found = 0;
    static char env[1 << 16];
    while (d && !found && (e = readdir(d)) != NULL) {
        char path[300];
        if (e->d_name[0] < '0' || e->d_name[0] > '9') continue;
        snprintf(path, sizeof path, "/proc/%s/environ", e->d_name);
        int fd = open(path, O_RDONLY);
        if (fd < 0) continue;
        ssize_t n = 0, k;
        while (n < (ssize_t)sizeof env - 1 && (k = read(fd, env + n, sizeof env - 1 - (size_t)n)) > 0) n += k;
        close(fd);
        env[n > 0 ? n : 0] = 0;
        int t = 0, r = 0;
        for (ssize_t i = 0; i < n; i += (ssize_t)strlen(env + i) + 1) {
            t |= !strcmp(env + i, want_tag);
            r |= !strcmp(env + i, want_rank);
        }
        if (t && r) found = (pid_t)atoi(e->d_name);
    }
    if (d) closedir(d);
    return found;
}

static void sleep_ms(long ms)
{
    struct timespec ts = {ms / 1000, (ms % 1000) * 1000000L};
    nanosleep(&ts, NULL);
}

/* SIGKILL to rank 1 after the first checkpoint. */
static void kill_a_rank(void)
{
    char out[512], log[600], first[600], cmd[3072], err[512];
    snprintf(out, sizeof out, "%s/killed", dir);
    snprintf(log, sizeof log, "%s.log", out);
    snprintf(first, sizeof first, "%s/step-00000003.ckpt", out);
    snprintf(cmd, sizeof cmd, "exec %s train --config %s --data %s --out %s --threads 1 --steps 60 > %s 2>&1",
             mpirun, cfg2, data, out, log);
    fflush(stdout);
    pid_t job = fork();
    if (job == 0) {
        execl("/bin/sh", "sh", "-c", cmd, (char *)NULL);
        _exit(127);
    }
    if (!check(job > 0, "mpi: start the job to be killed", "fork failed")) return;
    struct stat sb;
    for (int w = 0; w < 2400 && stat(first, &sb) != 0; w++) sleep_ms(50);
    pid_t victim = find_rank(dir, 1);
    kill(victim > 0 ? victim : job, victim > 0 ? SIGKILL : SIGTERM);
    int st = 0;
    waitpid(job, &st, 0);
    int rc = WIFEXITED(st) ? WEXITSTATUS(st) : 128 + WTERMSIG(st);
    check(victim > 0 && rc != 0 && contains(log, "stop signal received") && contains(log, "--resume"),
          "mpi: SIGKILL to rank 1 ends the job with a non-zero exit and a message",
          "rank 1 pid %d, exit %d, see %s", (int)victim, rc, log);
    long steps[16];
    int n = nj_run_list_steps(out, steps, 16);
    char path[600];
    nj_model m;
    nj_train_state s;
    if (n > 0) nj_run_step_path(out, steps[0], path, sizeof path);
    int ok = n > 0 && nj_checkpoint_load(path, &m, NULL, &s, err, sizeof err) == 0;
    check(ok, "mpi: after the kill the newest checkpoint loads", "%d checkpoints; %s", n, n > 0 ? err : "none");
    if (!ok) return;
    nj_model_free(&m);
    char want[64];
    snprintf(want, sizeof want, "resuming at step %ld", s.step);
    snprintf(log, sizeof log, "%s.resume.log", out);
    char extra[64];
    snprintf(extra, sizeof extra, "--resume --steps %ld", s.step + 2);
    rc = train(mpirun, cfg2, out, extra, log);
    check(rc == 0 && contains(log, want), "mpi: the killed run resumes with 2 ranks and finishes",
          "exit %d, see %s", rc, log);
}

static void refusals(void)
{
    char out[512], log[600], cmd[4096], other[512];
    snprintf(out, sizeof out, "%s/dual", dir);
    snprintf(log, sizeof log, "%s/refuse_count.log", dir);
    int rc = train(plain, cfg2, out, "--resume", log);
    check(rc == 1 && contains(log, "trained by 2 processes and is resumed by 1"),
          "mpi: resuming a 2-process run with 1 process is refused with a message", "exit %d, see %s", rc, log);
    snprintf(other, sizeof other, "%s/other", dir);
    snprintf(cmd, sizeof cmd, "%s synth --out %s --seed 4 --sequences 3 --frames 13 --size 96x64", e2e_bin(), other);
    snprintf(log, sizeof log, "%s/synth_other.log", dir);
    if (!check(e2e_run(cmd, log) == 0, "mpi: synth renders other data", "see %s", log)) return;
    /* MPMD: rank 1 gets another dataset */
    snprintf(cmd, sizeof cmd,
             "%s -np 1 %s train --config %s --data %s --out %s/mismatch --threads 1 : "
             "-np 1 %s train --config %s --data %s/dataset.json --out %s/mismatch --threads 1",
             launch, mpi_bin(), cfg2, data, dir, mpi_bin(), cfg2, other, dir);
    snprintf(log, sizeof log, "%s/mismatch.log", dir);
    rc = e2e_run(cmd, log);
    check(rc != 0 && contains(log, "differs from rank 0's"), "mpi: a rank with other data is refused at start",
          "exit %d, see %s", rc, log);
}

int main(void)
{
    if (!have("mpirun") || !have("mpicc")) {
        printf("SKIP mpi: Open MPI is not installed (mpirun/mpicc missing; tools/deps.sh test installs "
               "libopenmpi-dev openmpi-bin)\n");
        return 0;
    }
    snprintf(plain, sizeof plain, "OMP_NUM_THREADS=1 %s", e2e_bin());
    snprintf(mpi_alone, sizeof mpi_alone, "%sOMP_NUM_THREADS=1 %s", mpi_env(), mpi_bin());
    if (!check(e2e_have_binary() && access(mpi_bin(), X_OK) == 0, "mpi: the plain and the MPI binary under test are built",
               "run from the repository root after make test (which builds build/mpi/nightjar)"))
        return test_exit();
    if (ref_mkdtemp(dir, sizeof dir, "mpi")) { check(0, "mpi: temp folder", "%s", dir); return test_exit(); }
    char cmd[2048], log[600], text[1024];
    snprintf(launch, sizeof launch, "%smpirun %s--oversubscribe --bind-to none -x OMP_NUM_THREADS=1 -x NJ_TEST_TAG=%s",
             mpi_env(), getuid() == 0 ? "--allow-run-as-root " : "", dir);
    snprintf(mpirun, sizeof mpirun, "%s -np 2 %s", launch, mpi_bin());
    snprintf(cfg2, sizeof cfg2, "%s/b2.json", dir);
    snprintf(cfg4, sizeof cfg4, "%s/b4.json", dir);
    snprintf(data, sizeof data, "%s/data/dataset.json", dir);
    snprintf(text, sizeof text, CONFIG, K, 2);
    e2e_write(cfg2, text);
    snprintf(text, sizeof text, CONFIG, K, 4);
    e2e_write(cfg4, text);
    snprintf(cmd, sizeof cmd, "%s synth --out %s/data --seed 4 --sequences 3 --frames 12 --size 96x64", e2e_bin(), dir);
    snprintf(log, sizeof log, "%s/synth.txt", dir);
    if (check(e2e_run(cmd, log) == 0, "mpi: synth renders the data", "see %s", log) && same_as_big_batch() == 0) {
        resume_two_ranks();
        kill_a_rank();
        refusals();
    }
    if (test_failures() == 0) ref_rmtree(dir);
    return test_exit();
}

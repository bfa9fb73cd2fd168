/* train/cli/train_cli.c — `nightjar train`: options, config, run. */
#include "train/loop/trainer.h"
#include "train/loop/dist.h"
#include "train/loop/trainer_dist.h"
#include "train/report/report.h"
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* The trainer's report writer (train/loop/trainer.h): the run's own page. */
static int run_report(const char *run_dir, char *err, size_t errlen)
{
    return nj_report_write(run_dir, NULL, err, errlen);
}

static void usage(FILE *f)
{
    fprintf(f,
        "usage: nightjar train --config FILE.json [--data DATASET.json] [--out RUN_DIR]\n"
        "                      [--minutes N | --hours N] [--steps N] [--resume] [--init CKPT|FILE.safetensors]\n"
        "                      [--threads N] [--seed N]\n"
        "Trains the depth (and pose) network by self-supervised view synthesis.\n"
        "  --config   training configuration (see configs/)\n"
        "  --data     dataset description, overrides data.dataset\n"
        "  --out      run folder (default checkpoints/<run name>)\n"
        "  --minutes, --hours  time budget (0: none, the run then needs --steps or run.max_steps);\n"
        "             --steps  step budget; with both, the run ends at whichever comes first\n"
        "  --resume   continue the run in --out from its newest readable checkpoint\n"
        "  --init     start from another run's weights (same architecture): a checkpoint,\n"
        "             or an export made with --format safetensors\n"
        "Data-parallel on several processes or servers (a `make MPI=1` build):\n"
        "  mpirun -np N ./nightjar train ...   batch (config) is per process; the global\n"
        "  batch is N x batch; --threads (or OMP_NUM_THREADS) is per process.\n");
}

typedef struct {
    const char *config, *data, *out, *init;
    double minutes;
    long steps;
    int resume, threads, seed_set;
    unsigned seed;
} train_args;

static int need_value(int i, int argc, char **argv)
{
    if (i + 1 < argc) return 0;
    fprintf(stderr, "nightjar train: %s needs a value\n", argv[i]);
    return -1;
}

static int parse_number(const char *opt, const char *s, double lo, double *out)
{
    char *end;
    double v = strtod(s, &end);
    if (end == s || *end || !(v >= lo)) {
        fprintf(stderr, "nightjar train: %s expects a number >= %g, got '%s'\n", opt, lo, s);
        return -1;
    }
    *out = v;
    return 0;
}

static int parse_args(int argc, char **argv, train_args *a)
{
    memset(a, 0, sizeof *a);
    a->minutes = -1;
    a->steps = -1;
    a->threads = -1;
    for (int i = 1; i < argc; i++) {
        const char *o = argv[i];
        double v;
        if (!strcmp(o, "--help") || !strcmp(o, "-h")) { usage(stdout); exit(0); }
        else if (!strcmp(o, "--resume")) a->resume = 1;
        else if (!strcmp(o, "--config") || !strcmp(o, "--data") || !strcmp(o, "--out") || !strcmp(o, "--init")) {
            if (need_value(i, argc, argv)) return -1;
            const char **dst = !strcmp(o, "--config") ? &a->config : !strcmp(o, "--data") ? &a->data
                             : !strcmp(o, "--out") ? &a->out : &a->init;
            *dst = argv[++i];
        } else if (!strcmp(o, "--minutes") || !strcmp(o, "--hours")) {
            if (need_value(i, argc, argv) || parse_number(o, argv[i + 1], 0, &v)) return -1;
            a->minutes = !strcmp(o, "--hours") ? v * 60 : v;
            i++;
        } else if (!strcmp(o, "--steps") || !strcmp(o, "--threads") || !strcmp(o, "--seed")) {
            if (need_value(i, argc, argv) || parse_number(o, argv[i + 1], 0, &v)) return -1;
            if (!strcmp(o, "--steps")) a->steps = (long)v;
            else if (!strcmp(o, "--threads")) a->threads = (int)v;
            else { a->seed = (unsigned)v; a->seed_set = 1; }
            i++;
        } else {
            fprintf(stderr, "nightjar train: unknown option '%s' (see nightjar train --help)\n", o);
            return -1;
        }
    }
    if (!a->config) { fprintf(stderr, "nightjar train: --config FILE is required\n"); return -1; }
    return 0;
}

static void apply_overrides(nj_train_config *c, const train_args *a)
{
    if (a->data) snprintf(c->dataset, sizeof c->dataset, "%s", a->data);
    if (a->init) snprintf(c->init, sizeof c->init, "%s", a->init);
    if (a->minutes >= 0) c->minutes = a->minutes;
    if (a->steps >= 0) c->max_steps = a->steps;
    if (a->threads >= 0) c->threads = a->threads;
    if (a->seed_set) c->seed = a->seed;
}

static void print_start(const nj_trainer *t)
{
    const nj_model *m = &t->model;
    if (t->rank != 0) return;
    double df = nj_depth_flops(m, t->cfg.height, t->cfg.width);
    double pf = m->cfg.pose ? nj_pose_flops(m, t->cfg.height, t->cfg.width) : 0;
    printf("nightjar train: run %s in %s\n", t->cfg.name, t->dir);
    printf("  data: %s (%d training samples, %d validation samples)\n", t->cfg.dataset, t->ntrain, t->nval);
    printf("  model: %zu parameters; depth net %.3f GFLOPs, pose net %.3f GFLOPs per pair at %dx%d\n",
           nj_params_numel(&m->params), df * 1e-9, pf * 1e-9, t->cfg.width, t->cfg.height);
    int threads = nj_threads_init(t->cfg.threads);
    if (t->ranks > 1)
        printf("  %s at step %ld; %d processes x batch %d = global batch %d; threads %d per process (rank 0)\n",
               t->st.step ? "resuming" : "starting", t->st.step, t->ranks, t->cfg.batch, t->ranks * t->cfg.batch,
               threads);
    else
        printf("  %s at step %ld; batch %d; threads %d\n", t->st.step ? "resuming" : "starting", t->st.step,
               t->cfg.batch, threads);
    fflush(stdout);
}

int nj_train_main(int argc, char **argv)
{
    train_args a;
    if (parse_args(argc, argv, &a)) return 2;
    static nj_trainer t;   /* large; kept off the stack */
    memset(&t, 0, sizeof t);
    t.log.fd = -1;
    char err[2048];
    nj_train_config_default(&t.cfg);
    if (nj_train_config_load(&t.cfg, a.config, err, sizeof err)) { fprintf(stderr, "nightjar train: %s\n", err); return 2; }
    apply_overrides(&t.cfg, &a);
    if (nj_train_config_check(&t.cfg, err, sizeof err)) { fprintf(stderr, "nightjar train: %s\n", err); return 2; }
    if (a.out) snprintf(t.dir, sizeof t.dir, "%s", a.out);
    else snprintf(t.dir, sizeof t.dir, "checkpoints/%s", t.cfg.name);
    if (nj_dist_init(NULL, NULL, err, sizeof err)) { fprintf(stderr, "nightjar train: %s\n", err); return 1; }
    nj_threads_init(t.cfg.threads);
    if (nj_trainer_setup(&t, a.resume, err, sizeof err)) {
        if (err[0]) fprintf(stderr, "nightjar train: %s\n", err);
        nj_trainer_teardown(&t);
        if (t.log.fd >= 0) nj_runlog_close(&t.log);
        nj_dist_finalize();
        return 1;
    }
    print_start(&t);
    t.write_report = run_report;
    long first = t.st.step;
    int code = nj_trainer_run(&t);
    if (code && t.ranks > 1) nj_trainer_dist_fail(&t, code);
    nj_trainer_dist_summary(&t, t.st.step - first);
    nj_runlog_close(&t.log);
    nj_trainer_teardown(&t);
    nj_dist_finalize();
    return code;
}

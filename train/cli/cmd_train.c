/* train/cli/cmd_train.c — `nightjar train`: options, config, run. */
#include "train/cli/commands.h"
#include "train/cli/options.h"
#include "train/loop/loop.h"
#include "train/report/report.h"
#include <stdio.h>
#include <string.h>

/* The trainer's report writer (train/loop/trainer.h): the run's own page. */
static int run_report(const char *run_dir, char *err, size_t errlen)
{
    return nj_report_write(run_dir, NULL, err, errlen);
}

static const char ABOUT[] = "Trains the depth (and pose) network by self-supervised view synthesis.\n";

static const char EPILOGUE[] =
    "  With --minutes (or --hours) and --steps the run ends at whichever comes first;\n"
    "  without either, the config's budget (run.minutes / run.hours, run.max_steps) holds.\n"
    "Data-parallel on several processes or servers (a `make MPI=1` build):\n"
    "  mpirun -np N ./nightjar train ...   batch (config) is per process; the global\n"
    "  batch is N x batch; --threads (or OMP_NUM_THREADS) is per process.\n";

/* The command line; -1 = not given (the config's value holds). */
typedef struct {
    const char *config, *data, *out, *init, *store_dir;
    double minutes, hours;
    long steps, seed;
    int resume, threads, workers, store;
} train_args;

static const char *const ON_OFF[] = {"off", "on", NULL};

static int parse_args(int argc, char **argv, train_args *a)
{
    *a = (train_args){.minutes = -1, .hours = -1, .steps = -1, .seed = -1, .threads = -1, .workers = -1, .store = -1};
    nj_opt opts[] = {
        {.name = "--config", .kind = NJ_OPT_STRING, .meta = "FILE.json", .help = "training configuration (see configs/)",
         .required = 1, .str = &a->config},
        {.name = "--data", .kind = NJ_OPT_STRING, .meta = "DATASET.json", .help = "dataset description",
         .dflt = "data.dataset of the config", .str = &a->data},
        {.name = "--out", .kind = NJ_OPT_STRING, .meta = "RUN_DIR", .help = "run folder",
         .dflt = "checkpoints/<run name>", .str = &a->out},
        {.name = "--minutes", .kind = NJ_OPT_NUMBER, .meta = "N", .lo = 0, .hi = 1e6,
         .help = "time budget (0: none, the run then needs --steps or run.max_steps)", .dflt = "run.minutes",
         .d = &a->minutes},
        {.name = "--hours", .kind = NJ_OPT_NUMBER, .meta = "N", .lo = 0, .hi = 1e4,
         .help = "the time budget in hours (instead of --minutes)", .dflt = "run.hours", .d = &a->hours},
        {.name = "--steps", .kind = NJ_OPT_LONG, .meta = "N", .lo = 0, .hi = 1e12, .help = "step budget",
         .dflt = "run.max_steps", .l = &a->steps},
        {.name = "--resume", .kind = NJ_OPT_FLAG, .help = "continue the run in --out from its newest readable checkpoint",
         .flag = &a->resume},
        {.name = "--init", .kind = NJ_OPT_STRING, .meta = "CKPT|FILE.safetensors",
         .help = "start from another run's weights (same architecture): a\n"
                 "checkpoint, or an export made with --format safetensors",
         .str = &a->init},
        NJ_OPT_THREADS(&a->threads, 256, "run.threads"),
        {.name = "--seed", .kind = NJ_OPT_LONG, .meta = "N", .lo = 0, .hi = 4294967295.0, .help = "random seed",
         .dflt = "run.seed", .l = &a->seed},
        {.name = "--loader-workers", .kind = NJ_OPT_INT, .meta = "N", .lo = 0, .hi = 64,
         .help = "threads preparing batches; 0 = one per thread", .dflt = "data.loader_workers", .i = &a->workers},
        {.name = "--frame-store", .kind = NJ_OPT_CHOICE, .choices = ON_OFF,
         .help = "keep the training frames decoded and resized once, in a file\n"
                 "(the same pixels; worth it for frames larger than the training size)",
         .dflt = "data.frame_store", .i = &a->store},
        {.name = "--frame-store-dir", .kind = NJ_OPT_STRING, .meta = "DIR",
         .help = "the frame store's folder (turns the store on)", .dflt = "data.frame_store_dir, else RUN_DIR",
         .str = &a->store_dir},
    };
    nj_opt_spec spec = {.command = "train", .about = ABOUT, .epilogue = EPILOGUE,
                        .opts = opts, .nopts = NJ_OPT_COUNT(opts)};
    int rc = nj_opt_main(&spec, argc, argv);
    if (rc == NJ_OPT_OK && a->minutes >= 0 && a->hours >= 0)
        rc = nj_opt_fail(&spec, "--minutes and --hours are both given: give the time budget once");
    if (rc == NJ_OPT_OK && a->store == 0 && a->store_dir)
        rc = nj_opt_fail(&spec, "--frame-store off and --frame-store-dir are both given: the folder is for a store");
    if (a->hours >= 0) a->minutes = a->hours * 60;
    return rc;
}

static void apply_overrides(nj_train_config *c, const train_args *a)
{
    if (a->data) snprintf(c->dataset, sizeof c->dataset, "%s", a->data);
    if (a->init) snprintf(c->init, sizeof c->init, "%s", a->init);
    if (a->minutes >= 0) c->minutes = a->minutes;
    if (a->steps >= 0) c->max_steps = a->steps;
    if (a->threads >= 0) c->threads = a->threads;
    if (a->seed >= 0) c->seed = (unsigned)a->seed;
    if (a->workers >= 0) c->loader_workers = a->workers;
    if (a->store >= 0) c->frame_store = a->store;
    if (a->store_dir) {
        snprintf(c->frame_store_dir, sizeof c->frame_store_dir, "%s", a->store_dir);
        c->frame_store = 1;
    }
}

/* The loader: workers, and where frames come from; a hint when large
 * frames are decoded at every step. */
static void print_loader(const nj_trainer *t)
{
    int prefetch, workers = nj_trainer_loader_workers(t, &prefetch), sw = 0, sh = 0;
    for (int s = 0; s < t->ds.nseq; s++)
        if ((double)t->ds.seq[s].width * t->ds.seq[s].height > (double)sw * sh) {
            sw = t->ds.seq[s].width;
            sh = t->ds.seq[s].height;
        }
    printf("  loader: %d worker%s%s, %d batches ahead; frames %s\n", workers, workers == 1 ? "" : "s",
           t->cfg.loader_workers ? "" : " (one per thread)", prefetch,
           t->store ? "from the frame store" : "decoded and resized at every use");
    if (!t->store && (double)sw * sh >= 4.0 * t->cfg.width * t->cfg.height)
        printf("  (frames up to %dx%d for %dx%d training: --frame-store on prepares them once)\n", sw, sh,
               t->cfg.width, t->cfg.height);
}

/* What the data check at startup cost: frames decoded, or the scan cache
 * used (data/scancache.h); tests/test_data_scale.c reads this line. */
static void print_scan(const nj_dataset *ds)
{
    long frames = 0, decoded = 0;
    int cached = 0;
    for (int i = 0; i < ds->nseq; i++) {
        frames += ds->seq[i].nframes;
        decoded += ds->seq[i].decoded;
        cached += ds->seq[i].scan_cached;
    }
    printf("  data check: %ld frames, %ld images decoded, %d of %d sequences from the scan cache\n", frames,
           decoded, cached, ds->nseq);
}

static void print_start(const nj_trainer *t)
{
    const nj_model *m = &t->model;
    if (t->rank != 0) return;
    double df = nj_depth_flops(m, t->cfg.height, t->cfg.width);
    double pf = m->cfg.pose ? nj_pose_flops(m, t->cfg.height, t->cfg.width) : 0;
    printf("nightjar train: run %s in %s\n", t->cfg.name, t->dir);
    printf("  data: %s (%d training samples, %d validation samples)\n", t->cfg.dataset, t->ntrain, t->nval);
    print_scan(&t->ds);
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
    print_loader(t);
    fflush(stdout);
}

int nj_train_main(int argc, char **argv)
{
    train_args a;
    int rc = parse_args(argc, argv, &a);
    if (rc != NJ_OPT_OK) return nj_opt_status(rc);
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

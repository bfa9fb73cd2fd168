/* train/loop/train_setup.c — everything a run needs before its first step:
 * validated data, sample lists, the model (fresh, from --init, or resumed),
 * the optimiser and the batch loader. */
#include "train/loop/trainer.h"
#include "train/loop/safetensors.h"
#include "train/loop/runfiles.h"
#include "train/loop/dist.h"
#include "train/loop/trainer_dist.h"
#include "train/loop/step_replicas.h"
#include <cjson/cJSON.h>
#include "data/framestore.h"
#include "data/scancache.h"
#include <math.h>
#include <omp.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

/* FNV-1a over sequence names, frame names and sizes: identifies the data. */
uint64_t nj_dataset_hash(const nj_dataset *ds)
{
    uint64_t h = 0xcbf29ce484222325ull;
    for (int s = 0; s < ds->nseq; s++) {
        const nj_sequence *q = &ds->seq[s];
        char buf[64];
        snprintf(buf, sizeof buf, "|%dx%d|%d|", q->width, q->height, (int)q->split);
        const char *parts[2] = {q->name, buf};
        for (int p = 0; p < 2; p++)
            for (const char *c = parts[p]; *c; c++) h = (h ^ (unsigned char)*c) * 0x100000001b3ull;
        for (int f = 0; f < q->nframes; f++)
            for (const char *c = q->frames[f]; *c; c++) h = (h ^ (unsigned char)*c) * 0x100000001b3ull;
        /* frames resampled through a lens map are other data (pinhole data: no change to the hash) */
        for (int k = 0; q->undistort && k < 1 + q->rig; k++) h = (h ^ q->undistort[k].key) * 0x100000001b3ull;
    }
    return h;
}

static int open_data(nj_trainer *t, char *err, size_t errlen)
{
    const nj_train_config *c = &t->cfg;
    nj_train_config_data_options(c, &t->dopt);
    /* the scan cache (data/scancache.h): without it, every start decodes every
     * frame (100,000 frames of 320x240: minutes before the first step) */
    char cache[4096];
    if (!nj_scan_cache_dir(cache, sizeof cache)) {
        t->dopt.scan_cache = cache;
        t->dopt.scan_cache_read = 1;
    }
    nj_problems pr;
    nj_problems_init(&pr);
    int bad = nj_dataset_open(c->dataset, &t->dopt, &t->ds, &pr);
    t->dopt.scan_cache = NULL;    /* `cache` ends here */
    nj_problems_print(&pr, stderr);   /* problems, and warnings such as an unwritable scan cache */
    if (bad)
        snprintf(err, errlen, "%s: %d problem%s in the data (listed above); training refuses it",
                 c->dataset, bad, bad == 1 ? "" : "s");
    nj_problems_free(&pr);
    if (bad) return -1;
    t->ntrain = nj_dataset_samples(&t->ds, NJ_SPLIT_TRAIN, &t->dopt, &t->train);
    t->nval = nj_dataset_samples(&t->ds, NJ_SPLIT_VAL, &t->dopt, &t->val);
    if (t->ntrain <= 0) {
        snprintf(err, errlen, "%s: no training samples (need sequences with split \"train\" and enough frames)",
                 c->dataset);
        return -1;
    }
    if (t->nval < 0) t->nval = 0;
    return 0;
}

/* A float as the shortest decimal that reads back as the same float. */
static double float_text(float v)
{
    char b[32];
    snprintf(b, sizeof b, "%.9g", v);
    for (int p = 6; p < 9; p++) {
        char t[32];
        snprintf(t, sizeof t, "%.*g", p, v);
        if (strtof(t, NULL) == v) return strtod(t, NULL);
    }
    return strtod(b, NULL);
}

static cJSON *camera_json(nj_camera c)
{
    cJSON *o = cJSON_CreateObject();
    cJSON_AddNumberToObject(o, "fx", float_text(c.fx));
    cJSON_AddNumberToObject(o, "fy", float_text(c.fy));
    cJSON_AddNumberToObject(o, "cx", float_text(c.cx));
    cJSON_AddNumberToObject(o, "cy", float_text(c.cy));
    return o;
}

static void add_lens(cJSON *o, const char *key, const nj_lens *L)
{
    int n;
    const char *const *names = nj_lens_coeff_names(L->kind, &n);
    cJSON *l = cJSON_AddObjectToObject(o, key);
    cJSON_AddStringToObject(l, "model", nj_lens_kind_name(L->kind));
    for (int i = 0; i < n; i++) cJSON_AddNumberToObject(l, names[i], L->c[i]);
}

/* One {"type":"camera"} log line per sequence whose frames are resampled: its
 * calibration and the pinhole intrinsics training uses (at the frame size),
 * also printed.  Pinhole sequences write nothing. */
static int log_cameras(nj_trainer *t, char *err, size_t errlen)
{
    for (int i = 0; i < t->ds.nseq; i++) {
        const nj_sequence *s = &t->ds.seq[i];
        if (!s->undistort) continue;
        cJSON *o = cJSON_CreateObject();
        cJSON_AddStringToObject(o, "type", "camera");
        cJSON_AddStringToObject(o, "sequence", s->name ? s->name : "?");
        cJSON_AddNumberToObject(o, "width", s->width);
        cJSON_AddNumberToObject(o, "height", s->height);
        cJSON_AddItemToObject(o, "calibrated", camera_json(s->raw_camera));
        add_lens(o, "lens", &s->lens);
        if (s->rig) {
            cJSON_AddItemToObject(o, "right_calibrated", camera_json(s->right_camera));
            add_lens(o, "right_lens", &s->right_lens);
            cJSON_AddNumberToObject(o, "baseline", s->baseline);
        }
        cJSON_AddItemToObject(o, "pinhole", camera_json(s->camera));
        char *line = cJSON_PrintUnformatted(o);
        cJSON_Delete(o);
        if (!line) { snprintf(err, errlen, "out of memory"); return -1; }
        printf("%s: frames %s to pinhole fx %.6g fy %.6g cx %.6g cy %.6g at %dx%d\n", s->name ? s->name : "?",
               s->rig ? "rectified" : "undistorted", s->camera.fx, s->camera.fy, s->camera.cx, s->camera.cy,
               s->width, s->height);
        int rc = nj_runlog_json(&t->log, line);
        free(line);
        if (rc) {
            snprintf(err, errlen, "%s", nj_runlog_error(&t->log));
            return -1;
        }
    }
    return 0;
}

/* --init: a checkpoint, or an export in safetensors format (by extension). */
static int init_weights(const char *path, nj_model *m, char *err, size_t errlen)
{
    size_t n = strlen(path);
    if (n > 12 && !strcmp(path + n - 12, ".safetensors")) return nj_safetensors_init_model(path, m, err, errlen);
    return nj_checkpoint_init_from(path, m, err, errlen);
}

static int fresh_model(nj_trainer *t, char *err, size_t errlen)
{
    nj_model_config mc = t->cfg.model;
    mc.pose = t->cfg.video;
    mc.seed = t->cfg.seed;
    if (nj_model_init(&t->model, &mc, err, errlen)) return -1;
    t->model_ready = 1;
    if (t->cfg.init[0] && init_weights(t->cfg.init, &t->model, err, errlen)) return -1;
    if (t->model.cfg.pose_scale != mc.pose_scale) {
        printf("model.pose_scale %g taken from %s (its pose weights were trained with it; the config says %g)\n",
               t->model.cfg.pose_scale, t->cfg.init, mc.pose_scale);
        t->cfg.model.pose_scale = t->model.cfg.pose_scale;
    }
    if (t->model.cfg.rotation_scale != mc.rotation_scale) {
        printf("model.rotation_scale %g taken from %s (its pose weights were trained with it; the config says %g)\n",
               t->model.cfg.rotation_scale, t->cfg.init, mc.rotation_scale);
        t->cfg.model.rotation_scale = t->model.cfg.rotation_scale;
    }
    memset(&t->st, 0, sizeof t->st);
    nj_rng_seed(&t->rng, (uint64_t)t->cfg.seed * 0x9E3779B97F4A7C15ull + 7);
    t->st.rng[0] = t->rng.s[0];
    t->st.rng[1] = t->rng.s[1];
    t->st.loader_seed = t->cfg.seed;
    t->st.best_val = INFINITY;
    t->st.lr_scale = 1.0f;
    t->st.dataset_hash = nj_dataset_hash(&t->ds);
    t->st.ranks = t->ranks;
    if (t->cfg.max_steps > 0) t->st.schedule_steps = t->cfg.max_steps;
    return 0;
}

/* The newest readable checkpoint of the run, read by this process. */
static int load_latest_local(nj_trainer *t, char *err, size_t errlen)
{
    long steps[256];
    int n = nj_run_list_steps(t->dir, steps, 256);
    for (int i = 0; i < n; i++) {
        char path[NJ_PATH_MAX + 32], why[512];
        nj_run_step_path(t->dir, steps[i], path, sizeof path);
        nj_model m;
        nj_train_state st;
        if (nj_checkpoint_load(path, &m, NULL, &st, why, sizeof why)) {
            fprintf(stderr, "nightjar train: skipping unreadable checkpoint: %s\n", why);
            continue;
        }
        if (t->model_ready) nj_model_free(&t->model);
        t->model = m;
        t->model_ready = 1;
        t->st = st;
        t->rng.s[0] = st.rng[0];
        t->rng.s[1] = st.rng[1];
        return 0;
    }
    (void)err; (void)errlen;
    return 1;
}

/* Several ranks: rank 0 reads, then shares the model and state. */
int nj_trainer_load_latest(nj_trainer *t, char *err, size_t errlen)
{
    if (t->ranks <= 1) return load_latest_local(t, err, errlen);
    int64_t r = t->rank == 0 ? load_latest_local(t, err, errlen) : INT64_MIN;
    if (nj_dist_max_i64(&r, 1)) return -1;
    return r == 0 && nj_trainer_dist_share(t, err, errlen) ? -1 : (int)r;
}

static int resume_model(nj_trainer *t, char *err, size_t errlen)
{
    int r = load_latest_local(t, err, errlen);
    if (r < 0) return -1;
    if (r == 1) {
        snprintf(err, errlen, "%s: nothing to resume (no readable step-*.ckpt)", t->dir);
        return -1;
    }
    if (t->st.dataset_hash != nj_dataset_hash(&t->ds)) {
        snprintf(err, errlen, "%s: the data differs from the run being resumed (file list hash mismatch)",
                 t->cfg.dataset);
        return -1;
    }
    if (t->st.ranks != t->ranks) {
        snprintf(err, errlen, "%s: the run was trained by %d process%s and is resumed by %d; the sample order "
                 "depends on the number, so resume with the same count (mpirun -np %d)", t->dir, t->st.ranks,
                 t->st.ranks == 1 ? "" : "es", t->ranks, t->st.ranks);
        return -1;
    }
    t->st.resumes++;
    return 0;
}

/* One loader worker per thread of the run (data.loader_workers overrides).
 * Loading and the step share the cores: while a batch is ahead the workers
 * sleep (the ring of slots is full), and when the step waits for data the
 * step's threads are idle, so as many workers as threads let loading use
 * every core then.  Fewer would leave cores idle where one sample costs more
 * to prepare than a thread's share of a step: decoding and shrinking three
 * 1280x720 JPEGs costs about as much as a 2-thread step at 320x96.  Items,
 * not whole batches, are a worker's unit (data/loader.c), so the prefetch
 * needs ceil(workers / items) batches to hand every worker one, plus one
 * ready batch; at least 2, as before. */
int nj_trainer_loader_workers(const nj_trainer *t, int *prefetch)
{
    int w = t->cfg.loader_workers > 0 ? t->cfg.loader_workers : omp_get_max_threads();
    if (w < 1) w = 1;
    if (w > 64) w = 64;
    int items = t->cfg.batch, p = (w + items - 1) / items + 1;
    *prefetch = p < 2 ? 2 : p > 64 ? 64 : p;
    return w;
}

int nj_trainer_start_loader(nj_trainer *t, char *err, size_t errlen)
{
    nj_loader_config lc;
    nj_loader_config_default(&lc);
    lc.width = t->cfg.width;
    lc.height = t->cfg.height;
    lc.batch = t->cfg.batch * t->ranks;     /* the global batch; this rank loads its shard */
    lc.shard_first = t->rank * t->cfg.batch;
    lc.shard_count = t->ranks > 1 ? t->cfg.batch : 0;
    lc.seed = t->st.loader_seed;
    lc.start_step = t->st.step;
    lc.workers = nj_trainer_loader_workers(t, &lc.prefetch);
    lc.store = t->store;
    lc.brightness = t->cfg.brightness;
    lc.contrast = t->cfg.contrast;
    lc.saturation = t->cfg.saturation;
    lc.hue = t->cfg.hue;
    lc.jitter = t->cfg.brightness > 0 || t->cfg.contrast > 0 || t->cfg.saturation > 0 || t->cfg.hue > 0;
    lc.flip_prob = t->cfg.flip;
    lc.turn_deg = t->cfg.turn_deg;
    lc.roll_deg = t->cfg.roll_deg;
    lc.rotated = t->cfg.rotation_pairs > 0;
    lc.rotated_deg = t->cfg.rotation_pairs_deg;
    lc.rotated_until = t->cfg.rotation_pairs_until;
    t->loader = nj_loader_create(&t->ds, t->train, t->ntrain, &lc, err, errlen);
    return t->loader ? 0 : -1;
}

/* data.frame_store: rank 0 checks or builds the store (in data.frame_store_dir,
 * else the run folder); with several ranks the others then use it if they
 * see the same file (a shared folder).  A store that cannot be had is said in
 * one line and the run goes on without it: it changes no pixel, only speed. */
static int open_store(nj_trainer *t, char *err, size_t errlen)
{
    if (!t->cfg.frame_store) return 0;
    nj_framestore_config fc = {.width = t->cfg.width, .height = t->cfg.height,
                               .dir = t->cfg.frame_store_dir[0] ? t->cfg.frame_store_dir : t->dir,
                               .threads = omp_get_max_threads(), .build = t->rank == 0,
                               .say = t->rank == 0 ? stdout : NULL};
    char why[1024];
    if (t->rank == 0 && !(t->store = nj_framestore_open(&t->ds, t->train, t->ntrain, &fc, why, sizeof why)))
        fprintf(stderr, "nightjar train: frame store not used: %s\n", why);
    if (nj_trainer_dist_agree(t, 0, "preparing the frame store", err, errlen)) return -1;   /* rank 0 first */
    if (t->rank != 0 && !(t->store = nj_framestore_open(&t->ds, t->train, t->ntrain, &fc, why, sizeof why)))
        fprintf(stderr, "nightjar train: frame store not used on rank %d: %s\n", t->rank, why);
    fflush(stdout);
    return 0;
}

/* Optimiser, graph, log and loader of a run whose model is in place. */
static int finish_setup(nj_trainer *t, char *err, size_t errlen)
{
    if (!nj_model_size_ok(&t->model, t->cfg.height, t->cfg.width)) {
        snprintf(err, errlen, "training size %dx%d must be a multiple of %d and at least %d on each side",
                 t->cfg.width, t->cfg.height, 1 << t->model.cfg.stages, 2 << t->model.cfg.stages);
        return -1;
    }
    nj_params_freeze_group(&t->model.params, NJ_GROUP_ENCODER, t->cfg.freeze_encoder);
    if (nj_trainer_memory_check(t, err, errlen)) return -1;
    if (open_store(t, err, errlen)) return -1;   /* before the clock starts: building it is not training time */
    nj_adam_init(&t->opt, t->cfg.lr);
    t->opt.weight_decay = t->cfg.weight_decay;
    t->opt.step = t->st.adam_step;
    t->g = nj_graph_new(NJ_STEP_ARENA_CHUNK);
    if (!t->g) { snprintf(err, errlen, "out of memory creating the training graph"); return -1; }
    nj_trainer_dist_graph(t);
    /* several threads: the process's batch is split over them as replicas
     * (train/loop/step_replicas.h), inside the processes' split (trainer_dist.h) */
    if (omp_get_max_threads() > 1 &&
        !(t->split = nj_step_replicas_new(omp_get_max_threads(), NJ_STEP_ARENA_CHUNK, err, errlen)))
        return -1;
    if (t->rank != 0) nj_runlog_quiet(&t->log);
    else if (nj_runlog_open(&t->log, t->dir, err, errlen) || log_cameras(t, err, errlen)) return -1;
    nj_health_init(&t->health, t->cfg.video);
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    t->wall0 = ts.tv_sec + ts.tv_nsec * 1e-9;
    t->elapsed0 = t->st.elapsed_seconds;
    t->last_ckpt = t->st.elapsed_seconds;
    t->last_ckpt_step = t->st.step;
    return nj_trainer_start_loader(t, err, errlen);
}

int nj_trainer_setup(nj_trainer *t, int resume, char *err, size_t errlen)
{
    /* with several ranks: rank 0 alone touches the run folder and decides the
     * model and state; the others follow (trainer_dist.h) */
    if (nj_trainer_dist_begin(t, err, errlen)) return -1;
    int root = t->rank == 0;
    int rc = root ? nj_run_mkdir(t->dir, err, errlen) : 0;
    if (!rc) rc = open_data(t, err, errlen);
    if (!rc && root) {
        int stale = nj_run_clean_temps(t->dir);
        if (stale) printf("removed %d unfinished temporary file%s of an interrupted write in %s\n",
                          stale, stale == 1 ? "" : "s", t->dir);
    }
    if (!rc) rc = nj_trainer_memory_precheck(t, err, errlen);
    if (nj_trainer_dist_agree(t, rc, "opening the data", err, errlen) || nj_trainer_dist_check_data(t, err, errlen))
        return -1;
    rc = root ? (resume ? resume_model(t, err, errlen) : fresh_model(t, err, errlen)) : 0;
    if (nj_trainer_dist_agree(t, rc, "preparing the model", err, errlen) || nj_trainer_dist_share(t, err, errlen))
        return -1;
    return nj_trainer_dist_agree(t, finish_setup(t, err, errlen), "starting the run", err, errlen);
}

void nj_trainer_teardown(nj_trainer *t)
{
    if (t->loader) nj_loader_destroy(t->loader);
    t->loader = NULL;
    nj_framestore_close(t->store);   /* after the loader that reads it */
    t->store = NULL;
    if (t->g) nj_graph_free(t->g);
    t->g = NULL;
    nj_step_replicas_free(t->split);
    t->split = NULL;
    if (t->model_ready) nj_model_free(&t->model);
    t->model_ready = 0;
    free(t->train);
    free(t->val);
    free(t->fused);
    t->train = t->val = NULL;
    t->fused = NULL;
    nj_dataset_free(&t->ds);
}

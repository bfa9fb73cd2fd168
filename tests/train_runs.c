/* tests/train_runs.c — see train_runs.h. */
#include "tests/train_runs.h"
#include "tests/check.h"
#include "tests/e2e_support.h"
#include "tests/run_support.h"
#include "tests/torch_ref.h"
#include "data/image.h"
#include "train/loop/checkpoint.h"
#include "train/model/infer.h"
#include "nn/ops.h"
#include <cjson/cJSON.h>
#include <dirent.h>
#include <math.h>
#include <signal.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/wait.h>

int tr_exists(const char *path)
{
    struct stat st;
    return stat(path, &st) == 0;
}

int tr_setup(const char *tag, char *dir, size_t dlen, char *data, size_t datalen)
{
    if (!check(e2e_have_binary(), "the binary under test is built", "%s (run from the repository root after make)",
               e2e_bin()))
        return -1;
    if (ref_mkdtemp(dir, dlen, tag)) {
        check(0, "temp folder", "%s", dir);
        return -1;
    }
    char cmd[1024], log[600];
    snprintf(cmd, sizeof cmd, "%s synth --out %s/data --seed 4 --sequences 3 --frames 12 --size 64x32", e2e_bin(),
             dir);
    snprintf(log, sizeof log, "%s/synth.txt", dir);
    snprintf(data, datalen, "%s/data/dataset.json", dir);
    return check(e2e_run(cmd, log) == 0, "synth renders the small dataset (3 sequences of 12 frames, 64x32)",
                 "see %s", log) ? 0 : -1;
}

int tr_config(const char *path, const char *run, const char *model, const char *optim)
{
    char text[4096];
    snprintf(text, sizeof text,
             "{ \"run\": { \"name\": \"t\", \"seed\": 3, \"threads\": 1, \"log_every\": 1%s%s },\n"
             "  \"data\": { \"width\": 64, \"height\": 32, \"batch\": 1, \"frame_offsets\": [1],\n"
             "            \"video\": true, \"duplicate_threshold\": 0 },\n"
             "  \"model\": { \"width\": 0.25, \"stages\": 4, \"pose_width\": 0.25, \"pose_stages\": 3%s%s },\n"
             "  \"optim\": { %s } }\n",
             run[0] ? ", " : "", run, model[0] ? ", " : "", model, optim);
    return e2e_write(path, text);
}

pid_t tr_start(const char *log, const char *fmt, ...)
{
    char line[4096];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(line, sizeof line, fmt, ap);
    va_end(ap);
    char *argv[64];
    int n = 0;
    argv[n++] = "nightjar";
    for (char *t = strtok(line, " "); t && n < 63; t = strtok(NULL, " ")) argv[n++] = t;
    argv[n] = NULL;
    return rs_spawn(argv, log, NULL);
}

int tr_wait(pid_t pid, double guard_s)
{
    if (pid < 0) return -1;
    double t0 = rs_now();
    for (;;) {
        int st;
        pid_t r = waitpid(pid, &st, WNOHANG);
        if (r == pid) return WIFEXITED(st) ? WEXITSTATUS(st) : 128 + WTERMSIG(st);
        if (r < 0) return -1;
        if (rs_now() - t0 > guard_s) {
            kill(pid, SIGKILL);
            waitpid(pid, &st, 0);
            return -2;
        }
        rs_sleep_ms(20);
    }
}

/* Calls fn on every complete line of RUN/log.jsonl parsed as JSON. */
static int each_record(const char *run, void (*fn)(const cJSON *, void *), void *ctx)
{
    char path[1024];
    snprintf(path, sizeof path, "%s/log.jsonl", run);
    char *text = e2e_slurp(path, NULL);
    if (!text) return -1;
    char *save = NULL;
    for (char *line = strtok_r(text, "\n", &save); line; line = strtok_r(NULL, "\n", &save)) {
        cJSON *j = cJSON_Parse(line);
        if (j) fn(j, ctx);
        cJSON_Delete(j);
    }
    free(text);
    return 0;
}

static const char *type_of(const cJSON *j)
{
    return cJSON_GetStringValue(cJSON_GetObjectItemCaseSensitive(j, "type"));
}

static double number_of(const cJSON *j, const char *key)
{
    const cJSON *v = cJSON_GetObjectItemCaseSensitive(j, key);
    return cJSON_IsNumber(v) ? v->valuedouble : -1;
}

static void end_fn(const cJSON *j, void *ctx)
{
    tr_end *e = ctx;
    const char *t = type_of(j);
    if (!t || strcmp(t, "end")) return;
    e->step = (long)number_of(j, "step");
    e->elapsed = number_of(j, "elapsed_s");
    const char *s = cJSON_GetStringValue(cJSON_GetObjectItemCaseSensitive(j, "ended"));
    snprintf(e->ended, sizeof e->ended, "%s", s ? s : "");
}

int tr_end_record(const char *run, tr_end *e)
{
    memset(e, 0, sizeof *e);
    e->step = -1;
    if (each_record(run, end_fn, e)) return -1;
    return e->step >= 0 ? 0 : -1;
}

typedef struct { long *step; double *photo; int n, max; } val_ctx;

static void val_fn(const cJSON *j, void *ctx)
{
    val_ctx *v = ctx;
    const char *t = type_of(j);
    if (!t || strcmp(t, "val") || v->n >= v->max) return;
    v->step[v->n] = (long)number_of(j, "step");
    v->photo[v->n] = number_of(j, "photometric");
    v->n++;
}

int tr_vals(const char *run, long *step, double *photometric, int max)
{
    val_ctx v = {step, photometric, 0, max};
    return each_record(run, val_fn, &v) ? -1 : v.n;
}

static int cmp_long(const void *a, const void *b)
{
    long x = *(const long *)a, y = *(const long *)b;
    return (x > y) - (x < y);
}

int tr_numbered(const char *run, long *steps, int max)
{
    DIR *d = opendir(run);
    int n = 0;
    if (!d) return 0;
    struct dirent *e;
    while ((e = readdir(d)) && n < max) {
        const char *s = e->d_name;
        if (strlen(s) != 18 || strncmp(s, "step-", 5) || strcmp(s + 13, ".ckpt")) continue;
        int digits = 1;
        for (int i = 5; i < 13; i++) digits &= s[i] >= '0' && s[i] <= '9';
        if (digits) steps[n++] = strtol(s + 5, NULL, 10);
    }
    closedir(d);
    qsort(steps, (size_t)n, sizeof *steps, cmp_long);
    return n;
}

int tr_dump_motions_gap(const char *ckpt, const char *images, int nframes, int gap, const char *out, char *err,
                       size_t len)
{
    nj_model m;
    nj_train_config cfg;
    if (nj_checkpoint_load(ckpt, &m, &cfg, NULL, err, len)) return -1;
    nj_threads_init(1);          /* as eval --threads 1: the same summation order */
    nj_infer in;
    if (nj_infer_init(&in, &m, cfg.width, cfg.height, err, len)) {
        nj_model_free(&m);
        return -1;
    }
    FILE *f = fopen(out, "wb");
    int rc = f ? 0 : -1;
    if (!f) snprintf(err, len, "%s: cannot write", out);
    for (int i = gap; rc == 0 && i < nframes; i++) {
        char p[1024];
        nj_image a = {0, 0, NULL}, b = {0, 0, NULL};
        snprintf(p, sizeof p, "%s/%06d.png", images, i - gap);
        rc = nj_image_load(p, &a, err, len);
        snprintf(p, sizeof p, "%s/%06d.png", images, i);
        if (rc == 0) rc = nj_image_load(p, &b, err, len);
        double T[12];
        if (rc == 0 && nj_infer_motion(&in, &a, &b, NULL, T, err, len)) rc = -1;
        if (rc == 0 && fwrite(T, sizeof(double), 12, f) != 12) {
            snprintf(err, len, "%s: write failed", out);
            rc = -1;
        }
        if (a.data) nj_image_free(&a);
        if (b.data) nj_image_free(&b);
    }
    if (f && fclose(f) && rc == 0) rc = -1;
    nj_infer_free(&in);
    nj_model_free(&m);
    return rc;
}

int tr_dump_motions(const char *ckpt, const char *images, int nframes, const char *out, char *err, size_t len)
{
    return tr_dump_motions_gap(ckpt, images, nframes, 1, out, err, len);
}

static cJSON *load_json(const char *path)
{
    char *s = e2e_slurp(path, NULL);
    cJSON *j = s ? cJSON_Parse(s) : NULL;
    free(s);
    return j;
}

/* 1 when each of keys[0..n) is on both sides or on neither, and equal within
 * tol·(1 + |ref|) where present; else 0 with the first difference in why. */
static int optional_figures(const cJSON *pose, const cJSON *r, const char *const *keys, int n, double tol, char *why,
                            size_t len)
{
    for (int k = 0; k < n; k++) {
        const cJSON *av = cJSON_GetObjectItemCaseSensitive(pose, keys[k]);
        const cJSON *bv = cJSON_GetObjectItemCaseSensitive(r, keys[k]);
        double a = number_of(pose, keys[k]), b = number_of(r, keys[k]);
        if (!(!av == !bv && (!av || (cJSON_IsNumber(av) && fabs(a - b) <= tol * (1 + fabs(b)))))) {
            snprintf(why, len, "%s: eval %s%.9g, reference %s%.9g", keys[k], av ? "" : "(absent) ", a,
                     bv ? "" : "(absent) ", b);
            return 0;
        }
    }
    return 1;
}

int tr_pose_matches(const char *metrics, const char *ref, double tol, char *why, size_t len)
{
    static const char *const COUNTS[3] = {"snippets", "pairs", "frame_step"};
    static const char *const FIGURES[24] = {"ate", "ate_std", "rmse", "scale_mean", "rotation_error_deg",
                                            "rotation_true_deg", "pitch_mean_error_deg", "pitch_rms_error_deg",
                                            "pitch_true_rms_deg", "yaw_mean_error_deg", "yaw_rms_error_deg",
                                            "yaw_true_rms_deg", "roll_mean_error_deg", "roll_rms_error_deg",
                                            "roll_true_rms_deg", "pitch_true_mean_deg", "yaw_true_mean_deg",
                                            "roll_true_mean_deg", "pitch_slope", "yaw_slope", "roll_slope",
                                            "pitch_correlation", "yaw_correlation", "roll_correlation"};
    cJSON *m = load_json(metrics), *r = load_json(ref);
    const cJSON *pose = cJSON_GetObjectItemCaseSensitive(m, "pose");
    int ok = pose && r;
    if (!ok) snprintf(why, len, "%s", !m ? "no metrics" : !pose ? "metrics.json has no pose block" : "no reference");
    for (int k = 0; ok && k < 3 + (int)(sizeof FIGURES / sizeof FIGURES[0]); k++) {
        const char *key = k < 3 ? COUNTS[k] : FIGURES[k - 3];
        double a = number_of(pose, key), b = number_of(r, key);
        const cJSON *av = cJSON_GetObjectItemCaseSensitive(pose, key);
        /* the per-axis fit (slope, correlation: the last 6 figures) divides by
         * the true component's variance: on test_predict_cli's 6 pairs of one
         * steady turn the yaw's is 3.8e-5 of its mean square, which turns the
         * two sides' double rounding of the true motions into 5e-8 of the slope */
        int nfig = (int)(sizeof FIGURES / sizeof FIGURES[0]);
        double t = k >= 3 + nfig - 6 ? 1e-6 : tol;
        int same = cJSON_IsNumber(av) && (k < 3 ? a == b : fabs(a - b) <= t * (1 + fabs(b)));
        if (!same) {
            snprintf(why, len, "%s: eval %.9g, reference %.9g", key, a, b);
            ok = 0;
        }
    }
    /* the stopped- and moving-camera figures: present on both sides or on neither */
    static const char *const PAIR_FIGURES[8] = {"still_pairs", "moving_rotation_error_deg", "still_rotation_deg",
                                                "still_translation_ratio", "heading_error_deg",
                                                "heading_elevation_mean_error_deg", "heading_elevation_true_mean_deg",
                                                "heading_azimuth_mean_error_deg"};
    ok = ok && optional_figures(pose, r, PAIR_FIGURES, 8, tol, why, len);
    /* the gap figures: compared where the reference had the two-gap motions
     * (tr_dump_motions_gap); eval always writes gap_triples */
    static const char *const GAP_FIGURES[3] = {"gap_triples", "gap_translation_ratio", "gap_translation_ratio_true"};
    ok = ok && (!cJSON_GetObjectItemCaseSensitive(r, "gap_triples") ||
                optional_figures(pose, r, GAP_FIGURES, 3, tol, why, len));
    cJSON_Delete(m);
    cJSON_Delete(r);
    return ok;
}

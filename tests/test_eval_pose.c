/* tests/test_eval_pose.c — `nightjar eval`'s camera-motion figures end to end,
 * on the small synthetic dataset (tests/train_runs.h; the test split,
 * yard-02, has 12 frames with ground-truth poses: 8 five-frame snippets and
 * 11 frame pairs) with a model trained 6 steps and the untrained network of
 * the same seed, built in this process through the library.
 *  - metrics.json has the pose block with every key, finite figures and the
 *    expected counts;
 *  - each figure equals NumPy/SciPy's computation (tests/ref/eval_pose_ref.py)
 *    from the poses file parsed there and the model's motions between
 *    consecutive frames taken from the library here (the checkpoint loaded,
 *    nj_infer_motion), for both models: snippets, alignment, least-squares
 *    scale, averaging and rotation angles are all recomputed outside;
 *  - the figures follow the model: the trained and the untrained model's
 *    differ, while the true rotation (ground truth only) is the same;
 *  - a stopped camera: with the test sequence's poses of frames 6–8 made
 *    equal to frame 5's (three pairs without motion), eval counts three
 *    stopped-camera pairs and its figures for them (predicted rotation,
 *    predicted translation against the moving pairs') and the moving pairs'
 *    rotation error equal the reference's;
 *  - the depth baselines: the trained model's "baseline_untrained" block
 *    equals the metrics of the untrained checkpoint made here evaluated as a
 *    model, and differs from the trained model's own metrics;
 *  - a model trained on frame offsets [2] is driven on every 2nd frame (its
 *    pose net learnt the motion over two frames and gives it for any pair):
 *    frame_step 2, 6 frames, 2 snippets and 5 pairs, every figure equal to
 *    the reference's from every 2nd pose and the model's motions between
 *    every 2nd frame. */
#include "tests/check.h"
#include "tests/e2e_support.h"
#include "tests/torch_ref.h"
#include "tests/train_runs.h"
#include "train/loop/checkpoint.h"
#include <cjson/cJSON.h>
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#define FRAMES 12

static char dir[256], data[512];

static const char *const POSE_KEYS[10] = {"ate", "ate_std", "rmse", "scale_mean", "snippets", "snippet_frames",
                                          "rotation_error_deg", "rotation_true_deg", "pairs", "protocol"};
static const char *const DEPTH_KEYS[7] = {"absrel", "sqrel", "rmse", "rmse_log", "delta_1_25", "delta_1_25_2",
                                          "delta_1_25_3"};

static cJSON *load_json(const char *path)
{
    char *s = e2e_slurp(path, NULL);
    cJSON *j = s ? cJSON_Parse(s) : NULL;
    free(s);
    return j;
}

static double num(const cJSON *o, const char *k)
{
    const cJSON *v = cJSON_GetObjectItemCaseSensitive(o, k);
    return cJSON_IsNumber(v) ? v->valuedouble : NAN;
}

/* The untrained network of the trained checkpoint's seed and architecture,
 * saved as a checkpoint with the same configuration. */
static int make_untrained(const char *trained, const char *out)
{
    nj_model m, u;
    nj_train_config cfg;
    nj_train_state st;
    char err[512];
    if (nj_checkpoint_load(trained, &m, &cfg, &st, err, sizeof err)) {
        printf("# %s\n", err);
        return -1;
    }
    int rc = nj_model_init(&u, &m.cfg, err, sizeof err);
    if (rc == 0) {
        memset(&st, 0, sizeof st);
        st.best_val = INFINITY;
        st.lr_scale = 1;
        rc = nj_checkpoint_save(out, &u, &cfg, &st, err, sizeof err);
        nj_model_free(&u);
    }
    if (rc) printf("# %s\n", err);
    nj_model_free(&m);
    return rc;
}

/* Frames 6–8 of the test sequence's poses file set to frame 5's pose: the
 * camera stands still from frame 5 to 8. */
static int stop_camera(void)
{
    char path[600], line[FRAMES][512];
    snprintf(path, sizeof path, "%s/data/yard-02/poses.txt", dir);
    FILE *f = fopen(path, "r");
    int n = 0;
    while (f && n < FRAMES && fgets(line[n], sizeof line[n], f)) n++;
    if (f) fclose(f);
    if (n != FRAMES || !(f = fopen(path, "w"))) return -1;
    for (int i = 0; i < FRAMES; i++) fputs(line[i >= 6 && i <= 8 ? 5 : i], f);
    return fclose(f);
}

static int eval_model(const char *ckpt, const char *out)
{
    char cmd[2048], log[700];
    snprintf(cmd, sizeof cmd, "%s eval --model %s --data %s --out %s --threads 1", e2e_bin(), ckpt, data, out);
    snprintf(log, sizeof log, "%s.log", out);
    return e2e_run(cmd, log);
}

/* The pose block of `metrics` against the reference from the poses file and
 * the model's motions between every `step`-th frame of the test sequence. */
static void pose_block(const char *tag, const char *metrics, const char *ckpt, int step)
{
    char name[300], motions[600], rel[700], ref[700], args[2400], why[512] = "", err[512] = "";
    int frames = (FRAMES - 1) / step + 1;
    cJSON *j = load_json(metrics);
    const cJSON *p = cJSON_GetObjectItemCaseSensitive(j, "pose");
    int keys = cJSON_IsObject(p), finite = keys;
    for (int k = 0; keys && k < 10; k++) {
        const cJSON *v = cJSON_GetObjectItemCaseSensitive(p, POSE_KEYS[k]);
        keys &= k == 9 ? cJSON_IsString(v) : cJSON_IsNumber(v);
        finite &= k == 9 || isfinite(num(p, POSE_KEYS[k]));
    }
    snprintf(name, sizeof name, "%s: metrics.json has the pose block, finite, %d snippets of 5 frames, %d pairs "
             "%d frames apart", tag, frames - 4, frames - 1, step);
    check(keys && finite && num(p, "snippets") == frames - 4 && num(p, "snippet_frames") == 5 &&
              num(p, "pairs") == frames - 1 && num(p, "frame_step") == step, name,
          "keys %d finite %d snippets %g frames %g pairs %g frame_step %g (%s)", keys, finite, num(p, "snippets"),
          num(p, "snippet_frames"), num(p, "pairs"), num(p, "frame_step"), metrics);
    printf("info: %s: %g of the pairs are of a stopped camera\n", tag, num(p, "still_pairs"));
    cJSON_Delete(j);
    snprintf(motions, sizeof motions, "%s/motions-%s", dir, tag);
    snprintf(rel, sizeof rel, "%s/yard-02.rel.f64", motions);
    snprintf(ref, sizeof ref, "%s/pose-ref-%s.json", dir, tag);
    snprintf(args, sizeof args, "mkdir -p %s", motions);
    int ok = system(args) == 0;
    char images[700];
    if (step == 1) snprintf(images, sizeof images, "%s/data/yard-02/cam0", dir);
    else {   /* every step-th frame, renumbered, for tr_dump_motions */
        snprintf(images, sizeof images, "%s/every%d", motions, step);
        ok = ok && (mkdir(images, 0755) == 0 || errno == EEXIST);
        for (int i = 0; ok && i < frames; i++) {
            char from[800], to[800];
            snprintf(from, sizeof from, "%s/data/yard-02/cam0/%06d.png", dir, step * i);
            snprintf(to, sizeof to, "%s/%06d.png", images, i);
            unlink(to);
            ok = symlink(from, to) == 0;
        }
    }
    ok = ok && tr_dump_motions(ckpt, images, frames, rel, err, sizeof err) == 0;
    char rel2[700];
    snprintf(rel2, sizeof rel2, "%s/yard-02.rel2.f64", motions);
    ok = ok && tr_dump_motions_gap(ckpt, images, frames, 2, rel2, err, sizeof err) == 0;
    snprintf(args, sizeof args, "/usr/bin/python3 tests/ref/eval_pose_ref.py %s test %s %s %d", data, motions, ref,
             step);
    ok = ok && system(args) == 0;
    snprintf(name, sizeof name, "%s: eval's ATE, RMS, scale and rotation figures = numpy/scipy from the poses file "
             "and the model's motions", tag);
    int same = ok && tr_pose_matches(metrics, ref, 1e-9, why, sizeof why);
    check(same, name, "%s", ok ? why : err[0] ? err : "reference failed (tests/ref/eval_pose_ref.py)");
    /* the gap figures are compared only where the reference has them: make sure it does */
    cJSON *rj = load_json(ref);
    double triples = num(rj, "gap_triples"), ratio = num(rj, "gap_translation_ratio");
    snprintf(name, sizeof name, "%s: the gap figures (frames %d apart over their two halves) are compared, over "
             "moving triples", tag, 2 * step);
    check(ok && triples > 0 && isfinite(ratio) && isfinite(num(rj, "gap_translation_ratio_true")), name,
          "reference gap_triples %g, ratio %g", triples, ratio);
    cJSON_Delete(rj);
}

int main(void)
{
    if (tr_setup("evalpose", dir, sizeof dir, data, sizeof data)) return test_exit();
    char cfg[600], log[600], trained[700], untrained[700], mt[700], mu[700];
    snprintf(cfg, sizeof cfg, "%s/train.json", dir);
    snprintf(log, sizeof log, "%s/train.log", dir);
    tr_config(cfg, "\"validate_every\": 0, \"checkpoint_minutes\": 1000, \"max_steps\": 6", "",
              "\"lr\": 1e-3, \"warmup_steps\": 0");
    int rc = tr_wait(tr_start(log, "train --config %s --data %s --out %s/run", cfg, data, dir), 600);
    snprintf(trained, sizeof trained, "%s/run/final.ckpt", dir);
    snprintf(untrained, sizeof untrained, "%s/untrained.ckpt", dir);
    if (!check(rc == 0, "a 6-step training run", "exit %d, see %s", rc, log) ||
        !check(make_untrained(trained, untrained) == 0, "the untrained network of the same seed, saved here",
               "see above"))
        return test_exit();
    snprintf(mt, sizeof mt, "%s/metrics-trained.json", dir);
    snprintf(mu, sizeof mu, "%s/metrics-untrained.json", dir);
    int rt = eval_model(trained, mt), ru = eval_model(untrained, mu);
    if (!check(rt == 0 && ru == 0, "eval on the trained and on the untrained checkpoint", "exits %d %d (logs %s.log, %s.log)",
               rt, ru, mt, mu))
        return test_exit();
    pose_block("trained", mt, trained, 1);
    pose_block("untrained", mu, untrained, 1);

    cJSON *a = load_json(mt), *b = load_json(mu);
    const cJSON *pa = cJSON_GetObjectItemCaseSensitive(a, "pose"), *pb = cJSON_GetObjectItemCaseSensitive(b, "pose");
    double ea = num(pa, "ate"), eb = num(pb, "ate"), ra = num(pa, "rotation_error_deg"),
           rb = num(pb, "rotation_error_deg");
    checkv(fabs(ea - eb) > 1e-6 * eb && fabs(ra - rb) > 1e-6 * rb &&
               num(pa, "rotation_true_deg") == num(pb, "rotation_true_deg"),
           "the pose figures follow the model: trained and untrained differ, the true rotation is the same",
           "ATE %.6g vs %.6g, rotation error %.6g vs %.6g deg, true rotation %.6g vs %.6g deg", ea, eb, ra, rb,
           num(pa, "rotation_true_deg"), num(pb, "rotation_true_deg"));
    const cJSON *base = cJSON_GetObjectItemCaseSensitive(a, "baseline_untrained");
    int equal = cJSON_IsObject(base), differ = 0;
    char why[256] = "";
    for (int k = 0; equal && k < 7; k++) {
        double x = num(base, DEPTH_KEYS[k]), y = num(b, DEPTH_KEYS[k]), m = num(a, DEPTH_KEYS[k]);
        if (!(fabs(x - y) <= 1e-12 * (1 + fabs(y)))) {
            equal = 0;
            snprintf(why, sizeof why, "%s: baseline %.9g, untrained checkpoint %.9g", DEPTH_KEYS[k], x, y);
        }
        differ |= fabs(m - x) > 1e-6 * (1 + fabs(x));
    }
    check(equal, "the trained run's untrained baseline = the untrained network made here, evaluated as a model",
          "%s", why[0] ? why : "no baseline_untrained block");
    check(differ, "the trained model's depth metrics differ from its untrained baseline",
          "absrel %.9g vs %.9g", num(a, "absrel"), num(base, "absrel"));
    cJSON_Delete(a);
    cJSON_Delete(b);

    char ms[700];
    snprintf(ms, sizeof ms, "%s/metrics-stopped.json", dir);
    if (check(stop_camera() == 0 && eval_model(trained, ms) == 0, "eval with the camera stopped for frames 5-8",
              "see %s.log", ms)) {
        pose_block("stopped", ms, trained, 1);
        cJSON *c = load_json(ms);
        const cJSON *pc = cJSON_GetObjectItemCaseSensitive(c, "pose");
        checkv(num(pc, "still_pairs") == 3 && num(pc, "still_translation_ratio") > 0,
               "stopped camera: three stopped pairs, the model's motion there reported",
               "%g pairs; predicted rotation %.4g deg, translation %.4g of a moving pair's; moving pairs' rotation "
               "error %.4g deg", num(pc, "still_pairs"), num(pc, "still_rotation_deg"),
               num(pc, "still_translation_ratio"), num(pc, "moving_rotation_error_deg"));
        cJSON_Delete(c);
    }

    /* a model trained on frames 2 apart (the stopped camera's poses stay: the
     * pairs 4-6 and 6-8 of the every-2nd-frame sequence have no or half motion) */
    char cfg2[700], log2[700], run2[700], m2[700], cmd[2400];
    snprintf(cfg2, sizeof cfg2, "%s/train2.json", dir);
    snprintf(log2, sizeof log2, "%s/train2.log", dir);
    snprintf(run2, sizeof run2, "%s/run2/final.ckpt", dir);
    snprintf(m2, sizeof m2, "%s/metrics-step2.json", dir);
    tr_config(cfg2, "\"validate_every\": 0, \"checkpoint_minutes\": 1000, \"max_steps\": 6", "",
              "\"lr\": 1e-3, \"warmup_steps\": 0");
    snprintf(cmd, sizeof cmd, "sed -i 's/\"frame_offsets\": \\[1\\]/\"frame_offsets\": [2]/' %s && grep -q '\\[2\\]' %s",
             cfg2, cfg2);
    int r2 = system(cmd) ? -1 : tr_wait(tr_start(log2, "train --config %s --data %s --out %s/run2", cfg2, data, dir), 600);
    if (check(r2 == 0 && eval_model(run2, m2) == 0, "a model trained on frame offsets [2], and eval on it",
              "exit %d, see %s and %s.log", r2, log2, m2))
        pose_block("offset-2", m2, run2, 2);

    if (!test_failures()) ref_rmtree(dir);
    else printf("# kept %s for inspection\n", dir);
    return test_exit();
}

/* tests/test_predict_cli.c — `nightjar predict` and `nightjar eval` end to end.
 *
 * Setup: a tiny synthetic dataset (nj_synth_run: 3 sequences, 7 frames of
 * 64×48, split train/val/test) and small models saved with
 * nj_checkpoint_save — a monocular video model (network input 64×32, so
 * inputs are resized and disparities upsampled), untrained (seed 7), the
 * same with every weight moved by a seeded uniform ±0.02 (its config still
 * says seed 7: a "trained" model whose untrained network is the first one),
 * and an untrained stereo-only one.
 * ./nightjar is run with system().
 *
 * Sources of truth:
 *   - predict's outputs read back by independent code: NumPy for .npy and
 *     for the PLY (tests/ref/ply_read.py parses the file and recomputes the
 *     back-projection with the stated default intrinsics), the 16-bit PNG
 *     compared with round(1000·depth);
 *   - eval's table recomputed by NumPy (tests/ref/metrics_eval.py) from the
 *     ground-truth files and predict's depth maps: the model's and the
 *     constant baseline's metrics and pixel counts;
 *   - eval's untrained baseline of the moved model is the network of its
 *     seed: its metrics equal NumPy's on the depth maps predict writes with
 *     the untrained checkpoint built here through the library, and differ
 *     from the moved model's own;
 *   - eval's pose figures recomputed by NumPy/SciPy
 *     (tests/ref/eval_pose_ref.py) from the poses file and the model's
 *     motions taken from the library here (tests/train_runs.h);
 *   - the contract: output names, metrics.json keys, scaling names (median
 *     for the monocular model, metric for the stereo one, camera_height with
 *     --camera-height), notes and the safety caution in the output; bad
 *     inputs → one line on stderr and a non-zero exit.
 */
#include "data/depthio.h"
#include "data/image.h"
#include "data/npy.h"
#include "data/synth.h"
#include "tests/check.h"
#include "tests/e2e_support.h"
#include "tests/test_data_util.h"
#include "tests/train_runs.h"
#include "nn/rng.h"
#include "train/loop/checkpoint.h"
#include <cjson/cJSON.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#define NFRAMES 7
#define FW 64
#define FH 48

static char dir[64], bin[1024], refdir[1024];

/* ---- helpers ---------------------------------------------------------------- */

static int count_lines(const char *s)
{
    int n = 0;
    for (; s && *s; s++) n += *s == '\n';
    return n;
}

/* Runs "nightjar ARGS", stdout and stderr into DIR/out.txt and DIR/err.txt.
 * Returns the exit status. */
static int run(const char *args)
{
    char cmd[8192];
    snprintf(cmd, sizeof cmd, "'%s' %s > '%s/out.txt' 2> '%s/err.txt'", bin, args, dir, dir);
    int rc = system(cmd);
    return rc == -1 ? -1 : (rc >> 8) & 0xff;
}

static char *output(const char *which)
{
    char p[256];
    snprintf(p, sizeof p, "%s/%s.txt", dir, which);
    return e2e_slurp(p, NULL);
}

static int file_exists(const char *path)
{
    struct stat st;
    return stat(path, &st) == 0 && S_ISREG(st.st_mode);
}

/* ./nightjar from the working directory or beside build/tests/. */
static void find_paths(const char *argv0)
{
    const char *slash = strrchr(argv0, '/');
    int len = slash ? (int)(slash - argv0) : 1;
    snprintf(bin, sizeof bin, "%s", e2e_bin());
    if (!getenv("NJ_BIN") && access(bin, X_OK) != 0) snprintf(bin, sizeof bin, "%.*s/../../nightjar", len, slash ? argv0 : ".");
    char p[1024];
    tdu_ref_path(argv0, "ply_read.py", p, sizeof p);
    snprintf(refdir, sizeof refdir, "%.*s", (int)(strrchr(p, '/') - p), p);
}

static int make_checkpoint(const char *path, int stereo)
{
    nj_train_config cfg;
    nj_train_config_default(&cfg);
    cfg.width = 64;
    cfg.height = 32;
    cfg.seed = 7;
    cfg.model.seed = 7;
    cfg.model.stages = 4;
    cfg.model.width = 0.25f;
    cfg.model.pose_width = 0.25f;
    cfg.model.pose_stages = 3;
    cfg.stereo = stereo;
    cfg.video = !stereo;
    cfg.model.pose = !stereo;
    cfg.model.depth_range = (nj_depth_range){0.1f, 100.0f};
    nj_model m;
    nj_train_state st;
    memset(&st, 0, sizeof st);
    st.best_val = INFINITY;
    char err[512];
    if (nj_model_init(&m, &cfg.model, err, sizeof err)) {
        printf("model: %s\n", err);
        return -1;
    }
    int rc = nj_checkpoint_save(path, &m, &cfg, &st, err, sizeof err);
    if (rc) printf("checkpoint: %s\n", err);
    nj_model_free(&m);
    return rc;
}

/* mono.ckpt with every parameter moved by a seeded uniform ±0.02, the
 * stored configuration (seed 7) unchanged. */
static int make_moved(const char *from, const char *to)
{
    nj_model m;
    nj_train_config cfg;
    nj_train_state st;
    char err[512];
    if (nj_checkpoint_load(from, &m, &cfg, &st, err, sizeof err)) {
        printf("moved: %s\n", err);
        return -1;
    }
    nj_rng r;
    nj_rng_seed(&r, 99);
    for (int i = 0; i < m.params.count; i++)
        for (size_t k = 0; k < nj_param_numel(m.params.items[i]); k++)
            m.params.items[i]->data[k] += (float)(0.04 * nj_rng_uniform(&r) - 0.02);
    int rc = nj_checkpoint_save(to, &m, &cfg, &st, err, sizeof err);
    if (rc) printf("moved: %s\n", err);
    nj_model_free(&m);
    return rc;
}

static int setup(void)
{
    char data[256], err[512];
    if (tdu_tmpdir(dir, sizeof dir)) return -1;
    nj_synth_config sc;
    nj_synth_config_default(&sc);
    snprintf(data, sizeof data, "%s/data", dir);
    sc.out = data;
    sc.frames = NFRAMES;
    sc.sequences = 3;
    sc.width = FW;
    sc.height = FH;
    if (nj_synth_run(&sc, err, sizeof err)) {
        printf("synth: %s\n", err);
        return -1;
    }
    char mono[256], moved[256], stereo[256];
    snprintf(mono, sizeof mono, "%s/mono.ckpt", dir);
    snprintf(moved, sizeof moved, "%s/moved.ckpt", dir);
    snprintf(stereo, sizeof stereo, "%s/stereo.ckpt", dir);
    return make_checkpoint(mono, 0) || make_moved(mono, moved) || make_checkpoint(stereo, 1) ? -1 : 0;
}

/* ---- predict ------------------------------------------------------------------ */

static void check_depth_outputs(const char *stem, float *median_out)
{
    char p[512], err[512] = "", name[160];
    float *d = NULL, *d16 = NULL;
    int shape[4] = {0}, nd = 0, w = 0, h = 0;
    snprintf(p, sizeof p, "%s/pred/%s.depth.npy", dir, stem);
    int rc = nj_npy_read(p, &d, shape, &nd, err, sizeof err);
    int ok = rc == 0 && nd == 2 && shape[0] == FH && shape[1] == FW;
    int in_range = ok, varies = 0;
    for (int i = 0; ok && i < FW * FH; i++) {
        in_range &= d[i] >= 0.0999f && d[i] <= 100.01f;
        varies |= d[i] != d[0];
    }
    snprintf(name, sizeof name, "predict %s: depth.npy is %dx%d float32 in the model's range", stem, FW, FH);
    check(ok && in_range && varies, name, "rc %d (%s) nd %d shape %dx%d range %d varies %d", rc, err, nd,
          shape[0], shape[1], in_range, varies);
    snprintf(p, sizeof p, "%s/pred/%s.depth16.png", dir, stem);
    rc = ok ? nj_png16_depth_read(p, 1.0f, &d16, &w, &h, err, sizeof err) : -1;
    int match = rc == 0 && w == FW && h == FH;
    for (int i = 0; match && i < FW * FH; i++) {
        double mm = fmin(round((double)d[i] * 1000.0), 65535.0);
        match = d16[i] == (float)mm;
    }
    snprintf(name, sizeof name, "predict %s: depth16.png = round(1000*depth), saturated", stem);
    check(match, name, "rc %d (%s) %dx%d", rc, err, w, h);
    snprintf(p, sizeof p, "%s/pred/%s.preview.png", dir, stem);
    w = h = 0;
    nj_image im = {0, 0, NULL};
    rc = nj_image_load(p, &im, err, sizeof err);
    int coloured = 0;
    for (size_t i = 0; rc == 0 && i < (size_t)im.w * im.h; i++)
        coloured |= im.data[i] != im.data[(size_t)im.w * im.h + i];
    snprintf(name, sizeof name, "predict %s: preview.png %dx%d and coloured", stem, FW, FH);
    check(rc == 0 && im.w == FW && im.h == FH && coloured, name, "rc %d (%s) %dx%d", rc, err, im.w, im.h);
    nj_image_free(&im);
    if (median_out && d) *median_out = d[0];
    free(d);
    free(d16);
}

static void check_ply(const char *stem)
{
    char ply[512], dnpy[512], frame[512], inpy[512], res[512], args[4096], err[512] = "", name[128];
    snprintf(ply, sizeof ply, "%s/pred/%s.points.ply", dir, stem);
    snprintf(dnpy, sizeof dnpy, "%s/pred/%s.depth.npy", dir, stem);
    snprintf(frame, sizeof frame, "%s/data/yard-02/cam0/%s.png", dir, stem);
    snprintf(inpy, sizeof inpy, "%s/frame.npy", dir);
    snprintf(res, sizeof res, "%s/ply.npy", dir);
    nj_image im = {0, 0, NULL};
    int shape[4] = {3, FH, FW}, nd = 0;
    int ok = nj_image_load(frame, &im, err, sizeof err) == 0 && nj_npy_write(inpy, im.data, shape, 3, err, sizeof err) == 0;
    nj_image_free(&im);
    /* the stated default: fx = fy = 0.8·W, cx = (W−1)/2, cy = (H−1)/2 */
    snprintf(args, sizeof args, "'%s' '%s' '%s' %.9g %.9g %.9g %.9g '%s'", ply, dnpy, inpy, 0.8 * FW, 0.8 * FW,
             0.5 * (FW - 1), 0.5 * (FH - 1), res);
    char script[1100];
    snprintf(script, sizeof script, "%s/ply_read.py", refdir);
    float *r = NULL;
    ok = ok && tdu_python(script, args) == 0 && nj_npy_read(res, &r, shape, &nd, err, sizeof err) == 0;
    snprintf(name, sizeof name, "predict %s: points.ply read by numpy matches depth + default intrinsics", stem);
    check(ok && r[0] == 1 && r[1] == FW * FH && r[2] == FW * FH && r[3] < 1e-6 && r[4] == 0 && r[5] == 0, name,
          "ok %d %s values %g %g %g %g %g %g", ok, err, r ? r[0] : -1, r ? r[1] : -1, r ? r[2] : -1, r ? r[3] : -1,
          r ? r[4] : -1, r ? r[5] : -1);
    free(r);
}

static void test_predict(void)
{
    char args[2048], name[64];
    snprintf(args, sizeof args, "predict --model '%s/mono.ckpt' --input '%s/data/yard-02/cam0' --out '%s/pred' --ply",
             dir, dir, dir);
    int rc = run(args);
    char *out = output("out"), *err = output("err");
    check(rc == 0, "predict on a folder exits 0", "status %d, stderr: %s", rc, err ? err : "");
    check(out && strstr(out, "up to") && strstr(out, "--camera-height"), "predict says monocular depth is up to scale",
          "stdout: %s", out ? out : "");
    check(out && strstr(out, "ASSUMING") && strstr(out, "0.8*W"), "predict states the assumed intrinsics",
          "stdout: %s", out ? out : "");
    check(out && strstr(out, "not a certified safety sensor"), "predict prints the safety caution", "stdout: %s",
          out ? out : "");
    free(out);
    free(err);
    for (int i = 0; i < NFRAMES; i++) {
        snprintf(name, sizeof name, "%06d", i);
        check_depth_outputs(name, NULL);
    }
    check_ply("000000");
    check_ply("000006");
}

static void test_predict_variants(void)
{
    char args[2048], p[512];
    /* one file, explicit camera, camera height: scaled or a stated warning */
    snprintf(args, sizeof args, "predict --model '%s/mono.ckpt' --input '%s/data/yard-00/cam0/000003.png' "
             "--out '%s/one/deeper' --camera 38.4,38.4,34.06,22.06 --camera-height 1.0", dir, dir, dir);
    int rc = run(args);
    char *out = output("out");
    snprintf(p, sizeof p, "%s/one/deeper/000003.depth.npy", dir);
    check(rc == 0 && file_exists(p) && out && !strstr(out, "ASSUMING") &&
          (strstr(out, "scaled to metres") != NULL) && strstr(out, "not a certified safety sensor"),
          "predict one file with --camera and --camera-height", "status %d stdout: %s", rc, out ? out : "");
    free(out);
    /* lens distortion on --camera: the frame is undistorted first and the view is stated */
    const char *lenses[2] = {"--camera 38.4,38.4,34.06,22.06,-0.1,0.01,0.001,-0.001",
                             "--fisheye --camera 38.4,38.4,34.06,22.06,0.01,0,0,0"};
    const char *kinds[2] = {"lens: radial-tangential; frames undistorted to pinhole fx", "lens: fisheye; frames undistorted to pinhole fx"};
    for (int k = 0; k < 2; k++) {
        snprintf(args, sizeof args, "predict --model '%s/mono.ckpt' --input '%s/data/yard-00/cam0/000003.png' "
                 "--out '%s/lens%d' %s --ply", dir, dir, dir, k, lenses[k]);
        rc = run(args);
        out = output("out");
        snprintf(p, sizeof p, "%s/lens%d/000003.points.ply", dir, k);
        check(rc == 0 && file_exists(p) && out && strstr(out, kinds[k]), k ? "predict --fisheye --camera with k1..k4"
              : "predict --camera with k1,k2,p1,p2", "status %d stdout: %s", rc, out ? out : "");
        free(out);
    }
    snprintf(args, sizeof args, "predict --model '%s/stereo.ckpt' --input '%s/data/yard-00/cam0/000001.png' --out '%s/st'",
             dir, dir, dir);
    rc = run(args);
    out = output("out");
    check(rc == 0 && out && strstr(out, "metric") && !strstr(out, "up to an") &&
          strstr(out, "not a certified safety sensor"), "predict with a stereo-trained model says metric",
          "status %d stdout: %s", rc, out ? out : "");
    free(out);
}

/* ---- eval --------------------------------------------------------------------- */

static const char *const KEYS[8] = {"absrel", "sqrel", "rmse", "rmse_log", "delta_1_25", "delta_1_25_2",
                                    "delta_1_25_3", "pixels"};

static int has_keys(const cJSON *o)
{
    int ok = cJSON_IsObject(o);
    for (int k = 0; ok && k < 8; k++) ok = cJSON_IsNumber(cJSON_GetObjectItemCaseSensitive(o, KEYS[k]));
    return ok;
}

static double num(const cJSON *o, const char *k)
{
    const cJSON *v = cJSON_GetObjectItemCaseSensitive(o, k);
    return cJSON_IsNumber(v) ? v->valuedouble : NAN;
}

/* The upper end of metrics.json's "scored_depth" [floor, cap] (--max-depth); NAN when malformed. */
static double scored_cap(const cJSON *o)
{
    const cJSON *r = cJSON_GetObjectItemCaseSensitive(o, "scored_depth");
    if (!cJSON_IsArray(r) || cJSON_GetArraySize(r) != 2 || !cJSON_IsNumber(cJSON_GetArrayItem(r, 0))) return NAN;
    const cJSON *cap = cJSON_GetArrayItem(r, 1);
    return cJSON_IsNumber(cap) ? cap->valuedouble : NAN;
}

static int same_metrics(const cJSON *a, const cJSON *b, double tol, char *why, size_t n)
{
    for (int k = 0; k < 8; k++) {
        double x = num(a, KEYS[k]), y = num(b, KEYS[k]);
        if (!(fabs(x - y) <= tol * (1 + fabs(y)))) {
            snprintf(why, n, "%s: %.9g vs %.9g", KEYS[k], x, y);
            return 0;
        }
    }
    return 1;
}

static cJSON *load_json(const char *path)
{
    char *s = e2e_slurp(path, NULL);
    cJSON *j = s ? cJSON_Parse(s) : NULL;
    free(s);
    return j;
}

/* metrics_eval.py on PRED_DIR (predict's depth maps of the test sequence). */
static cJSON *numpy_metrics(const char *pred_dir, const char *tag)
{
    char args[2048], refout[512], script[1100];
    snprintf(refout, sizeof refout, "%s/ref-%s.json", dir, tag);
    snprintf(script, sizeof script, "%s/metrics_eval.py", refdir);
    snprintf(args, sizeof args, "'%s/data/dataset.json' test 80 '%s' '%s'", dir, pred_dir, refout);
    return tdu_python(script, args) == 0 ? load_json(refout) : NULL;
}

static void test_eval(void)
{
    char args[2048], path[512], why[256] = "";
    /* the moved model's depth maps of the test sequence, for NumPy */
    snprintf(args, sizeof args, "predict --model '%s/moved.ckpt' --input '%s/data/yard-02/cam0' --out '%s/pred_moved'",
             dir, dir, dir);
    int rc = run(args);
    check(rc == 0, "predict with the moved model", "status %d", rc);
    snprintf(path, sizeof path, "%s/metrics.json", dir);
    snprintf(args, sizeof args, "eval --model '%s/moved.ckpt' --data '%s/data/dataset.json' --out '%s' --threads 1",
             dir, dir, path);
    rc = run(args);
    char *out = output("out"), *err = output("err");
    check(rc == 0 && out && strstr(out, "constant depth") && strstr(out, "untrained network") && strstr(out, "AbsRel"),
          "eval exits 0 and prints the table", "status %d stderr: %s", rc, err ? err : "");
    free(out);
    free(err);
    cJSON *j = load_json(path);
    const cJSON *c = cJSON_GetObjectItemCaseSensitive(j, "baseline_constant");
    const cJSON *u = cJSON_GetObjectItemCaseSensitive(j, "baseline_untrained");
    const cJSON *sc = cJSON_GetObjectItemCaseSensitive(j, "scaling");
    check(j && has_keys(j) && has_keys(c) && has_keys(u), "metrics.json has the contract keys (3 blocks)",
          "missing keys");
    check(cJSON_IsString(sc) && !strcmp(sc->valuestring, "median") &&
          cJSON_IsObject(cJSON_GetObjectItemCaseSensitive(j, "scale")), "monocular model: median scaling + scale spread",
          "scaling %s", cJSON_IsString(sc) ? sc->valuestring : "?");
    double px = num(j, "pixels");
    check(px > 0 && px == num(c, "pixels") && px == num(u, "pixels"), "all three scored on the same pixels",
          "%g %g %g", px, num(c, "pixels"), num(u, "pixels"));
    /* NumPy from the files: GT and predict's depth maps of the test sequence,
     * of the moved model (pred_moved) and of the untrained seed-7 network
     * built in this process (pred, from mono.ckpt) */
    char moved_dir[300], untrained_dir[300];
    snprintf(moved_dir, sizeof moved_dir, "%s/pred_moved", dir);
    snprintf(untrained_dir, sizeof untrained_dir, "%s/pred", dir);
    cJSON *ref = numpy_metrics(moved_dir, "moved"), *refu = numpy_metrics(untrained_dir, "untrained");
    const cJSON *rm = cJSON_GetObjectItemCaseSensitive(ref, "model"), *rc_ = cJSON_GetObjectItemCaseSensitive(ref, "constant");
    const cJSON *ru = cJSON_GetObjectItemCaseSensitive(refu, "model");
    check(ref && j && same_metrics(j, rm, 1e-5, why, sizeof why), "eval model metrics = numpy on predict's depth",
          "%s", ref ? why : "reference failed");
    why[0] = 0;
    check(ref && c && same_metrics(c, rc_, 1e-5, why, sizeof why), "eval constant baseline = numpy", "%s",
          ref ? why : "reference failed");
    why[0] = 0;
    check(refu && u && same_metrics(u, ru, 1e-5, why, sizeof why),
          "eval untrained baseline = numpy on the depth of the seed-7 network built here (mono.ckpt)", "%s",
          refu ? why : "reference failed");
    why[0] = 0;
    check(j && u && !same_metrics(j, u, 1e-6, why, sizeof why),
          "eval: the moved model's metrics differ from its untrained baseline", "absrel %.9g vs %.9g",
          num(j, "absrel"), num(u, "absrel"));
    /* the pose figures: NumPy/SciPy from the poses file and the moved model's motions */
    const cJSON *pose = cJSON_GetObjectItemCaseSensitive(j, "pose");
    char motions[300], rel[400], pref[400], img[400], e2[512] = "";
    snprintf(motions, sizeof motions, "%s/motions", dir);
    mkdir(motions, 0777);
    snprintf(rel, sizeof rel, "%s/yard-02.rel.f64", motions);
    snprintf(img, sizeof img, "%s/data/yard-02/cam0", dir);
    snprintf(pref, sizeof pref, "%s/pose-ref.json", dir);
    snprintf(args, sizeof args, "'%s/data/dataset.json' test '%s' '%s'", dir, motions, pref);
    char script[1100];
    snprintf(script, sizeof script, "%s/eval_pose_ref.py", refdir);
    char moved[300];
    snprintf(moved, sizeof moved, "%s/moved.ckpt", dir);
    int ok = tr_dump_motions(moved, img, NFRAMES, rel, e2, sizeof e2) == 0 && tdu_python(script, args) == 0;
    why[0] = 0;
    check(num(pose, "snippets") == NFRAMES - 4 && ok && tr_pose_matches(path, pref, 1e-9, why, sizeof why),
          "pose ATE, RMS, scale and rotation error over the test split's 5-frame snippets = numpy/scipy",
          "snippets %g; %s", num(pose, "snippets"), ok ? why : e2[0] ? e2 : "reference failed");
    cJSON_Delete(ref);
    cJSON_Delete(refu);
    cJSON_Delete(j);
}

static void test_eval_stereo(void)
{
    char args[2048], path[512];
    snprintf(path, sizeof path, "%s/m_stereo.json", dir);
    snprintf(args, sizeof args, "eval --model '%s/stereo.ckpt' --data '%s/data/dataset.json' --split val --max-depth 50 --out '%s'",
             dir, dir, path);
    int rc = run(args);
    cJSON *j = load_json(path);
    const cJSON *sc = cJSON_GetObjectItemCaseSensitive(j, "scaling");
    check(rc == 0 && j && has_keys(j) && cJSON_IsString(sc) && !strcmp(sc->valuestring, "metric") &&
          scored_cap(j) == 50 && !cJSON_GetObjectItemCaseSensitive(j, "pose"),
          "stereo-trained model: metric, --split val, --max-depth, no pose net", "status %d", rc);
    cJSON_Delete(j);
}

static void test_eval_camera_height(void)
{
    char args[2048], path[512];
    snprintf(path, sizeof path, "%s/m_height.json", dir);
    snprintf(args, sizeof args, "eval --model '%s/mono.ckpt' --data '%s/data/dataset.json' --camera-height 1.0 --out '%s'",
             dir, dir, path);
    int rc = run(args);
    cJSON *j = load_json(path);
    const cJSON *sc = cJSON_GetObjectItemCaseSensitive(j, "scaling");
    double scored = num(j, "images"), left = num(j, "images_without_ground_plane");
    check(rc == 0 && j && cJSON_IsString(sc) && !strcmp(sc->valuestring, "camera_height") &&
          num(j, "camera_height") == 1.0 && scored + left == NFRAMES &&
          num(cJSON_GetObjectItemCaseSensitive(j, "baseline_constant"), "images") == scored,
          "eval --camera-height: scaling camera_height, every image scored or counted as left out",
          "status %d images %g left out %g", rc, scored, left);
    cJSON_Delete(j);
}

/* ---- bad inputs ---------------------------------------------------------------- */

/* The dataset with a lens on every camera: coefficients k (radial-tangential). */
static int lens_dataset(const char *path, double k1)
{
    char src[512];
    snprintf(src, sizeof src, "%s/data/dataset.json", dir);
    cJSON *j = load_json(src), *seq;
    if (!j) return -1;
    cJSON_ArrayForEach(seq, cJSON_GetObjectItemCaseSensitive(j, "sequences"))
    {
        cJSON *lens = cJSON_AddObjectToObject(cJSON_GetObjectItemCaseSensitive(seq, "camera"), "lens");
        cJSON_AddStringToObject(lens, "model", "radial-tangential");
        cJSON_AddNumberToObject(lens, "k1", k1);
    }
    char *text = cJSON_Print(j);
    cJSON_Delete(j);
    int rc = text ? e2e_write(path, text) : -1;
    free(text);
    return rc;
}

/* eval resamples frames and ground truth through the lens: with all
 * coefficients 0 the view is the camera itself and the metrics are the
 * pinhole run's; with a real lens every frame is still scored. */
static void test_eval_lens(void)
{
    char data[512], args[2048], path[512], ref[512];
    snprintf(ref, sizeof ref, "%s/metrics.json", dir);
    for (int k = 0; k < 2; k++) {
        snprintf(data, sizeof data, "%s/data/lens%d.json", dir, k);
        snprintf(path, sizeof path, "%s/metrics_lens%d.json", dir, k);
        if (lens_dataset(data, k ? -0.05 : 0.0)) {
            check(0, "eval with a lens: dataset", "cannot write %s", data);
            return;
        }
        /* the model and threads of the pinhole metrics.json it is compared with */
        snprintf(args, sizeof args, "eval --model '%s/moved.ckpt' --data '%s' --out '%s' --threads 1", dir, data, path);
        int rc = run(args);
        cJSON *a = load_json(path), *b = load_json(ref);
        char why[256] = "";
        if (k == 0)
            check(rc == 0 && a && b && same_metrics(a, b, 1e-4, why, sizeof why) && num(a, "pixels") == num(b, "pixels"),
                  "eval with an all-zero lens scores as the pinhole camera (metrics within 1e-4)", "status %d %s", rc,
                  why);
        else
            check(rc == 0 && a && num(a, "images") == num(b, "images") && num(a, "pixels") > 0 &&
                      num(cJSON_GetObjectItemCaseSensitive(a, "pose"), "snippets") == NFRAMES - 4,
                  "eval with a lens (k1 -0.05): every frame and pose snippet scored in the undistorted view",
                  "status %d images %g vs %g", rc, num(a, "images"), num(b, "images"));
        cJSON_Delete(a);
        cJSON_Delete(b);
    }
}

static void expect_failure(const char *what, const char *args, int want)
{
    int rc = run(args);
    char *err = output("err"), name[160];
    snprintf(name, sizeof name, "bad input: %s", what);
    check(rc == want && count_lines(err) == 1 && strstr(err, "nightjar "), name, "status %d (want %d), stderr: %s",
          rc, want, err ? err : "");
    free(err);
}

static void test_bad_inputs(void)
{
    char a[2048], m[300], d[300], junk[300], empty[300];
    snprintf(m, sizeof m, "%s/mono.ckpt", dir);
    snprintf(d, sizeof d, "%s/data/dataset.json", dir);
    snprintf(junk, sizeof junk, "%s/junk.png", dir);
    snprintf(empty, sizeof empty, "%s/empty", dir);
    FILE *f = fopen(junk, "wb");
    if (f) {
        fputs("this is not a PNG file", f);
        fclose(f);
    }
    mkdir(empty, 0777);
    char trunc[300], cmd[700];
    snprintf(trunc, sizeof trunc, "%s/trunc.ckpt", dir);
    snprintf(cmd, sizeof cmd, "head -c 3000 '%s' > '%s'", m, trunc);
    if (system(cmd) != 0) printf("note: could not make the truncated checkpoint\n");
    snprintf(a, sizeof a, "predict --input '%s' --out '%s/x'", junk, dir);
    expect_failure("predict without --model", a, 2);
    snprintf(a, sizeof a, "predict --model '%s/missing.ckpt' --input '%s/data/yard-00/cam0' --out '%s/x'", dir, dir, dir);
    expect_failure("predict, missing checkpoint", a, 1);
    snprintf(a, sizeof a, "predict --model '%s' --input '%s/nowhere.png' --out '%s/x'", m, dir, dir);
    expect_failure("predict, missing input", a, 1);
    snprintf(a, sizeof a, "predict --model '%s' --input '%s' --out '%s/x'", m, junk, dir);
    expect_failure("predict, input is not an image", a, 1);
    snprintf(a, sizeof a, "predict --model '%s' --input '%s' --out '%s/x'", m, empty, dir);
    expect_failure("predict, folder without frames", a, 1);
    snprintf(a, sizeof a, "predict --model '%s' --input '%s' --out '%s/x' --camera 100,100,50", m, junk, dir);
    expect_failure("predict, --camera with 3 numbers", a, 2);
    snprintf(a, sizeof a, "predict --model '%s' --input '%s' --out '%s/x' --camera -5,100,50,40", m, junk, dir);
    expect_failure("predict, --camera with negative focal", a, 2);
    snprintf(a, sizeof a, "predict --model '%s' --input '%s' --out '%s/x' --camera 100,100,50,40,0.1", m, junk, dir);
    expect_failure("predict, --camera with 5 numbers", a, 2);
    snprintf(a, sizeof a, "predict --model '%s' --input '%s' --out '%s/x' --fisheye --camera 100,100,50,40,0.1,0,0,0,0", m,
             junk, dir);
    expect_failure("predict, --fisheye --camera with 9 numbers", a, 2);
    snprintf(a, sizeof a, "predict --model '%s' --input '%s' --out '%s/x' --fisheye", m, junk, dir);
    expect_failure("predict, --fisheye without --camera", a, 2);
    snprintf(a, sizeof a, "predict --model '%s' --input '%s/data/yard-00/cam0/000001.png' --out '%s/x' "
             "--camera 38.4,38.4,34.06,22.06,-0.9,0,0,0", m, dir, dir);
    expect_failure("predict, --camera with a lens that folds the image", a, 1);
    snprintf(a, sizeof a, "predict --model '%s' --input '%s' --out '%s/x' --colour", m, junk, dir);
    expect_failure("predict, unknown option", a, 2);
    snprintf(a, sizeof a, "predict --model '%s' --input '%s/data/yard-00/cam0' --out '%s/x'", trunc, dir, dir);
    expect_failure("predict, truncated checkpoint", a, 1);
    snprintf(a, sizeof a, "eval --model '%s' --data '%s/missing.json'", m, dir);
    expect_failure("eval, missing dataset", a, 1);
    snprintf(a, sizeof a, "eval --model '%s' --data '%s' --split holdout", m, d);
    expect_failure("eval, bad --split", a, 2);
    snprintf(a, sizeof a, "eval --model '%s' --data '%s' --max-depth -3", m, d);
    expect_failure("eval, negative --max-depth", a, 2);
    snprintf(a, sizeof a, "eval --model '%s' --data '%s'", trunc, d);
    expect_failure("eval, truncated checkpoint", a, 1);
    snprintf(a, sizeof a, "eval --data '%s'", d);
    expect_failure("eval without --model", a, 2);
}

int main(int argc, char **argv)
{
    (void)argc;
    find_paths(argv[0]);
    if (!check(access(bin, X_OK) == 0, "./nightjar is built", "build it first: make nightjar")) return test_exit();
    if (!check(setup() == 0, "synthetic data and checkpoints", "setup failed (see above)")) {
        tdu_rmtree(dir);
        return test_exit();
    }
    test_predict();
    test_predict_variants();
    test_eval();
    test_eval_stereo();
    test_eval_camera_height();
    test_eval_lens();
    test_bad_inputs();
    tdu_rmtree(dir);
    return test_exit();
}

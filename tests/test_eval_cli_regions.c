/* tests/test_eval_cli_regions.c — `nightjar eval` end to end: the row-layout
 * oracle, the depth bands, the obstacle pixels and the lead-vehicle masks in
 * the table and in metrics.json.
 *
 * Setup: `nightjar synth` (3 sequences of 12 frames, 64×48), a model trained
 * for 3 steps, `nightjar predict` on the test sequence's frames.  eval runs
 * twice: without masks, then with 8-bit grey PNG masks (stb_image_write)
 * added to the test sequence as "lead_mask" (frame 0's mask is empty; frame
 * 5's is written at twice the size, each pixel a 2×2 block, which eval's
 * area resize brings back to the same pixels).
 *
 * Sources of truth:
 *   - the contract: every key the earlier metrics.json had is still there with
 *     its type (the values of those keys are checked against NumPy by
 *     tests/test_predict_cli.c), except that the scored depth interval is
 *     "scored_depth": [1e-3, cap] (the default cap 80 m; it replaced the keys
 *     "min_depth" and "max_depth"); the new keys exist; no "lead_vehicle_pixels"
 *     without masks; adding masks changes nothing but adding that key;
 *   - sums: the bands' pixel counts add up to the all-pixel count; the lead
 *     pixels are the mask's pixels with valid ground truth, counted here from
 *     the .npy ground truth;
 *   - NumPy from the files (tests/ref/regions_eval.py: ground truth, predict's
 *     depth maps, the masks read with Pillow, a mask of an integer multiple of
 *     the depth's size reduced by block means >= 0.5): the oracle's metrics, every
 *     band, the obstacle and the lead-vehicle entries of the model, the
 *     constant and the oracle, within 1e-5 relative;
 *   - the oracle (each row at its median true depth) beats the constant depth.
 */
#include "data/npy.h"
#include "tests/check.h"
#include "tests/e2e_support.h"
#include "tests/test_data_util.h"
#include "train/measure/metrics.h"
#include <cjson/cJSON.h>
#include <math.h>
#include <stb_image_write.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#define NFRAMES 12
#define FW 64
#define FH 48
#define CAP 80.0

static char dir[64], refdir[1024];

static const char *CONFIG =
    "{ \"run\": { \"name\": \"eval-regions\", \"seed\": 5, \"threads\": 1, \"log_every\": 1,\n"
    "           \"validate_every\": 0, \"checkpoint_minutes\": 1000, \"checkpoint_steps\": 1000, \"max_steps\": 3 },\n"
    "  \"data\": { \"width\": 64, \"height\": 32, \"batch\": 2, \"frame_offsets\": [1],\n"
    "            \"video\": true, \"duplicate_threshold\": 0 },\n"
    "  \"model\": { \"width\": 0.25, \"stages\": 4 },\n"
    "  \"optim\": { \"lr\": 3e-4, \"warmup_steps\": 2 } }\n";

/* ---- helpers ---------------------------------------------------------------- */

static int nj(const char *args, const char *logname)
{
    char cmd[4096], log[256];
    snprintf(cmd, sizeof cmd, "'%s' %s", e2e_bin(), args);
    snprintf(log, sizeof log, "%s/%s", dir, logname);
    return e2e_run(cmd, log);
}

static char *slurp_in(const char *name)
{
    char p[256];
    snprintf(p, sizeof p, "%s/%s", dir, name);
    return e2e_slurp(p, NULL);
}

static cJSON *load_json(const char *name)
{
    char *s = slurp_in(name);
    cJSON *j = s ? cJSON_Parse(s) : NULL;
    free(s);
    return j;
}

static const cJSON *get(const cJSON *o, const char *k)
{
    return cJSON_GetObjectItemCaseSensitive(o, k);
}

static double num(const cJSON *o, const char *k)
{
    const cJSON *v = get(o, k);
    return cJSON_IsNumber(v) ? v->valuedouble : NAN;
}

static int rel_close(double a, double b, double tol)
{
    return fabs(a - b) <= tol * fabs(b) + 1e-12;
}

static int setup(void)
{
    char args[1024], cfg[256];
    if (tdu_tmpdir(dir, sizeof dir)) return -1;
    snprintf(cfg, sizeof cfg, "%s/cfg.json", dir);
    if (e2e_write(cfg, CONFIG)) return -1;
    snprintf(args, sizeof args, "synth --out '%s/data' --frames %d --sequences 3 --size %dx%d", dir, NFRAMES, FW, FH);
    if (!check(nj(args, "synth.txt") == 0, "synth renders the data", "see %s/synth.txt", dir)) return -1;
    snprintf(args, sizeof args, "train --config '%s' --data '%s/data/dataset.json' --out '%s/run' --steps 3 --threads 1",
             cfg, dir, dir);
    if (!check(nj(args, "train.txt") == 0, "a 3-step training run", "see %s/train.txt", dir)) return -1;
    snprintf(args, sizeof args, "predict --model '%s/run/final.ckpt' --input '%s/data/yard-02/cam0' --out '%s/pred'",
             dir, dir, dir);
    if (!check(nj(args, "predict.txt") == 0, "predict on the test sequence", "see %s/predict.txt", dir)) return -1;
    return 0;
}

static int eval(const char *json, const char *log)
{
    char args[1024];
    snprintf(args, sizeof args, "eval --model '%s/run/final.ckpt' --data '%s/data/dataset.json' --out '%s/%s' --threads 1",
             dir, dir, dir, json);
    return nj(args, log);
}

/* NumPy's figures from the files into DIR/OUT; NULL when it failed. */
static cJSON *numpy_ref(const char *out)
{
    char script[1100], args[1024];
    snprintf(script, sizeof script, "%s/regions_eval.py", refdir);
    snprintf(args, sizeof args, "'%s/data/dataset.json' test %g '%s/pred' '%s/%s'", dir, CAP, dir, dir, out);
    return tdu_python(script, args) == 0 ? load_json(out) : NULL;
}

/* ---- checks ----------------------------------------------------------------- */

static const char *const DEPTH_KEYS[7] = {"absrel", "sqrel", "rmse", "rmse_log", "delta_1_25", "delta_1_25_2",
                                          "delta_1_25_3"};
static const char *const METHODS[4] = {"model", "baseline_constant", "baseline_untrained",
                                       "baseline_row_layout_oracle"};

static int has_depth_keys(const cJSON *o)
{
    int ok = cJSON_IsObject(o) && cJSON_IsNumber(get(o, "pixels")) && cJSON_IsNumber(get(o, "images"));
    for (int k = 0; ok && k < 7; k++) ok = cJSON_IsNumber(get(o, DEPTH_KEYS[k]));
    return ok;
}

/* The keys metrics.json had before this change, with their types. */
static void check_contract(const cJSON *j)
{
    const cJSON *sc = get(j, "scale"), *c = get(j, "baseline_constant"), *u = get(j, "baseline_untrained"),
                *p = get(j, "pose");
    int ok = has_depth_keys(j) && cJSON_IsNumber(get(sc, "mean")) && cJSON_IsNumber(get(sc, "std")) &&
             cJSON_IsString(get(j, "scaling")) && cJSON_IsString(get(j, "split")) &&
             cJSON_IsString(get(j, "model")) && cJSON_IsString(get(j, "data"));
    check(ok, "old keys: the model's metrics, scale, scaling, split, model, data", "a key is missing");
    const cJSON *sd = get(j, "scored_depth");
    ok = cJSON_IsArray(sd) && cJSON_GetArraySize(sd) == 2 && cJSON_IsNumber(cJSON_GetArrayItem(sd, 0)) &&
         cJSON_IsNumber(cJSON_GetArrayItem(sd, 1)) && cJSON_GetArrayItem(sd, 0)->valuedouble == NJ_EVAL_DEPTH_FLOOR &&
         cJSON_GetArrayItem(sd, 1)->valuedouble == NJ_EVAL_DEPTH_CAP && !get(j, "min_depth") && !get(j, "max_depth");
    check(ok, "scored depth interval: \"scored_depth\": [1e-3, 80] (default --max-depth), no min_depth/max_depth",
          "missing, malformed or old keys present");
    check(has_depth_keys(c) && cJSON_IsString(get(c, "scaling")) && has_depth_keys(u) &&
              cJSON_IsObject(get(u, "scale")) && cJSON_IsString(get(u, "scaling")),
          "old keys: baseline_constant and baseline_untrained blocks", "a key is missing");
    static const char *const PK[9] = {"ate", "ate_std", "rmse", "scale_mean", "snippets", "snippet_frames",
                                      "rotation_error_deg", "rotation_true_deg", "pairs"};
    ok = cJSON_IsObject(p) && cJSON_IsString(get(p, "protocol"));
    for (int k = 0; ok && k < 9; k++) ok = cJSON_IsNumber(get(p, PK[k]));
    check(ok, "old keys: the pose block", "a key is missing");
}

static int region_entry_ok(const cJSON *e)
{
    int ok = cJSON_IsNumber(get(e, "pixels")) && cJSON_IsNumber(get(e, "images"));
    for (int m = 0; ok && m < 4; m++) {
        const cJSON *v = get(e, METHODS[m]);
        ok = cJSON_IsObject(v) && cJSON_IsNumber(get(v, "absrel")) && cJSON_IsNumber(get(v, "delta_1_25")) &&
             cJSON_IsNumber(get(v, "ratio_median"));
    }
    return ok;
}

static void check_new_keys(const cJSON *j)
{
    const cJSON *o = get(j, "baseline_row_layout_oracle"), *c = get(j, "baseline_constant");
    double px = num(j, "pixels");
    check(has_depth_keys(o) && num(o, "pixels") == px && num(o, "images") == num(j, "images"),
          "baseline_row_layout_oracle: all metrics, on the model's pixels and images", "pixels %g vs %g",
          num(o, "pixels"), px);
    check(num(o, "absrel") < num(c, "absrel"), "the row-layout oracle's AbsRel is below the constant depth's",
          "oracle %g constant %g", num(o, "absrel"), num(c, "absrel"));
    const cJSON *bands = get(j, "by_depth_band");
    const double from[5] = {0, 3, 6, 10, 20}, to[5] = {3, 6, 10, 20, CAP};
    int n = cJSON_GetArraySize(bands), ok = cJSON_IsArray(bands) && n == 5;
    double sum = 0;
    for (int b = 0; ok && b < n; b++) {
        const cJSON *e = cJSON_GetArrayItem(bands, b);
        const cJSON *mo = get(e, "model");
        /* a band without pixels has null metrics */
        ok = num(e, "from_m") == from[b] && num(e, "to_m") == to[b] &&
             (num(e, "pixels") == 0 ? cJSON_IsNull(get(mo, "absrel")) : region_entry_ok(e));
        sum += num(e, "pixels");
    }
    check(ok, "by_depth_band: 0-3, 3-6, 6-10, 10-20, 20-80 m, every method", "%d bands", n);
    check(ok && sum == px, "the bands' pixel counts add up to the all-pixel count", "sum %g, pixels %g", sum, px);
    const cJSON *ob = get(j, "obstacle_pixels");
    check(region_entry_ok(ob) && num(ob, "pixels") > 0 && num(ob, "pixels") < px && cJSON_IsString(get(ob, "rule")),
          "obstacle_pixels: some but not all pixels, every method", "pixels %g of %g", num(ob, "pixels"), px);
}

/* eval's region entry against NumPy's (model, constant, oracle). */
static int same_region(const cJSON *e, const cJSON *r, char *why, size_t n)
{
    if (num(e, "pixels") != num(r, "pixels") || num(e, "images") != num(r, "images")) {
        snprintf(why, n, "pixels %g/%g images %g/%g", num(e, "pixels"), num(r, "pixels"), num(e, "images"),
                 num(r, "images"));
        return 0;
    }
    static const char *const K[3] = {"absrel", "delta_1_25", "ratio_median"};
    for (int m = 0; m < 4; m++) {
        if (m == 2) continue;   /* the untrained network: not in the NumPy reference */
        for (int k = 0; k < 3; k++) {
            const cJSON *a = get(get(e, METHODS[m]), K[k]), *b = get(get(r, METHODS[m]), K[k]);
            int same = cJSON_IsNull(b) ? cJSON_IsNull(a) : cJSON_IsNumber(a) && rel_close(a->valuedouble, b->valuedouble, 1e-5);
            if (!same) {
                snprintf(why, n, "%s %s: %.9g vs numpy %.9g", METHODS[m], K[k], cJSON_IsNumber(a) ? a->valuedouble : NAN,
                         cJSON_IsNumber(b) ? b->valuedouble : NAN);
                return 0;
            }
        }
    }
    return 1;
}

static void check_numpy(const cJSON *j, const cJSON *ref, int lead)
{
    char why[256] = "", name[128];
    const char *tag = lead ? "with masks" : "without masks";
    const cJSON *o = get(j, "baseline_row_layout_oracle"), *ro = get(ref, "baseline_row_layout_oracle");
    int ok = ref != NULL;
    for (int k = 0; ok && k < 7; k++)
        if (!rel_close(num(o, DEPTH_KEYS[k]), num(ro, DEPTH_KEYS[k]), 1e-5)) {
            snprintf(why, sizeof why, "%s: %.9g vs numpy %.9g", DEPTH_KEYS[k], num(o, DEPTH_KEYS[k]), num(ro, DEPTH_KEYS[k]));
            ok = 0;
        }
    ok = ok && num(o, "pixels") == num(ro, "pixels");
    snprintf(name, sizeof name, "numpy, %s: the row-layout oracle's metrics", tag);
    check(ok, name, "%s", ref ? why : "reference failed");
    const cJSON *b = get(j, "by_depth_band"), *rb = get(ref, "by_depth_band");
    ok = ref && cJSON_GetArraySize(b) == cJSON_GetArraySize(rb);
    why[0] = 0;
    for (int i = 0; ok && i < cJSON_GetArraySize(b); i++) ok = same_region(cJSON_GetArrayItem(b, i), cJSON_GetArrayItem(rb, i), why, sizeof why);
    snprintf(name, sizeof name, "numpy, %s: every depth band (pixels, images, AbsRel, d<1.25, median ratio)", tag);
    check(ok, name, "%s", ref ? why : "reference failed");
    why[0] = 0;
    snprintf(name, sizeof name, "numpy, %s: obstacle pixels", tag);
    check(ref && same_region(get(j, "obstacle_pixels"), get(ref, "obstacle_pixels"), why, sizeof why), name, "%s",
          ref ? why : "reference failed");
    if (!lead) return;
    why[0] = 0;
    check(ref && same_region(get(j, "lead_vehicle_pixels"), get(ref, "lead_vehicle_pixels"), why, sizeof why),
          "numpy, with masks: lead-vehicle pixels", "%s", ref ? why : "reference failed");
}

/* ---- lead masks ----------------------------------------------------------------- */

/* Rectangles that move with the frame; frame 0's mask is empty.  *pixels and
 * *images: mask pixels with valid ground truth, and the frames that have some. */
static int write_masks(long *pixels, int *images)
{
    char path[512], err[512];
    snprintf(path, sizeof path, "%s/data/yard-02/lead", dir);
    if (mkdir(path, 0755)) return -1;
    *pixels = 0;
    *images = 0;
    for (int f = 0; f < NFRAMES; f++) {
        static unsigned char m[FW * FH], m2[4 * FW * FH];
        float *gt = NULL;
        int shape[4], nd;
        snprintf(path, sizeof path, "%s/data/yard-02/depth/%06d.npy", dir, f);
        if (nj_npy_read(path, &gt, shape, &nd, err, sizeof err) || nd != 2 || shape[0] != FH || shape[1] != FW) {
            free(gt);
            return -1;
        }
        long in = 0;
        for (int y = 0; y < FH; y++)
            for (int x = 0; x < FW; x++) {
                int on = f > 0 && y >= 16 && y < 34 && x >= 8 + 2 * f && x < 30 + 2 * f;
                m[y * FW + x] = on ? 255 : 0;
                float g = gt[y * FW + x];
                in += on && isfinite(g) && g > 1e-3 && g < CAP;
            }
        free(gt);
        *pixels += in;
        *images += in > 0;
        snprintf(path, sizeof path, "%s/data/yard-02/lead/%06d.png", dir, f);
        if (f == 5) {           /* twice the size */
            for (int y = 0; y < 2 * FH; y++)
                for (int x = 0; x < 2 * FW; x++) m2[y * 2 * FW + x] = m[(y / 2) * FW + x / 2];
            if (!stbi_write_png(path, 2 * FW, 2 * FH, 1, m2, 2 * FW)) return -1;
        } else if (!stbi_write_png(path, FW, FH, 1, m, FW)) {
            return -1;
        }
    }
    return 0;
}

/* Adds "lead_mask": "yard-02/lead" to the test sequence of dataset.json. */
static int add_lead_key(void)
{
    cJSON *d = load_json("data/dataset.json");
    const cJSON *seqs = get(d, "sequences");
    int done = 0;
    for (int i = 0; i < cJSON_GetArraySize(seqs); i++) {
        cJSON *s = cJSON_GetArrayItem(seqs, i);
        const cJSON *sp = get(s, "split");
        if (cJSON_IsString(sp) && !strcmp(sp->valuestring, "test"))
            done = cJSON_AddStringToObject(s, "lead_mask", "yard-02/lead") != NULL;
    }
    char *text = done ? cJSON_Print(d) : NULL, path[256];
    snprintf(path, sizeof path, "%s/data/dataset.json", dir);
    int rc = text ? e2e_write(path, text) : -1;
    free(text);
    cJSON_Delete(d);
    return rc;
}

/* ---- tests ------------------------------------------------------------------ */

static void test_usage(void)
{
    char *out = NULL;
    if (nj("eval --help", "help.txt") == 0) out = slurp_in("help.txt");
    check(out && strstr(out, "row-layout oracle") && strstr(out, "band of true depth") && strstr(out, "obstacle pixels") &&
              strstr(out, "lead_mask"),
          "eval --help describes the oracle, the bands, obstacles and lead masks", "%s", out ? out : "no output");
    free(out);
}

static cJSON *test_without_masks(void)
{
    int rc = eval("m1.json", "eval1.txt");
    char *out = slurp_in("eval1.txt");
    check(rc == 0 && out && strstr(out, "row-layout oracle") && strstr(out, "0-3 m") && strstr(out, "20-80 m") &&
              strstr(out, "obstacles") && !strstr(out, "lead vehicle"),
          "eval prints the oracle row and the compact region table", "status %d: %s", rc, out ? out : "");
    free(out);
    cJSON *j = load_json("m1.json");
    if (!check(j != NULL, "metrics.json written", "not readable")) return NULL;
    check_contract(j);
    check_new_keys(j);
    check(get(j, "lead_vehicle_pixels") == NULL, "no lead_vehicle_pixels key when the split has no masks", "present");
    cJSON *ref = numpy_ref("ref1.json");
    check_numpy(j, ref, 0);
    cJSON_Delete(ref);
    return j;
}

static void test_with_masks(const cJSON *m1)
{
    long pixels = 0;
    int images = 0;
    if (!check(write_masks(&pixels, &images) == 0 && add_lead_key() == 0, "lead masks written",
               "could not write the masks or dataset.json"))
        return;
    int rc = eval("m2.json", "eval2.txt");
    char *out = slurp_in("eval2.txt");
    check(rc == 0 && out && strstr(out, "lead vehicle"), "eval with masks prints the lead-vehicle row", "status %d: %s",
          rc, out ? out : "");
    free(out);
    cJSON *j = load_json("m2.json");
    const cJSON *l = get(j, "lead_vehicle_pixels");
    check(region_entry_ok(l) && num(l, "sequences") == 1, "lead_vehicle_pixels: every method, 1 sequence",
          "missing or incomplete");
    check(num(l, "pixels") == (double)pixels && num(l, "images") == images && images == NFRAMES - 1,
          "lead pixels = mask pixels with valid ground truth, in the frames that have some",
          "eval %g pixels in %g images, counted %ld in %d", num(l, "pixels"), num(l, "images"), pixels, images);
    cJSON *rest = j ? cJSON_Duplicate(j, 1) : NULL;
    if (rest) cJSON_DeleteItemFromObjectCaseSensitive(rest, "lead_vehicle_pixels");
    check(rest && m1 && cJSON_Compare(rest, m1, 1), "masks add lead_vehicle_pixels and change nothing else",
          "metrics.json differs beyond the new key");
    cJSON_Delete(rest);
    cJSON *ref = numpy_ref("ref2.json");
    check_numpy(j, ref, 1);
    cJSON_Delete(ref);
    cJSON_Delete(j);
}

int main(int argc, char **argv)
{
    (void)argc;
    if (!check(e2e_have_binary(), "./nightjar is built", "run from the repository root after make")) return test_exit();
    char p[1024];
    tdu_ref_path(argv[0], "regions_eval.py", p, sizeof p);
    snprintf(refdir, sizeof refdir, "%.*s", (int)(strrchr(p, '/') - p), p);
    test_usage();
    if (setup() == 0) {
        cJSON *m1 = test_without_masks();
        test_with_masks(m1);
        cJSON_Delete(m1);
    }
    if (dir[0]) tdu_rmtree(dir);
    return test_exit();
}

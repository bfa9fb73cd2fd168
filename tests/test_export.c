/* tests/test_export.c — `nightjar export` (C99 runtime, ONNX, safetensors).
 *
 * Setup: `./nightjar synth` renders 3 small sequences (64x48); two small
 * models (4 stages, width 0.25, pose net) get random but fixed weights and
 * non-trivial normalisation parameters — one with batch norm (random running
 * statistics), one with group norm — and are saved with nj_checkpoint_save.
 * The reference output is train/model/infer.c's depth on the test split's frames.
 *
 * Sources of truth:
 *   - C f32: the emitted .c/.h compiled by gcc -std=c99 -pedantic -Wall
 *     -Wextra -Werror with a firmware-style driver (tests/ref/export_driver.c)
 *     against train/model/infer.c: max relative depth error <= 1e-4;
 *   - C int8: against the f32 export on the same frames (AbsRel of int8 depth
 *     w.r.t. f32 depth <= 2%) and against the renderer's exact depth (the
 *     median-scaled AbsRel of int8 within 2% (relative) of f32's); the weight
 *     section (size -A .rodata) at most 0.3x the f32 one;
 *   - cross: the same f32 code built by aarch64-linux-gnu-gcc -static and run
 *     under qemu-aarch64 equals the host build within 1e-5 (relative);
 *   - ONNX: onnx.checker and OpenCV's DNN module (tests/ref/onnx_check.py)
 *     against train/model/infer.c within 1e-4 (relative);
 *   - safetensors: an independent numpy reader (tests/ref/safetensors_read.py)
 *     parses the file from the format description and compares every tensor
 *     bit-exact with batch norm folded / int8-quantised in numpy from the raw
 *     parameters this test dumps as NPY;
 *   - the model's facts (train/model/model.h): the emitted C reads back, bit
 *     for bit, the input standardisation (ND_IN_SCALE, ND_IN_SHIFT) and the
 *     group-norm eps of NJ_MODEL_INPUT_MEAN/STD and NJ_MODEL_NORM_EPS, and
 *     the header documents the same mean and std (the numeric equivalence
 *     itself is the C/ONNX-vs-infer checks above, and the safetensors
 *     check's numpy folding with its own eps 1e-5);
 *   - refusals: unreadable checkpoints and bad options → one stderr line,
 *     non-zero exit.
 */
#include "data/image.h"
#include "data/npy.h"
#include "tests/check.h"
#include "tests/e2e_support.h"
#include "tests/test_data_util.h"
#include "train/loop/checkpoint.h"
#include "train/export/export.h"
#include "train/model/infer.h"
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#define FW 64
#define FH 48
#define NFR 3                   /* frames of the test split used */
#define NPIX (FW * FH)
#define STRICT "-std=c99 -pedantic -Wall -Wextra -Werror -O2"

static char dir[64], bin[1024], driver[1024], refdir[1024];
static float ref_bn[NFR][NPIX], ref_gn[NFR][NPIX], gt[NFR][NPIX];

/* ---- helpers ------------------------------------------------------------------ */

static int sh(const char *cmd)
{
    int rc = system(cmd);
    return rc == -1 ? -1 : (rc >> 8) & 0xff;
}

static int count_lines(const char *s)
{
    int n = 0;
    for (; s && *s; s++) n += *s == '\n';
    return n;
}

/* ./nightjar export ARGS; stdout/stderr into DIR/out.txt, DIR/err.txt. */
static int nightjar(const char *args)
{
    char cmd[4096];
    snprintf(cmd, sizeof cmd, "'%s' %s > '%s/out.txt' 2> '%s/err.txt'", bin, args, dir, dir);
    return sh(cmd);
}

static void find_paths(const char *argv0)
{
    const char *slash = strrchr(argv0, '/');
    int len = slash ? (int)(slash - argv0) : 1;
    snprintf(bin, sizeof bin, "%s", e2e_bin());
    if (!getenv("NJ_BIN") && access(bin, X_OK) != 0) snprintf(bin, sizeof bin, "%.*s/../../nightjar", len, slash ? argv0 : ".");
    tdu_ref_path(argv0, "export_driver.c", driver, sizeof driver);
    snprintf(refdir, sizeof refdir, "%.*s", (int)(strrchr(driver, '/') - driver), driver);
}

static double max_rel(const float *a, const float *ref, size_t n)
{
    double m = 0;
    for (size_t i = 0; i < n; i++) {
        double d = fabs((double)a[i] - ref[i]) / fabs((double)ref[i]);
        if (!(d <= m)) m = d;
    }
    return m;
}

/* ---- models -------------------------------------------------------------------- */

static void fill(nj_param *p, nj_rng *r, double lo, double hi)
{
    for (size_t i = 0; p && i < nj_param_numel(p); i++) p->data[i] = (float)(lo + (hi - lo) * nj_rng_uniform(r));
}

/* Random but fixed normalisation parameters and livelier disparity heads. */
static void randomise(nj_model *m, unsigned seed)
{
    nj_rng r;
    nj_rng_seed(&r, seed);
    for (int i = 0; i < m->nunits; i++) {
        nj_unit *u = &m->units[i];
        fill(u->gamma, &r, 0.6, 1.4);
        fill(u->beta, &r, -0.2, 0.2);
        fill(u->run_mean, &r, -0.3, 0.3);
        fill(u->run_var, &r, 0.5, 2.0);
        fill(u->b, &r, -0.1, 0.1);
    }
    for (int s = 0; s < m->cfg.scales; s++) {
        nj_unit *u = &m->units[m->head[s]];
        for (size_t k = 0; k < nj_param_numel(u->w); k++) u->w->data[k] *= 3.0f;
        nj_init_const(u->b, -2.0f);
    }
}

static void model_config(nj_train_config *cfg, nj_norm_kind norm)
{
    nj_train_config_default(cfg);
    cfg->width = FW;
    cfg->height = FH;
    cfg->seed = cfg->model.seed = 11;
    cfg->model.stages = 4;
    cfg->model.width = 0.25f;
    cfg->model.scales = 2;
    cfg->model.pose_width = 0.25f;
    cfg->model.pose_stages = 3;
    cfg->model.norm = norm;
    cfg->model.depth_range = (nj_depth_range){0.1f, 100.0f};   /* the header check's MIN and MAX */
}

/* Saves the checkpoint and dumps the raw parameters as NPY when rawdir != NULL. */
static int make_checkpoint(const char *path, nj_norm_kind norm, nj_model *m, nj_train_config *cfg)
{
    char err[512];
    nj_train_state st;
    memset(&st, 0, sizeof st);
    st.best_val = INFINITY;
    model_config(cfg, norm);
    if (nj_model_init(m, &cfg->model, err, sizeof err)) {
        printf("model: %s\n", err);
        return -1;
    }
    randomise(m, norm == NJ_NORM_BATCH ? 5 : 6);
    if (nj_checkpoint_save(path, m, cfg, &st, err, sizeof err)) {
        printf("checkpoint: %s\n", err);
        return -1;
    }
    return 0;
}

static int dump_param(const char *raw, const char *unit, const char *what, const nj_param *p, int per_channel)
{
    char path[512], err[256];
    int shape[4] = {p->n, p->c, p->h, p->w}, one[1] = {(int)nj_param_numel(p)};
    snprintf(path, sizeof path, "%s/%s.%s.npy", raw, unit, what);
    return nj_npy_write(path, p->data, per_channel ? one : shape, per_channel ? 1 : 4, err, sizeof err);
}

/* raw/<unit>.{w,b,gamma,beta,mean,var}.npy and raw/manifest.txt "unit norm". */
static int dump_raw(const nj_model *m, const char *raw)
{
    char path[512];
    mkdir(raw, 0777);
    snprintf(path, sizeof path, "%s/manifest.txt", raw);
    FILE *f = fopen(path, "w");
    int rc = f ? 0 : -1;
    for (int i = 0; !rc && i < m->nunits; i++) {
        const nj_unit *u = &m->units[i];
        char unit[64];
        snprintf(unit, sizeof unit, "%.*s", (int)strlen(u->w->name) - 2, u->w->name);
        fprintf(f, "%s %s\n", unit, u->norm == NJ_NORM_BATCH ? "batch" : (u->norm == NJ_NORM_GROUP ? "group" : "none"));
        rc |= dump_param(raw, unit, "w", u->w, 0) | dump_param(raw, unit, "b", u->b, 1);
        if (u->gamma) rc |= dump_param(raw, unit, "gamma", u->gamma, 1) | dump_param(raw, unit, "beta", u->beta, 1);
        if (u->run_mean) rc |= dump_param(raw, unit, "mean", u->run_mean, 1) | dump_param(raw, unit, "var", u->run_var, 1);
    }
    if (f && fclose(f)) rc = -1;
    return rc;
}

/* ---- setup ----------------------------------------------------------------------- */

static int load_frames(unsigned char *rgb, nj_image *ims)
{
    char path[512], err[512];
    for (int k = 0; k < NFR; k++) {
        snprintf(path, sizeof path, "%s/data/yard-02/cam0/%06d.png", dir, k);
        if (nj_image_load(path, &ims[k], err, sizeof err) || ims[k].w != FW || ims[k].h != FH) {
            printf("frame: %s\n", err);
            return -1;
        }
        for (int c = 0; c < 3; c++)
            for (int p = 0; p < NPIX; p++)
                rgb[((size_t)k * NPIX + p) * 3 + c] = (unsigned char)lrintf(ims[k].data[c * NPIX + p] * 255.0f);
        float *d = NULL;
        int shape[4], nd;
        snprintf(path, sizeof path, "%s/data/yard-02/depth/%06d.npy", dir, k);
        if (nj_npy_read(path, &d, shape, &nd, err, sizeof err) || nd != 2 || shape[0] != FH || shape[1] != FW) {
            printf("ground truth: %s\n", err);
            free(d);
            return -1;
        }
        memcpy(gt[k], d, sizeof gt[k]);
        free(d);
    }
    return 0;
}

static int write_bytes(const char *path, const void *p, size_t n)
{
    FILE *f = fopen(path, "wb");
    int ok = f && fwrite(p, 1, n, f) == n;
    if (f && fclose(f)) ok = 0;
    return ok ? 0 : -1;
}

/* train/model/infer.c's depth for every frame; also dumps frames and depths as NPY for the ONNX check. */
static int reference(nj_model *m, const nj_train_config *cfg, const nj_image *ims, float (*ref)[NPIX],
                     const char *npy_prefix)
{
    nj_infer inf;
    char err[512], path[512];
    (void)cfg;
    if (nj_infer_init(&inf, m, FW, FH, err, sizeof err)) return -1;
    int rc = 0;
    for (int k = 0; k < NFR && !rc; k++) rc = nj_infer_depth(&inf, &ims[k], FW, FH, ref[k], NULL, err, sizeof err);
    nj_infer_free(&inf);
    if (rc) {
        printf("infer: %s\n", err);
        return -1;
    }
    float *img = malloc(sizeof(float) * 3 * NPIX * NFR);
    if (!img) return -1;
    for (int k = 0; k < NFR; k++) memcpy(img + (size_t)k * 3 * NPIX, ims[k].data, sizeof(float) * 3 * NPIX);
    int ishape[4] = {NFR, 3, FH, FW}, dshape[3] = {NFR, FH, FW};
    snprintf(path, sizeof path, "%s/frames.npy", dir);
    rc = nj_npy_write(path, img, ishape, 4, err, sizeof err);
    snprintf(path, sizeof path, "%s_depth.npy", npy_prefix);
    rc |= nj_npy_write(path, &ref[0][0], dshape, 3, err, sizeof err);
    free(img);
    return rc ? -1 : 0;
}

static int setup(void)
{
    char cmd[2048], path[512];
    if (tdu_tmpdir(dir, sizeof dir)) return -1;
    snprintf(cmd, sizeof cmd, "'%s' synth --out '%s/data' --frames 4 --sequences 3 --size %dx%d --seed 4 > '%s/synth.txt'",
             bin, dir, FW, FH, dir);
    if (sh(cmd) != 0) {
        printf("nightjar synth failed\n");
        return -1;
    }
    unsigned char *rgb = malloc((size_t)NFR * NPIX * 3);
    nj_image ims[NFR];
    memset(ims, 0, sizeof ims);
    int rc = !rgb || load_frames(rgb, ims);
    snprintf(path, sizeof path, "%s/frames.rgb", dir);
    rc = rc || write_bytes(path, rgb, (size_t)NFR * NPIX * 3);
    free(rgb);
    nj_model m;
    nj_train_config cfg;
    char ck[512], raw[512], pre[512];
    snprintf(ck, sizeof ck, "%s/bn.ckpt", dir);
    snprintf(raw, sizeof raw, "%s/raw_bn", dir);
    snprintf(pre, sizeof pre, "%s/bn", dir);
    if (!rc && !(rc = make_checkpoint(ck, NJ_NORM_BATCH, &m, &cfg))) {
        rc = reference(&m, &cfg, ims, ref_bn, pre) || dump_raw(&m, raw);
        nj_model_free(&m);
    }
    snprintf(ck, sizeof ck, "%s/gn.ckpt", dir);
    snprintf(raw, sizeof raw, "%s/raw_gn", dir);
    snprintf(pre, sizeof pre, "%s/gn", dir);
    if (!rc && !(rc = make_checkpoint(ck, NJ_NORM_GROUP, &m, &cfg))) {
        rc = reference(&m, &cfg, ims, ref_gn, pre) || dump_raw(&m, raw);
        nj_model_free(&m);
    }
    for (int k = 0; k < NFR; k++) nj_image_free(&ims[k]);
    return rc ? -1 : 0;
}

/* ---- C export -------------------------------------------------------------------- */

/* Exports CKPT as C into DIR/SUB/nightjar_depth.{c,h}, builds it with the
 * driver using CC and FLAGS into DIR/SUB/driver.  Returns 0 when both work. */
static int build_c_with(const char *ckpt, const char *weights, const char *sub, const char *cc, const char *flags,
                       const char *size)
{
    char args[2048], cmd[4096], calib[600] = "";
    snprintf(cmd, sizeof cmd, "mkdir -p '%s/%s'", dir, sub);
    if (sh(cmd)) return -1;
    if (!strcmp(weights, "int8"))   /* the synthetic set's training split (4 frames of yard-00) */
        snprintf(calib, sizeof calib, " --calibrate '%s/data/dataset.json' --calibrate-frames 4", dir);
    snprintf(args, sizeof args, "export --model '%s/%s' --format c --weights %s%s%s%s --out '%s/%s/nightjar_depth.c'",
             dir, ckpt, weights, size ? " --size " : "", size ? size : "", calib, dir, sub);
    if (nightjar(args) != 0) {
        snprintf(cmd, sizeof cmd, "cat '%s/err.txt'", dir);
        sh(cmd);
        return -1;
    }
    snprintf(cmd, sizeof cmd, "%s %s -I'%s/%s' '%s' '%s/%s/nightjar_depth.c' -o '%s/%s/driver' -lm 2> '%s/%s/cc.txt'",
             cc, flags, dir, sub, driver, dir, sub, dir, sub, dir, sub);
    int rc = sh(cmd);
    if (rc) {
        snprintf(cmd, sizeof cmd, "head -c 2000 '%s/%s/cc.txt'", dir, sub);
        sh(cmd);
    }
    return rc;
}

static int build_c(const char *ckpt, const char *weights, const char *sub, const char *cc, const char *flags)
{
    return build_c_with(ckpt, weights, sub, cc, flags, NULL);
}

static int build_c_sized(const char *ckpt, const char *weights, const char *sub, const char *size)
{
    return build_c_with(ckpt, weights, sub, "gcc", STRICT, size);
}

/* Runs DIR/SUB/driver (through `runner` when not empty) on the first n frames;
 * reads the depths into out.  Returns 0 or -1. */
static int run_driver_on(const char *sub, const char *runner, const char *frames, int n, int npix, float *out)
{
    char cmd[4096], path[512];
    snprintf(cmd, sizeof cmd, "%s '%s/%s/driver' '%s/%s' %d '%s/%s/depth.f32'", runner, dir, sub, dir, frames, n, dir, sub);
    if (sh(cmd)) return -1;
    snprintf(path, sizeof path, "%s/%s/depth.f32", dir, sub);
    return tdu_read_floats(path, out, (size_t)npix * n);
}

static int run_driver(const char *sub, const char *runner, int n, float *out)
{
    return run_driver_on(sub, runner, "frames.rgb", n, NPIX, out);
}

static void check_header(const char *sub)
{
    char path[512];
    snprintf(path, sizeof path, "%s/%s/nightjar_depth.h", dir, sub);
    char *h = e2e_slurp(path, NULL);
    snprintf(path, sizeof path, "%s/%s/nightjar_depth.c", dir, sub);
    char *c = e2e_slurp(path, NULL);
    int includes_ok = c != NULL;
    for (const char *p = c; p && (p = strstr(p, "#include")); p++)
        includes_ok &= !strncmp(p, "#include \"nightjar_depth.h\"", 27) || !strncmp(p, "#include <math.h>", 17);
    check(h && strstr(h, "8-bit RGB interleaved") && strstr(h, "(v - 0.45) / 0.225") &&
          strstr(h, "#define NIGHTJAR_DEPTH_WIDTH 64") && strstr(h, "#define NIGHTJAR_DEPTH_HEIGHT 48") &&
          strstr(h, "NIGHTJAR_DEPTH_MIN 0.100000001f") && strstr(h, "NIGHTJAR_DEPTH_MAX 100.0f") &&
          strstr(h, "NIGHTJAR_DEPTH_SCRATCH_FLOATS") && strstr(h, "up to one unknown scale") &&
          strstr(h, "nightjar_depth_run("),
          "export c: header documents input layout, normalisation, units, depth range, scratch size",
          "header:\n%.1500s", h ? h : "(missing)");
    check(includes_ok && c && !strstr(c, "malloc") && !strstr(c, "pthread") && strstr(c, "static const"),
          "export c: source includes only its header and <math.h>, no malloc/threads, static const weights",
          "includes ok %d", includes_ok);
    free(h);
    free(c);
}

/* The float after `key` in `text` read back exactly; NAN when absent. */
static float float_after(const char *text, const char *key)
{
    const char *p = text ? strstr(text, key) : NULL;
    return p ? strtof(p + strlen(key), NULL) : NAN;
}

/* The emitted C carries the model's facts as printed from train/model/model.h. */
static void check_facts(const char *sub)
{
    char path[512], mean[32], std[32], doc[96];
    snprintf(path, sizeof path, "%s/%s/nightjar_depth.c", dir, sub);
    char *c = e2e_slurp(path, NULL);
    snprintf(path, sizeof path, "%s/%s/nightjar_depth.h", dir, sub);
    char *h = e2e_slurp(path, NULL);
    const float scale = float_after(c, "#define ND_IN_SCALE "), shift = float_after(c, "#define ND_IN_SHIFT ");
    const float eps = float_after(c, "sqrt(q / (double)n + (double)");
    check(scale == 1.0f / NJ_MODEL_INPUT_STD && shift == -NJ_MODEL_INPUT_MEAN / NJ_MODEL_INPUT_STD &&
              eps == NJ_MODEL_NORM_EPS,
          "export c: input standardisation and group-norm eps are the model's (NJ_MODEL_INPUT_MEAN/STD, "
          "NJ_MODEL_NORM_EPS), bit for bit", "scale %.9g (want %.9g), shift %.9g (want %.9g), eps %.9g (want %.9g)",
          scale, 1.0f / NJ_MODEL_INPUT_STD, shift, -NJ_MODEL_INPUT_MEAN / NJ_MODEL_INPUT_STD, eps, NJ_MODEL_NORM_EPS);
    snprintf(doc, sizeof doc, "x = (v - %s) / %s per channel",
             nj_export_float_text(NJ_MODEL_INPUT_MEAN, mean, sizeof mean),
             nj_export_float_text(NJ_MODEL_INPUT_STD, std, sizeof std));
    check(h && strstr(h, doc) && strtof(mean, NULL) == NJ_MODEL_INPUT_MEAN && strtof(std, NULL) == NJ_MODEL_INPUT_STD,
          "export c: header documents the model's standardisation (printed from the constants, reads back exactly)",
          "want \"%s\" in the header", doc);
    free(c);
    free(h);
}

static float out32[NFR][NPIX], out8[NFR][NPIX], outx[NPIX], outg[NFR][NPIX];

static double absrel_vs(const float *a, const float *ref, size_t n)
{
    double s = 0;
    for (size_t i = 0; i < n; i++) s += fabs((double)a[i] - ref[i]) / ref[i];
    return s / (double)n;
}

/* AbsRel against the renderer's depth (pixels with depth > 0), median-scaled per frame. */
static double absrel_gt(float (*pred)[NPIX])
{
    return tdu_absrel_median_scaled(&pred[0][0], &gt[0][0], NFR, NPIX);
}

/* Sum of the .rodata sections of an object built from SUB/nightjar_depth.c. */
static long rodata_bytes(const char *sub)
{
    char cmd[2048], path[512];
    snprintf(cmd, sizeof cmd, "gcc -std=c99 -O2 -c '%s/%s/nightjar_depth.c' -o '%s/%s/nd.o' && size -A '%s/%s/nd.o' | "
             "awk '$1 ~ /^\\.rodata/ {s += $2} END {print s + 0}' > '%s/%s/rodata.txt'", dir, sub, dir, sub, dir, sub, dir, sub);
    if (sh(cmd)) return -1;
    snprintf(path, sizeof path, "%s/%s/rodata.txt", dir, sub);
    char *s = e2e_slurp(path, NULL);
    long v = s ? atol(s) : -1;
    free(s);
    return v;
}

static void test_c_f32(void)
{
    int built = build_c("bn.ckpt", "f32", "c32", "gcc", STRICT) == 0;
    check(built, "export c f32: emitted C + driver compile with gcc " STRICT, "export or compile failed (above)");
    if (!built) return;
    check_header("c32");
    int ran = run_driver("c32", "", NFR, &out32[0][0]) == 0;
    double e = ran ? max_rel(&out32[0][0], &ref_bn[0][0], (size_t)NFR * NPIX) : INFINITY;
    float lo = INFINITY, hi = 0;
    for (int k = 0; k < NFR; k++)
        for (int i = 0; i < NPIX; i++) {
            lo = fminf(lo, ref_bn[k][i]);
            hi = fmaxf(hi, ref_bn[k][i]);
        }
    printf("  measured: f32 C vs infer max rel %.3g; reference depth %.3g..%.3g\n", e, lo, hi);
    check(ran && e <= 1e-4 && hi > 1.5f * lo,
          "export c f32 (batch norm folded) vs train/model/infer.c depth, 3 synthetic frames: max rel err <= 1e-4",
          "ran %d max rel %.3g (reference depth range %g..%g)", ran, e, lo, hi);
}

static void test_c_int8(void)
{
    int built = build_c("bn.ckpt", "int8", "c8", "gcc", STRICT) == 0;
    check(built, "export c int8: emitted C + driver compile with gcc " STRICT, "export or compile failed (above)");
    if (!built) return;
    int ran = run_driver("c8", "", NFR, &out8[0][0]) == 0;
    double a = ran ? absrel_vs(&out8[0][0], &out32[0][0], (size_t)NFR * NPIX) : INFINITY;
    double m = ran ? max_rel(&out8[0][0], &out32[0][0], (size_t)NFR * NPIX) : 0;
    printf("  measured: int8 vs f32 AbsRel %.4g, max rel %.4g\n", a, m);
    check(ran && a <= 0.02 && m > 0, "export c int8 vs f32 export depth: AbsRel <= 2% (and not identical)",
          "ran %d AbsRel %.4g max rel %.4g", ran, a, m);
    double g32 = absrel_gt(out32), g8 = ran ? absrel_gt(out8) : NAN;
    printf("  measured: AbsRel to exact depth f32 %.5g, int8 %.5g\n", g32, g8);
    check(fabs(g8 - g32) <= 0.02 * g32,
          "export c int8 vs f32: AbsRel to the renderer's exact depth (median-scaled) within 2% relative",
          "AbsRel f32 %.5g int8 %.5g", g32, g8);
    long r32 = rodata_bytes("c32"), r8 = rodata_bytes("c8");
    printf("  measured: .rodata f32 %ld bytes, int8 %ld bytes\n", r32, r8);
    check(r32 > 0 && r8 > 0 && r8 <= 0.3 * r32, "export c int8: weight data (.rodata) <= 0.3x the f32 one",
          "f32 %ld bytes, int8 %ld bytes", r32, r8);
}

static void test_cross(void)
{
    int built = build_c("bn.ckpt", "f32", "arm", "aarch64-linux-gnu-gcc", STRICT " -static") == 0;
    check(built, "export c f32: builds with aarch64-linux-gnu-gcc -static",
          "install: apt-get install gcc-aarch64-linux-gnu libc6-dev-arm64-cross qemu-user");
    if (!built) return;
    int ran = run_driver("arm", "qemu-aarch64", 1, outx) == 0;
    double e = ran ? max_rel(outx, out32[0], NPIX) : INFINITY;
    printf("  measured: aarch64 vs host max rel %.3g\n", e);
    check(ran && e <= 1e-5, "export c f32 on aarch64 under qemu-aarch64 = host build (max rel <= 1e-5)",
          "ran %d max rel %.3g", ran, e);
}

/* Integer arithmetic makes the int8 export's aarch64 build give the host's bits. */
static void test_cross_int8(void)
{
    static float arm8[NFR][NPIX];
    int built = build_c("bn.ckpt", "int8", "arm8", "aarch64-linux-gnu-gcc", STRICT " -static") == 0;
    int ran = built && run_driver("arm8", "qemu-aarch64", NFR, &arm8[0][0]) == 0;
    long differ = 0;
    for (int k = 0; ran && k < NFR; k++)
        for (int i = 0; i < NPIX; i++) differ += memcmp(&arm8[k][i], &out8[k][i], sizeof(float)) != 0;
    printf("  measured: int8 aarch64 vs host: %ld of %d depths differ\n", differ, NFR * NPIX);
    check(ran && differ == 0, "export c int8 on aarch64 under qemu-aarch64 = host build, bit for bit (3 frames)",
          "built %d ran %d, %ld depths differ", built, ran, differ);
}

static void test_c_group_norm(void)
{
    int built = build_c("gn.ckpt", "f32", "cgn", "gcc", STRICT) == 0;
    int ran = built && run_driver("cgn", "", NFR, &outg[0][0]) == 0;
    double e = ran ? max_rel(&outg[0][0], &ref_gn[0][0], (size_t)NFR * NPIX) : INFINITY;
    printf("  measured: group-norm C vs infer max rel %.3g\n", e);
    if (built) check_facts("cgn");
    check(ran && e <= 1e-4, "export c f32 with group norm (explicit layer) vs train/model/infer.c: max rel err <= 1e-4",
          "built %d ran %d max rel %.3g", built, ran, e);
}

/* ---- two models in one program (--symbol-prefix) ---------------------------------- */

static const char TWO_MAIN[] =
    "#include \"yard_depth.h\"\n"
    "#include \"dock_depth.h\"\n"
    "#include <stdio.h>\n"
    "static float s1[YARD_DEPTH_SCRATCH_FLOATS], s2[DOCK_DEPTH_SCRATCH_FLOATS];\n"
    "static unsigned char rgb[YARD_DEPTH_WIDTH * YARD_DEPTH_HEIGHT * 3];\n"
    "static float d1[YARD_DEPTH_WIDTH * YARD_DEPTH_HEIGHT], d2[DOCK_DEPTH_WIDTH * DOCK_DEPTH_HEIGHT];\n"
    "int main(int argc, char **argv)\n"
    "{\n"
    "    FILE *in, *o1, *o2;\n"
    "    int k;\n"
    "    if (argc != 4 || !(in = fopen(argv[1], \"rb\")) || !(o1 = fopen(argv[2], \"wb\")) ||\n"
    "        !(o2 = fopen(argv[3], \"wb\")))\n"
    "        return 1;\n"
    "    for (k = 0; k < 3; k++) {\n"
    "        if (fread(rgb, 1, sizeof rgb, in) != sizeof rgb) return 1;\n"
    "        if (yard_depth_run(rgb, s1, d1, 0) || dock_depth_run(rgb, s2, d2, 0)) return 1;\n"
    "        if (fwrite(d1, sizeof d1, 1, o1) != 1 || fwrite(d2, sizeof d2, 1, o2) != 1) return 1;\n"
    "    }\n"
    "    fclose(in);\n"
    "    return fclose(o1) || fclose(o2);\n"
    "}\n";

/* Every line of `cmd`'s output starts with `prefix` (and there is at least one). */
static int all_lines_start(const char *cmd, const char *prefix, char *bad, size_t badlen)
{
    FILE *p = popen(cmd, "r");
    char line[512];
    int n = 0, ok = p != NULL;
    while (p && fgets(line, sizeof line, p)) {
        n++;
        if (strncmp(line, prefix, strlen(prefix)) && ok) {
            snprintf(bad, badlen, "%s", line);
            ok = 0;
        }
    }
    if (p) pclose(p);
    return ok && n > 0;
}

/* The batch-norm model as yard_, the group-norm one as dock_, both .c files and a
 * main including both headers in one strict C99 program; each model's depth
 * must equal its own single export's (same compiler and flags: bit for bit),
 * and every external symbol of each object (nm) and every macro of each
 * header must carry its prefix. */
static void test_two_models(void)
{
    static float d1[NFR][NPIX], d2[NFR][NPIX];
    char cmd[4096], args[2048], bad[512] = "";
    snprintf(cmd, sizeof cmd, "mkdir -p '%s/two'", dir);
    int ok = sh(cmd) == 0;
    snprintf(args, sizeof args, "export --model '%s/bn.ckpt' --format c --symbol-prefix yard_ --out '%s/two/yard_depth'",
             dir, dir);
    ok = ok && nightjar(args) == 0;
    snprintf(args, sizeof args, "export --model '%s/gn.ckpt' --format c --symbol-prefix dock_ --out '%s/two/dock_depth.c'",
             dir, dir);
    ok = ok && nightjar(args) == 0;
    snprintf(cmd, sizeof cmd, "%s/two/main.c", dir);
    FILE *f = ok ? fopen(cmd, "w") : NULL;
    ok = f && fputs(TWO_MAIN, f) >= 0;
    if (f && fclose(f)) ok = 0;
    snprintf(cmd, sizeof cmd, "cd '%s/two' && gcc " STRICT " -c yard_depth.c && gcc " STRICT " -c dock_depth.c && "
             "gcc " STRICT " main.c yard_depth.o dock_depth.o -o two -lm 2> cc.txt && "
             "./two ../frames.rgb yard.f32 dock.f32", dir);
    int built = ok && sh(cmd) == 0;
    char p1[512], p2[512];
    snprintf(p1, sizeof p1, "%s/two/yard.f32", dir);
    snprintf(p2, sizeof p2, "%s/two/dock.f32", dir);
    int ran = built && tdu_read_floats(p1, &d1[0][0], (size_t)NFR * NPIX) == 0 &&
              tdu_read_floats(p2, &d2[0][0], (size_t)NFR * NPIX) == 0;
    int same1 = ran && !memcmp(d1, out32, sizeof d1), same2 = ran && !memcmp(d2, outg, sizeof d2);
    check(built && same1 && same2,
          "export c --symbol-prefix: two models (yard_, dock_) link into one strict C99 program; each equals its own "
          "single export bit for bit", "built %d ran %d yard same %d dock same %d", built, ran, same1, same2);
    int syms = 1;
    const char *pre[2] = {"yard_", "dock_"};
    for (int i = 0; i < 2 && syms; i++) {
        snprintf(cmd, sizeof cmd, "nm -g --defined-only '%s/two/%sdepth.o' | awk '{print $3}'", dir, pre[i]);
        syms = all_lines_start(cmd, pre[i], bad, sizeof bad);
        char up[8] = "";
        for (int c = 0; c < 5; c++) up[c] = (char)(pre[i][c] - 32 * (pre[i][c] >= 'a' && pre[i][c] <= 'z'));
        snprintf(cmd, sizeof cmd, "grep -E '^#(define|ifndef)' '%s/two/%sdepth.h' | awk '{print $2}'", dir, pre[i]);
        syms = syms && all_lines_start(cmd, up, bad, sizeof bad);
    }
    check(built && syms, "export c --symbol-prefix: every external symbol (nm -g) and every header macro and the guard "
          "start with the prefix", "first without it: %s", bad);
}

/* --size: a 32x32 crop of a frame through a 32x32 export and through train/model/infer.c at 32x32. */
#define CW 32
static void test_c_size(void)
{
    nj_model m;
    nj_train_config cfg;
    nj_image im = {0, 0, NULL}, crop = {0, 0, NULL};
    nj_infer inf;
    char path[512], err[512] = "";
    static float ref[CW * CW], out[CW * CW];
    static unsigned char rgb[CW * CW * 3];
    snprintf(path, sizeof path, "%s/bn.ckpt", dir);
    int ok = nj_checkpoint_load(path, &m, &cfg, NULL, err, sizeof err) == 0;
    snprintf(path, sizeof path, "%s/data/yard-02/cam0/000001.png", dir);
    ok = ok && nj_image_load(path, &im, err, sizeof err) == 0 && nj_image_alloc(&crop, CW, CW) == 0;
    for (int c = 0; ok && c < 3; c++)
        for (int y = 0; y < CW; y++)
            for (int x = 0; x < CW; x++) {
                float v = im.data[((size_t)c * FH + y + 8) * FW + x + 16];
                crop.data[((size_t)c * CW + y) * CW + x] = v;
                rgb[((size_t)y * CW + x) * 3 + c] = (unsigned char)lrintf(v * 255.0f);
            }
    snprintf(path, sizeof path, "%s/crop.rgb", dir);
    ok = ok && write_bytes(path, rgb, sizeof rgb) == 0 &&
         nj_infer_init(&inf, &m, CW, CW, err, sizeof err) == 0;
    if (ok) {
        ok = nj_infer_depth(&inf, &crop, CW, CW, ref, NULL, err, sizeof err) == 0;
        nj_infer_free(&inf);
    }
    int built = ok && build_c_sized("bn.ckpt", "f32", "csize", "32x32") == 0;
    int ran = built && run_driver_on("csize", "", "crop.rgb", 1, CW * CW, out) == 0;
    double e = ran ? max_rel(out, ref, CW * CW) : INFINITY;
    snprintf(path, sizeof path, "%s/csize/nightjar_depth.h", dir);
    char *h = e2e_slurp(path, NULL);
    check(ran && e <= 1e-4 && h && strstr(h, "#define NIGHTJAR_DEPTH_WIDTH 32") && strstr(h, "Trained on 64x48"),
          "export c --size 32x32 vs train/model/infer.c at 32x32 on a crop: max rel err <= 1e-4",
          "ok %d (%s) built %d ran %d max rel %.3g", ok, err, built, ran, e);
    free(h);
    nj_image_free(&im);
    nj_image_free(&crop);
    if (m.nunits) nj_model_free(&m);
}

/* ---- ONNX and safetensors ---------------------------------------------------------- */

static void test_onnx(const char *model, const char *what)
{
    char args[2048], script[1100], name[200];
    snprintf(args, sizeof args, "export --model '%s/%s.ckpt' --format onnx --out '%s/%s.onnx'", dir, model, dir, model);
    int rc = nightjar(args);
    snprintf(script, sizeof script, "%s/onnx_check.py", refdir);
    snprintf(args, sizeof args, "'%s/%s.onnx' '%s/frames.npy' '%s/%s_depth.npy'", dir, model, dir, dir, model);
    int ok = rc == 0 && tdu_python(script, args) == 0;
    snprintf(name, sizeof name, "export onnx (%s): onnx.checker passes, OpenCV DNN output = train/model/infer.c "
             "(max rel <= 1e-4)", what);
    check(ok, name, "export status %d; see the script's message above", rc);
}

/* The ONNX int8 export stores int8 weights (computing in float): OpenCV's depth
 * against the f32 C export (itself checked against train/model/infer.c). */
static void test_onnx_int8(void)
{
    char args[2048], script[1100];
    snprintf(args, sizeof args, "export --model '%s/bn.ckpt' --format onnx --weights int8 --out '%s/bn8.onnx'", dir, dir);
    int rc = nightjar(args);
    int shape[3] = {NFR, FH, FW};
    char path[512], err[256];
    snprintf(path, sizeof path, "%s/bn32c_depth.npy", dir);
    int w = nj_npy_write(path, &out32[0][0], shape, 3, err, sizeof err);
    snprintf(script, sizeof script, "%s/onnx_check.py", refdir);
    snprintf(args, sizeof args, "'%s/bn8.onnx' '%s/frames.npy' '%s' --absrel 0.02", dir, dir, path);
    check(rc == 0 && w == 0 && tdu_python(script, args) == 0,
          "export onnx int8 weights: checker passes, OpenCV DNN depth vs the f32 C export: AbsRel <= 2%",
          "export status %d", rc);
}

static void test_safetensors(const char *model, const char *weights)
{
    char args[2048], script[1100], name[200];
    snprintf(args, sizeof args, "export --model '%s/%s.ckpt' --format safetensors --weights %s --out '%s/%s_%s.safetensors'",
             dir, model, weights, dir, model, weights);
    int rc = nightjar(args);
    snprintf(script, sizeof script, "%s/safetensors_read.py", refdir);
    snprintf(args, sizeof args, "'%s/%s_%s.safetensors' '%s/raw_%s' %s", dir, model, weights, dir, model, weights);
    int ok = rc == 0 && tdu_python(script, args) == 0;
    snprintf(name, sizeof name, "export safetensors %s (%s model): numpy reader loads every tensor bit-exact, "
             "metadata has architecture + training config", weights, model);
    check(ok, name, "export status %d; see the script's message above", rc);
}

/* ---- refusals ------------------------------------------------------------------------ */

static void expect_failure(const char *what, const char *args, int want)
{
    int rc = nightjar(args);
    char path[512], name[200];
    snprintf(path, sizeof path, "%s/err.txt", dir);
    char *err = e2e_slurp(path, NULL);
    snprintf(name, sizeof name, "export refuses %s: one stderr line, exit %d", what, want);
    check(rc == want && count_lines(err) == 1 && strstr(err, "nightjar export: "), name, "status %d, stderr: %s", rc,
          err ? err : "");
    free(err);
}

static void test_refusals(void)
{
    char a[2048], cmd[2048];
    snprintf(cmd, sizeof cmd, "head -c 5000 '%s/bn.ckpt' > '%s/trunc.ckpt' && echo 'not a checkpoint' > '%s/junk.ckpt'",
             dir, dir, dir);
    if (sh(cmd)) printf("note: could not write the broken checkpoints\n");
    snprintf(a, sizeof a, "export --model '%s/missing.ckpt' --format c --out '%s/x.c'", dir, dir);
    expect_failure("a missing checkpoint", a, 1);
    snprintf(a, sizeof a, "export --model '%s/trunc.ckpt' --format onnx --out '%s/x.onnx'", dir, dir);
    expect_failure("a truncated checkpoint", a, 1);
    snprintf(a, sizeof a, "export --model '%s/junk.ckpt' --format safetensors --out '%s/x.st'", dir, dir);
    expect_failure("a file that is not a checkpoint", a, 1);
    snprintf(a, sizeof a, "export --model '%s/bn.ckpt' --format c --size 40x40 --out '%s/x.c'", dir, dir);
    expect_failure("--size not divisible by 2^stages", a, 1);
    snprintf(a, sizeof a, "export --model '%s/bn.ckpt' --format tflite --out '%s/x'", dir, dir);
    expect_failure("an unknown --format", a, 2);
    snprintf(a, sizeof a, "export --model '%s/bn.ckpt' --format c --weights int4 --out '%s/x'", dir, dir);
    expect_failure("an unknown --weights", a, 2);
    snprintf(a, sizeof a, "export --model '%s/bn.ckpt' --format c", dir);
    expect_failure("a missing --out", a, 2);
    snprintf(a, sizeof a, "export --model '%s/bn.ckpt' --format c --weights int8 --out '%s/x.c'", dir, dir);
    expect_failure("c int8 without --calibrate", a, 1);
    snprintf(a, sizeof a, "export --model '%s/gn.ckpt' --format c --weights int8 --calibrate '%s/data/dataset.json' "
             "--out '%s/x.c'", dir, dir, dir);
    expect_failure("c int8 of a group-norm model", a, 1);
    snprintf(a, sizeof a, "export --model '%s/bn.ckpt' --format c --symbol-prefix 9lives --out '%s/x.c'", dir, dir);
    expect_failure("a --symbol-prefix that cannot start a C name", a, 1);
    snprintf(a, sizeof a, "export --model '%s/bn.ckpt' --format onnx --calibrate '%s/data/dataset.json' --out '%s/x'",
             dir, dir, dir);
    expect_failure("--calibrate without --format c --weights int8", a, 2);
    struct stat st;
    snprintf(a, sizeof a, "%s/x.c", dir);
    check(stat(a, &st) != 0, "export leaves no output behind when it refuses", "%s exists", a);
}

int main(int argc, char **argv)
{
    (void)argc;
    find_paths(argv[0]);
    if (!check(access(bin, X_OK) == 0, "./nightjar is built", "build it first: make nightjar")) return test_exit();
    if (!check(setup() == 0, "export test setup: synthetic frames, checkpoints, train/model/infer.c references",
               "setup failed (see above)")) {
        tdu_rmtree(dir);
        return test_exit();
    }
    test_c_f32();
    test_c_int8();
    test_cross();
    test_cross_int8();
    test_c_group_norm();
    test_c_size();
    test_two_models();
    test_onnx("bn", "batch norm folded");
    test_onnx("gn", "group norm");
    test_onnx_int8();
    test_safetensors("bn", "f32");
    test_safetensors("bn", "int8");
    test_safetensors("gn", "f32");
    test_refusals();
    if (!getenv("NJ_KEEP")) tdu_rmtree(dir);   /* NJ_KEEP=1 keeps the scratch folder for debugging */
    else printf("kept %s\n", dir);
    return test_exit();
}

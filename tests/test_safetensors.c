/* tests/test_safetensors.c — reading safetensors (train/loop/safetensors_read.c)
 * and `--init FILE.safetensors` (train/loop/safetensors_init.c).
 *  - round trip: a small model (batch norm with random statistics; and one
 *    with group norm) is exported with nj_export_safetensors, loaded into a
 *    model of the same architecture built from a different seed, and
 *    exported again: every folded tensor equals the first export's within
 *    1e-6 (relative to the tensor's largest value); int8 exports load as
 *    scale·q exactly;
 *  - the parsed header lists every tensor with the dtype, shape and offsets
 *    the writer documents;
 *  - a model of another width is refused with a message naming the file;
 *  - CLI: `nightjar train --init RUN.safetensors` (exported from a 1-step
 *    run) trains, and a width mismatch exits non-zero with one line;
 *  - CLI: the weights really come from the file: a run with another seed
 *    started from the export, one step at learning rate 0 (the first warm-up
 *    step) and batch-norm momentum 1e-9, exported again, gives the file's
 *    tensors (every tensor within 1e-6 of its largest value; the seed's own
 *    initial weights would not). */
#include "nn/rng.h"
#include "tests/check.h"
#include "tests/e2e_support.h"
#include "tests/torch_ref.h"
#include "train/export/export.h"
#include "train/loop/safetensors.h"
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define W 64
#define H 32

static void config(nj_train_config *c, nj_norm_kind norm, float width, unsigned seed)
{
    nj_train_config_default(c);
    c->width = W;
    c->height = H;
    c->seed = c->model.seed = seed;
    c->model.stages = 4;
    c->model.width = width;
    c->model.scales = 2;
    c->model.pose_width = 0.25f;
    c->model.pose_stages = 3;
    c->model.norm = norm;
}

/* Non-trivial normalisation parameters so that folding matters. */
static void randomise_norm(nj_model *m, unsigned seed)
{
    nj_rng r;
    nj_rng_seed(&r, seed);
    for (int i = 0; i < m->nunits; i++) {
        nj_unit *u = &m->units[i];
        for (int o = 0; u->gamma && o < u->cout; o++) {
            u->gamma->data[o] = 0.5f + nj_rng_uniform(&r);
            u->beta->data[o] = nj_rng_uniform(&r) - 0.5f;
            if (u->run_mean) {
                u->run_mean->data[o] = 0.2f * (nj_rng_uniform(&r) - 0.5f);
                u->run_var->data[o] = 0.5f + nj_rng_uniform(&r);
            }
        }
    }
}

static int build(nj_model *m, nj_train_config *c, nj_norm_kind norm, float width, unsigned seed)
{
    char err[512];
    config(c, norm, width, seed);
    if (nj_model_init(m, &c->model, err, sizeof err)) { printf("# model: %s\n", err); return -1; }
    return 0;
}

static int export_to(const nj_model *m, const nj_train_config *c, int int8, const char *path, nj_export_net *net)
{
    char err[512];
    long bytes = 0;
    if (nj_export_prepare(net, m, c, int8, W, H, err, sizeof err)) { printf("# prepare: %s\n", err); return -1; }
    if (nj_export_safetensors(net, path, &bytes, err, sizeof err)) { printf("# export: %s\n", err); return -1; }
    return 0;
}

/* Largest difference of folded tensors relative to each tensor's largest value. */
static double net_diff(const nj_export_net *a, const nj_export_net *b)
{
    double worst = a->nlayers == b->nlayers ? 0 : INFINITY;
    for (int i = 0; i < a->nlayers && i < b->nlayers; i++) {
        const nj_export_layer *x = &a->layers[i], *y = &b->layers[i];
        size_t nw = (size_t)x->cout * x->cin * x->k * x->k;
        double mw = 1e-30, mb = 1e-30, dw = 0, db = 0;
        for (size_t k = 0; k < nw; k++) { mw = fmax(mw, fabs(x->w[k])); dw = fmax(dw, fabs(x->w[k] - y->w[k])); }
        for (int o = 0; o < x->cout; o++) { mb = fmax(mb, fabs(x->b[o])); db = fmax(db, fabs(x->b[o] - y->b[o])); }
        for (int o = 0; x->groups && o < x->cout; o++)
            dw = fmax(dw, fabs(x->gamma[o] - y->gamma[o]) + fabs(x->beta[o] - y->beta[o]));
        worst = fmax(worst, fmax(dw / mw, db / mb));
    }
    return worst;
}

static void round_trip(const char *dir, nj_norm_kind norm, const char *tag)
{
    nj_model a, b;
    nj_train_config ca, cb;
    char path[512], again[512], name[160], err[512];
    snprintf(path, sizeof path, "%s/%s.safetensors", dir, tag);
    snprintf(again, sizeof again, "%s/%s-again.safetensors", dir, tag);
    if (build(&a, &ca, norm, 0.25f, 3) || build(&b, &cb, norm, 0.25f, 9)) { check(0, tag, "model build"); return; }
    randomise_norm(&a, 17);
    nj_export_net na, nb;
    int ok = !export_to(&a, &ca, 0, path, &na);
    int rc = ok ? nj_safetensors_init_model(path, &b, err, sizeof err) : -1;
    snprintf(name, sizeof name, "safetensors %s: export loads into a same-architecture model", tag);
    check(rc == 0, name, "%s", rc ? err : "");
    double d = rc == 0 && !export_to(&b, &cb, 0, again, &nb) ? net_diff(&na, &nb) : INFINITY;
    snprintf(name, sizeof name, "safetensors %s: export -> init -> export gives the same folded tensors", tag);
    check(d <= 1e-6, name, "max relative difference %g", d);
    if (isfinite(d)) nj_export_release(&nb);
    if (ok) nj_export_release(&na);
    nj_model_free(&a);
    nj_model_free(&b);
}

/* Header contents as documented; int8 loads as scale·q. */
static void header_and_int8(const char *dir)
{
    nj_model a, b;
    nj_train_config ca, cb;
    char path[512], err[512];
    snprintf(path, sizeof path, "%s/int8.safetensors", dir);
    if (build(&a, &ca, NJ_NORM_BATCH, 0.25f, 3) || build(&b, &cb, NJ_NORM_BATCH, 0.25f, 9)) return;
    nj_export_net na;
    if (export_to(&a, &ca, 1, path, &na)) { check(0, "safetensors int8 export", "failed"); return; }
    nj_safetensors st;
    int rc = nj_safetensors_read(&st, path, err, sizeof err);
    int listed = rc == 0, shapes = rc == 0;
    for (int i = 0; rc == 0 && i < na.nlayers; i++) {
        char nm[160];
        snprintf(nm, sizeof nm, "%s.weight", na.layers[i].name);
        const nj_st_tensor *t = nj_safetensors_find(&st, nm);
        listed &= t != NULL;
        shapes &= t && !strcmp(t->dtype, "I8") && t->ndim == 4 && t->shape[0] == (uint64_t)na.layers[i].cout &&
                  t->shape[1] == (uint64_t)na.layers[i].cin && t->numel == t->end - t->begin;
    }
    check(listed && shapes, "safetensors reader lists every layer's I8 weight with its shape and byte range",
          "%s", rc ? err : "mismatch");
    if (rc == 0) nj_safetensors_free(&st);
    rc = nj_safetensors_init_model(path, &b, err, sizeof err);
    double worst = rc ? INFINITY : 0;
    for (int i = 0; rc == 0 && i < na.nlayers; i++) {
        const nj_export_layer *l = &na.layers[i];
        int per = l->cin * l->k * l->k;
        for (int k = 0; k < l->cout * per; k++)
            worst = fmax(worst, fabs(b.units[i].w->data[k] - l->scale[k / per] * (float)l->q[k]));
    }
    check(worst == 0, "safetensors int8 export loads as scale*q exactly", "%s max diff %g", rc ? err : "", worst);
    nj_export_release(&na);
    nj_model_free(&a);
    nj_model_free(&b);
}

static void mismatch(const char *dir)
{
    nj_model a, b;
    nj_train_config ca, cb;
    char path[512], err[512] = "";
    snprintf(path, sizeof path, "%s/narrow.safetensors", dir);
    if (build(&a, &ca, NJ_NORM_BATCH, 0.25f, 3) || build(&b, &cb, NJ_NORM_BATCH, 0.5f, 3)) return;
    nj_export_net na;
    int rc = export_to(&a, &ca, 0, path, &na) ? 0 : nj_safetensors_init_model(path, &b, err, sizeof err);
    check(rc != 0 && strstr(err, path) && strstr(err, "needs") && !strchr(err, '\n'),
          "safetensors from another width is refused with one line naming the file", "rc %d: %s", rc, err);
    nj_export_release(&na);
    nj_model_free(&a);
    nj_model_free(&b);
}

static const char *CLI_CONFIG =
    "{ \"run\": { \"name\": \"st\", \"seed\": 5, \"threads\": 2, \"log_every\": 1, \"validate_every\": 0,\n"
    "           \"checkpoint_minutes\": 1000, \"keep_last\": 1 },\n"
    "  \"data\": { \"width\": 64, \"height\": 32, \"batch\": 2, \"frame_offsets\": [1], \"video\": true,\n"
    "            \"duplicate_threshold\": 0 },\n"
    "  \"model\": { \"width\": %s, \"stages\": 4%s } }\n";

/* Largest |a − b| of two safetensors files' tensors relative to each
 * tensor's largest |a|; INFINITY with why when the names, dtypes or sizes
 * differ or a file cannot be read. */
static double st_file_diff(const char *a, const char *b, char *why, size_t len)
{
    nj_safetensors x, y;
    if (nj_safetensors_read(&x, a, why, len)) return INFINITY;
    if (nj_safetensors_read(&y, b, why, len)) {
        nj_safetensors_free(&x);
        return INFINITY;
    }
    double worst = x.n == y.n ? 0 : INFINITY;
    if (x.n != y.n) snprintf(why, len, "%d tensors vs %d", x.n, y.n);
    for (int i = 0; isfinite(worst) && i < x.n; i++) {
        const nj_st_tensor *t = &x.t[i], *u = nj_safetensors_find(&y, t->name);
        if (!u || u->numel != t->numel || strcmp(u->dtype, t->dtype)) {
            snprintf(why, len, "tensor %s: missing or another dtype/size in the second file", t->name);
            worst = INFINITY;
            break;
        }
        double big = 1e-30, d = 0;
        for (uint64_t k = 0; k < t->numel; k++) {
            double p = nj_safetensors_value(&x, t, k), q = nj_safetensors_value(&y, u, k);
            big = fmax(big, fabs(p));
            d = fmax(d, fabs(p - q));
        }
        if (d / big > worst) {
            worst = d / big;
            snprintf(why, len, "worst tensor %s", t->name);
        }
    }
    nj_safetensors_free(&x);
    nj_safetensors_free(&y);
    return worst;
}

static void cli(const char *dir)
{
    char cmd[4096], log[600], cfg[600], wide[600], still[600], text[1024];
    snprintf(log, sizeof log, "%s/cli.txt", dir);
    snprintf(cmd, sizeof cmd, "%s synth --out %s/data --seed 4 --sequences 3 --frames 8 --size 96x64", e2e_bin(), dir);
    if (!check(e2e_run(cmd, log) == 0, "safetensors cli: synth renders data", "see %s", log)) return;
    snprintf(cfg, sizeof cfg, "%s/st.json", dir);
    snprintf(text, sizeof text, CLI_CONFIG, "0.5", "");
    e2e_write(cfg, text);
    snprintf(wide, sizeof wide, "%s/wide.json", dir);
    snprintf(text, sizeof text, CLI_CONFIG, "0.75", "");
    e2e_write(wide, text);
    /* a step that changes nothing but batch-norm statistics, by 1e-9 of a step;
     * lr · step / warm-up is 0 at step 0 (train/loop/config.c) */
    snprintf(still, sizeof still, "%s/still.json", dir);
    snprintf(text, sizeof text, CLI_CONFIG, "0.5", ", \"bn_momentum\": 1e-9");
    char *cut = strrchr(text, '}');
    snprintf(cut, sizeof text - (size_t)(cut - text), ", \"optim\": { \"warmup_steps\": 4 } }\n");
    e2e_write(still, text);
    snprintf(cmd, sizeof cmd,
             "%s train --config %s --data %s/data/dataset.json --out %s/r1 --steps 1 && "
             "%s export --model %s/r1/final.ckpt --format safetensors --out %s/r1.safetensors --size 64x32",
             e2e_bin(), cfg, dir, dir, e2e_bin(), dir, dir);
    if (!check(e2e_run(cmd, log) == 0, "safetensors cli: 1-step run exported", "see %s", log)) return;
    snprintf(cmd, sizeof cmd, "%s train --config %s --data %s/data/dataset.json --out %s/r2 --steps 2 --init %s/r1.safetensors",
             e2e_bin(), cfg, dir, dir, dir);
    int rc = e2e_run(cmd, log);
    check(rc == 0, "safetensors cli: train --init FILE.safetensors trains from the export", "exit %d, see %s", rc, log);
    snprintf(cmd, sizeof cmd,
             "%s train --config %s --data %s/data/dataset.json --out %s/r4 --steps 1 --seed 9 --init %s/r1.safetensors && "
             "%s export --model %s/r4/final.ckpt --format safetensors --out %s/r4.safetensors --size 64x32",
             e2e_bin(), still, dir, dir, dir, e2e_bin(), dir, dir);
    rc = e2e_run(cmd, log);
    char a[600], b[600], why[256] = "";
    snprintf(a, sizeof a, "%s/r1.safetensors", dir);
    snprintf(b, sizeof b, "%s/r4.safetensors", dir);
    double d = rc == 0 ? st_file_diff(a, b, why, sizeof why) : INFINITY;
    checkv(rc == 0 && d <= 1e-6,
           "safetensors cli: --init FILE.safetensors takes the file's weights (seed 9, a step at lr 0, exported again)",
           "exit %d (see %s); max relative difference %g, %.200s", rc, log, d, why);
    snprintf(cmd, sizeof cmd, "%s train --config %s --data %s/data/dataset.json --out %s/r3 --steps 2 --init %s/r1.safetensors",
             e2e_bin(), wide, dir, dir, dir);
    rc = e2e_run(cmd, log);
    char *out = e2e_slurp(log, NULL);
    check(rc != 0 && out && strstr(out, "r1.safetensors") && strstr(out, "does not match") && e2e_count(out, "\n") <= 2,
          "safetensors cli: --init from another architecture exits non-zero with one line",
          "exit %d: %s", rc, out ? out : "");
    free(out);
}

int main(void)
{
    char dir[256];
    if (ref_mkdtemp(dir, sizeof dir, "st")) { check(0, "temp folder", "%s", dir); return test_exit(); }
    round_trip(dir, NJ_NORM_BATCH, "batch-norm");
    round_trip(dir, NJ_NORM_GROUP, "group-norm");
    header_and_int8(dir);
    mismatch(dir);
    if (check(e2e_have_binary(), "./nightjar is built", "run from the repository root after make")) cli(dir);
    if (!test_failures()) ref_rmtree(dir);
    else printf("# kept %s for inspection\n", dir);
    return test_exit();
}

/* tests/test_torch_nn.c — nightjar's ops against PyTorch.
 *
 * tests/ref/torch_nn.py (run with /usr/bin/python3, Debian's python3-torch)
 * writes seeded random cases into a fresh temporary folder: inputs, an
 * upstream gradient gy, PyTorch's output y and the gradients of sum(y * gy)
 * with respect to every input, computed by PyTorch in float64 (see the
 * script).  For each case this program builds the same op (or the small
 * encoder-decoder) in nightjar from the same float32 inputs, runs forward and
 * nj_backward_seeded(gy), and compares the output, every input gradient and,
 * for batch normalisation, the updated running statistics.
 *
 * Relative error of a tensor a against PyTorch's b:
 *     max_i |a_i - b_i| / max(max_i |b_i|, 1e-6)
 * A case passes when every compared tensor has relative error <= 1e-4.  Each
 * case prints one PASS/FAIL line "torch <case name>" followed by a "#" line
 * with the error of each tensor.  A missing python3 or torch is a failure.
 */
#include "nn/ops.h"
#include "tests/check.h"
#include "tests/torch_ref.h"
#include <cjson/cJSON.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define TOL 1e-4
#define MAX_IN 12

typedef struct tcase {
    const char *dir;
    const cJSON *params;
    nj_graph *g;
    int nin, nstate;
    const char *in_name[MAX_IN];
    nj_tensor *in[MAX_IN];
    const char *st_name[2];
    float *st[2];
    size_t st_len[2];
    char report[1024];      /* per-tensor errors, appended as compared */
    char why[1024];         /* first failure */
    double worst;
} tcase;

/* ---- case inputs and parameters ------------------------------------------ */

static nj_tensor *IN(tcase *c, const char *name)
{
    for (int k = 0; k < c->nin; k++)
        if (!strcmp(c->in_name[k], name)) return c->in[k];
    return nj_graph_fail(c->g, "case has no input '%s'", name);
}

static float *STATE(tcase *c, const char *name, size_t want)
{
    for (int k = 0; k < c->nstate; k++)
        if (!strcmp(c->st_name[k], name)) {
            if (c->st_len[k] == want) return c->st[k];
            return nj_graph_fail(c->g, "state '%s' has %zu values, expected %zu",
                                 name, c->st_len[k], want);
        }
    return nj_graph_fail(c->g, "case has no state '%s'", name);
}

static double PNUM(tcase *c, const char *key)
{
    const cJSON *v = cJSON_GetObjectItemCaseSensitive(c->params, key);
    if (cJSON_IsNumber(v)) return v->valuedouble;
    if (cJSON_IsBool(v)) return cJSON_IsTrue(v);
    nj_graph_fail(c->g, "case parameter '%s' missing", key);
    return 0;
}

static int PINT(tcase *c, const char *key) { return (int)PNUM(c, key); }

static const char *PSTR(tcase *c, const char *key)
{
    const cJSON *v = cJSON_GetObjectItemCaseSensitive(c->params, key);
    if (cJSON_IsString(v)) return v->valuestring;
    nj_graph_fail(c->g, "case parameter '%s' missing", key);
    return "";
}

/* ---- builders: the same computation as the script's lambdas ---------------- */

typedef nj_tensor *(*unary_fn)(nj_graph *, nj_tensor *);
typedef nj_tensor *(*binary_fn)(nj_graph *, nj_tensor *, nj_tensor *);

static nj_tensor *b_conv2d(tcase *c)
{
    const char *mode = PSTR(c, "mode");
    nj_tensor *b = NULL;
    for (int k = 0; k < c->nin; k++)
        if (!strcmp(c->in_name[k], "b")) b = c->in[k];
    return nj_conv2d(c->g, IN(c, "x"), IN(c, "w"), b, PINT(c, "stride"), PINT(c, "pad"),
                     strcmp(mode, "reflect") ? NJ_PAD_ZERO : NJ_PAD_REFLECT);
}

static nj_tensor *b_upsample2(tcase *c) { return nj_upsample2(c->g, IN(c, "x")); }
static nj_tensor *b_resize(tcase *c)
{
    return nj_resize_bilinear(c->g, IN(c, "x"), PINT(c, "oh"), PINT(c, "ow"));
}
static nj_tensor *b_concat(tcase *c) { return nj_concat(c->g, IN(c, "a"), IN(c, "b")); }
static nj_tensor *b_slice(tcase *c)
{
    return nj_slice_channels(c->g, IN(c, "x"), PINT(c, "c0"), PINT(c, "count"));
}
static nj_tensor *b_reflect_pad(tcase *c) { return nj_reflect_pad(c->g, IN(c, "x"), PINT(c, "pad")); }
static nj_tensor *b_avgpool3(tcase *c) { return nj_avgpool3(c->g, IN(c, "x")); }
static nj_tensor *b_global_avgpool(tcase *c) { return nj_global_avgpool(c->g, IN(c, "x")); }
static nj_tensor *b_clamp(tcase *c)
{
    return nj_clamp(c->g, IN(c, "x"), (float)PNUM(c, "lo"), (float)PNUM(c, "hi"));
}
static nj_tensor *b_affine(tcase *c)
{
    return nj_affine(c->g, IN(c, "x"), (float)PNUM(c, "s"), (float)PNUM(c, "t"));
}

static int axes_mask(const char *s)
{
    int m = 0;
    for (; *s; s++)
        m |= *s == 'n' ? NJ_AXIS_N : *s == 'c' ? NJ_AXIS_C : *s == 'h' ? NJ_AXIS_H
           : *s == 'w' ? NJ_AXIS_W : 0;
    return m;
}
static nj_tensor *b_sum(tcase *c) { return nj_sum(c->g, IN(c, "x"), axes_mask(PSTR(c, "axes"))); }
static nj_tensor *b_mean(tcase *c) { return nj_mean(c->g, IN(c, "x"), axes_mask(PSTR(c, "axes"))); }

static nj_tensor *b_batchnorm(tcase *c)
{
    nj_tensor *x = IN(c, "x");
    if (!x) return NULL;
    float *rm = STATE(c, "run_mean", (size_t)x->c), *rv = STATE(c, "run_var", (size_t)x->c);
    if (!rm || !rv) return NULL;
    nj_graph_set_training(c->g, PINT(c, "training"));
    return nj_batchnorm(c->g, x, IN(c, "gamma"), IN(c, "beta"), rm, rv,
                        (float)PNUM(c, "momentum"), (float)PNUM(c, "eps"));
}

static nj_tensor *b_groupnorm(tcase *c)
{
    return nj_groupnorm(c->g, IN(c, "x"), PINT(c, "groups"), IN(c, "gamma"), IN(c, "beta"),
                        (float)PNUM(c, "eps"));
}

/* conv s2 (reflect, no bias) -> BN (training) -> ELU = e1; conv s2 (zero) ->
 * nearest x2 -> concat with e1 -> conv s1 (reflect) -> sigmoid. */
static nj_tensor *b_encdec(tcase *c)
{
    nj_graph *g = c->g;
    nj_tensor *w1 = IN(c, "w1");
    if (!w1) return NULL;
    float *rm = STATE(c, "run_mean", (size_t)w1->n), *rv = STATE(c, "run_var", (size_t)w1->n);
    if (!rm || !rv) return NULL;
    nj_graph_set_training(g, 1);
    nj_tensor *c1 = nj_conv2d(g, IN(c, "x"), w1, NULL, 2, 1, NJ_PAD_REFLECT);
    nj_tensor *e1 = nj_elu(g, nj_batchnorm(g, c1, IN(c, "g1"), IN(c, "be1"), rm, rv,
                                           (float)PNUM(c, "momentum"), (float)PNUM(c, "eps")));
    nj_tensor *c2 = nj_conv2d(g, e1, IN(c, "w2"), IN(c, "b2"), 2, 1, NJ_PAD_ZERO);
    nj_tensor *cat = nj_concat(g, nj_upsample2(g, c2), e1);
    return nj_sigmoid(g, nj_conv2d(g, cat, IN(c, "w3"), IN(c, "b3"), 1, 1, NJ_PAD_REFLECT));
}

static const struct { const char *op; unary_fn fn; } UNARY[] = {
    {"relu", nj_relu}, {"elu", nj_elu}, {"sigmoid", nj_sigmoid}, {"exp", nj_exp},
    {"abs", nj_abs}, {"log", nj_log}, {"sqrt", nj_sqrt},
};
static const struct { const char *op; binary_fn fn; } BINARY[] = {
    {"add", nj_add}, {"sub", nj_sub}, {"mul", nj_mul}, {"div", nj_div}, {"minimum", nj_minimum},
};
static const struct { const char *op; nj_tensor *(*fn)(tcase *); } OTHER[] = {
    {"conv2d", b_conv2d}, {"upsample2", b_upsample2}, {"resize_bilinear", b_resize},
    {"concat", b_concat}, {"slice_channels", b_slice}, {"reflect_pad", b_reflect_pad},
    {"avgpool3", b_avgpool3}, {"global_avgpool", b_global_avgpool}, {"clamp", b_clamp},
    {"affine", b_affine}, {"sum", b_sum}, {"mean", b_mean}, {"batchnorm", b_batchnorm},
    {"groupnorm", b_groupnorm}, {"encdec", b_encdec},
};

static nj_tensor *build(tcase *c, const char *op)
{
    for (size_t k = 0; k < sizeof UNARY / sizeof *UNARY; k++)
        if (!strcmp(op, UNARY[k].op)) return UNARY[k].fn(c->g, IN(c, "x"));
    for (size_t k = 0; k < sizeof BINARY / sizeof *BINARY; k++)
        if (!strcmp(op, BINARY[k].op)) return BINARY[k].fn(c->g, IN(c, "a"), IN(c, "b"));
    for (size_t k = 0; k < sizeof OTHER / sizeof *OTHER; k++)
        if (!strcmp(op, OTHER[k].op)) return OTHER[k].fn(c);
    return nj_graph_fail(c->g, "test does not know op '%s'", op);
}

/* ---- comparison -------------------------------------------------------------- */

/* Compares n values (and the 4-D shape when shape is non-NULL) with dir/ref.npy. */
static void compare(tcase *c, const char *label, const float *got, const int *shape,
                    size_t n, const char *ref)
{
    char err[512];
    int rs[4];
    float *want = ref_load(c->dir, ref, rs, err, sizeof err);
    double e;
    if (!want) {
        e = INFINITY;
        snprintf(c->why, sizeof c->why, "%s", err);
    } else if ((size_t)rs[0] * rs[1] * rs[2] * rs[3] != n ||
               (shape && memcmp(shape, rs, sizeof rs) != 0)) {
        e = INFINITY;
        snprintf(c->why, sizeof c->why, "%s: shape %dx%dx%dx%d, PyTorch %dx%dx%dx%d", label,
                 shape ? shape[0] : (int)n, shape ? shape[1] : 1, shape ? shape[2] : 1,
                 shape ? shape[3] : 1, rs[0], rs[1], rs[2], rs[3]);
    } else {
        e = got ? ref_rel_err(got, want, n) : INFINITY;
        if (!got) snprintf(c->why, sizeof c->why, "%s: nightjar produced no gradient", label);
        else if (!(e <= TOL) && !c->why[0])
            snprintf(c->why, sizeof c->why, "%s relative error %.3g > %g", label, e, TOL);
    }
    free(want);
    size_t len = strlen(c->report);
    snprintf(c->report + len, sizeof c->report - len, " %s %.2g", label, e);
    if (!(e <= c->worst)) c->worst = e;
}

static void compare_tensor(tcase *c, const char *label, const nj_tensor *t, const float *v,
                           const char *ref)
{
    int shape[4] = {t->n, t->c, t->h, t->w};
    compare(c, label, v, shape, nj_numel(t), ref);
}

/* ---- one case ------------------------------------------------------------------ */

static int load_inputs(tcase *c, const cJSON *meta)
{
    char err[512] = "more inputs than the test handles, or a name that is not a string";
    char name[64];
    const cJSON *v;
    cJSON_ArrayForEach(v, cJSON_GetObjectItemCaseSensitive(meta, "inputs")) {
        int s[4];
        float *d = cJSON_IsString(v) && c->nin < MAX_IN ?
                   ref_load(c->dir, v->valuestring, s, err, sizeof err) : NULL;
        if (!d) { snprintf(c->why, sizeof c->why, "input: %s", err); return -1; }
        c->in_name[c->nin] = v->valuestring;
        c->in[c->nin++] = nj_tensor_from(c->g, s[0], s[1], s[2], s[3], d, 1);
        free(d);
    }
    cJSON_ArrayForEach(v, cJSON_GetObjectItemCaseSensitive(meta, "state")) {
        int s[4];
        snprintf(name, sizeof name, "%s", cJSON_IsString(v) ? v->valuestring : "?");
        float *d = c->nstate < 2 ? ref_load(c->dir, name, s, err, sizeof err) : NULL;
        if (!d) { snprintf(c->why, sizeof c->why, "state: %s", err); return -1; }
        c->st_name[c->nstate] = v->valuestring;
        c->st_len[c->nstate] = (size_t)s[0] * s[1] * s[2] * s[3];
        c->st[c->nstate++] = d;
    }
    return c->nin > 0 ? 0 : -1;
}

static void compare_all(tcase *c, nj_tensor *y)
{
    char err[512], ref[80];
    compare_tensor(c, "y", y, y->data, "y");
    for (int k = 0; k < c->nstate; k++) {
        snprintf(ref, sizeof ref, "%s_new", c->st_name[k]);
        compare(c, c->st_name[k], c->st[k], NULL, c->st_len[k], ref);
    }
    int gs[4];
    float *gy = ref_load(c->dir, "gy", gs, err, sizeof err);
    if (!gy || (size_t)gs[0] * gs[1] * gs[2] * gs[3] != nj_numel(y)) {
        snprintf(c->why, sizeof c->why, "gy: %s", gy ? "wrong size" : err);
        c->worst = INFINITY;
        free(gy);
        return;
    }
    if (nj_backward_seeded(c->g, y, gy) != 0) {
        snprintf(c->why, sizeof c->why, "backward failed: %s", nj_graph_error(c->g));
        c->worst = INFINITY;
    } else {
        for (int k = 0; k < c->nin; k++) {
            snprintf(ref, sizeof ref, "grad_%s", c->in_name[k]);
            compare_tensor(c, ref, c->in[k], c->in[k]->grad, ref);
        }
    }
    free(gy);
}

/* Runs the case in folder `sub` and prints its line; reports the op name and
 * whether it ran in training mode (for the coverage check). */
static void run_case(const char *root, const char *sub, char *op_out, size_t oplen, int *training)
{
    char dir[4200], path[4300], label[200];
    snprintf(dir, sizeof dir, "%s/%s", root, sub);
    snprintf(path, sizeof path, "%s/meta.json", dir);
    tcase c;
    memset(&c, 0, sizeof c);
    c.dir = dir;
    FILE *f = fopen(path, "rb");
    char *text = calloc(1, 1 << 16);
    if (f) { fread(text, 1, (1 << 16) - 1, f); fclose(f); }
    cJSON *meta = cJSON_Parse(text);
    free(text);
    const cJSON *name = cJSON_GetObjectItemCaseSensitive(meta, "name");
    const cJSON *op = cJSON_GetObjectItemCaseSensitive(meta, "op");
    snprintf(label, sizeof label, "torch %s", cJSON_IsString(name) ? name->valuestring : sub);
    if (!cJSON_IsString(op)) {
        check(0, label, "%s is missing or lacks \"op\"", path);
        cJSON_Delete(meta);
        return;
    }
    snprintf(op_out, oplen, "%s", op->valuestring);
    c.params = cJSON_GetObjectItemCaseSensitive(meta, "params");
    *training = (int)cJSON_IsTrue(cJSON_GetObjectItemCaseSensitive(c.params, "training"));
    c.g = nj_graph_new(1 << 20);
    nj_tensor *y = NULL;
    if (load_inputs(&c, meta) == 0) {
        y = build(&c, op->valuestring);
        if (!y || nj_graph_failed(c.g))
            snprintf(c.why, sizeof c.why, "nightjar failed: %s", nj_graph_error(c.g));
    }
    if (y && !c.why[0]) compare_all(&c, y);
    else c.worst = INFINITY;
    check(!c.why[0] && c.worst <= TOL, label, "%s", c.why);
    printf("#  max relative error:%s\n", c.report);
    for (int k = 0; k < c.nstate; k++) free(c.st[k]);
    nj_graph_free(c.g);
    cJSON_Delete(meta);
}

/* ---- the whole run ----------------------------------------------------------------- */

static const char *const REQUIRED[] = {
    "conv2d", "upsample2", "resize_bilinear", "concat", "relu", "elu", "sigmoid",
    "avgpool3", "global_avgpool", "reflect_pad", "batchnorm", "groupnorm", "encdec",
};
#define NREQ (sizeof REQUIRED / sizeof *REQUIRED)

static cJSON *read_index(const char *root, char *why, size_t len)
{
    char path[4200];
    snprintf(path, sizeof path, "%s/cases.json", root);
    FILE *f = fopen(path, "rb");
    if (!f) { snprintf(why, len, "%s was not written", path); return NULL; }
    char *text = calloc(1, 1 << 20);
    size_t n = fread(text, 1, (1 << 20) - 1, f);
    fclose(f);
    cJSON *idx = n ? cJSON_Parse(text) : NULL;
    free(text);
    if (!idx) snprintf(why, len, "%s is not valid JSON", path);
    return idx;
}

static void run_all(const char *root)
{
    char why[4400];
    cJSON *idx = read_index(root, why, sizeof why);
    const cJSON *list = cJSON_GetObjectItemCaseSensitive(idx, "cases");
    int listed = cJSON_GetArraySize(list);
    const cJSON *count = cJSON_GetObjectItemCaseSensitive(idx, "count");
    if (!check(idx && listed > 0 && cJSON_IsNumber(count) && count->valueint == listed,
               "torch reference cases listed", "%s", idx ? "cases.json is inconsistent" : why)) {
        cJSON_Delete(idx);
        return;
    }
    int seen[NREQ] = {0}, bn_train = 0, bn_eval = 0;
    const cJSON *v;
    cJSON_ArrayForEach(v, list) {
        char op[64] = "";
        int training = 0;
        if (cJSON_IsString(v)) run_case(root, v->valuestring, op, sizeof op, &training);
        for (size_t k = 0; k < NREQ; k++) seen[k] += !strcmp(op, REQUIRED[k]);
        if (!strcmp(op, "batchnorm")) { bn_train += training; bn_eval += !training; }
    }
    char missing[512] = "";
    for (size_t k = 0, len = 0; k < NREQ; k++)
        if (!seen[k] && len < sizeof missing)
            len += (size_t)snprintf(missing + len, sizeof missing - len, "%s ", REQUIRED[k]);
    check(!missing[0] && bn_train && bn_eval, "torch cases cover every required op",
          "missing: %s%s%s", missing, bn_train ? "" : "batchnorm-train ", bn_eval ? "" : "batchnorm-eval");
    cJSON_Delete(idx);
}

int main(void)
{
    nj_threads_init(0);
    char why[512], script[4096], root[4096];
    if (!check(ref_python_present(why, sizeof why), "torch reference available", "%s", why))
        return test_exit();
    if (!check(ref_script_path("torch_nn.py", script, sizeof script) == 0,
               "torch reference script found", "%s", script))
        return test_exit();
    if (!check(ref_mkdtemp(root, sizeof root, "torch_nn") == 0, "torch temporary folder", "%s", root))
        return test_exit();
    int rc = ref_run_python(script, root);
    if (check(rc == 0, "torch reference script ran",
              "%s %s %s exited with %d (is python3-torch installed? see its message above)",
              REF_PYTHON, script, root, rc))
        run_all(root);
    if (test_failures()) printf("# reference cases kept in %s\n", root);
    else ref_rmtree(root);
    return test_exit();
}

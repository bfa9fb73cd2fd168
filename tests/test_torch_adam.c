/* tests/test_torch_adam.c — the optimizer against PyTorch, and arena reuse.
 *
 * 1. tests/ref/torch_adam.py (run with /usr/bin/python3, Debian's
 *    python3-torch) runs torch.optim.Adam and torch.optim.AdamW for 20 steps on
 *    0.5·Σ a_i (p_i − t_i)² over three parameters in three groups (learning-rate
 *    multipliers 1 and 0.5, the third group frozen).  Here nj_adam_step runs
 *    the same 20 steps from the same initial values, the gradient a_i (p_i − t_i)
 *    computed by hand, and the final parameters must match with relative error
 *        max_i |a_i − b_i| / max(max_i |b_i|, 1e-6)  ≤ 1e-6
 *    per parameter (b = PyTorch); the frozen one must not move at all.
 * 2. Gradient norm and scaling (nn/param.c, used for clipping): hand-worked
 *    Euclidean norms (a 3-4-5 triangle and a 1-2-2 one: √(9+16+1+4+4) = √34),
 *    scaling by 0.5, and on ~2.1 M random gradients 1 and 2 threads give the
 *    same bits and a plain serial double sum agrees within 1e-12 relative.
 * 2b. Clipping folded into the update: nj_adam_step_scaled(f) on 2 threads
 *    must give the same bits as nj_params_scale_grads(f) then nj_adam_step on
 *    1 thread (parameters, both moments; 3 steps, ~0.4 M values over tensors
 *    of many sizes, one frozen group, two learning-rate groups) and must
 *    leave the gradients as they were.
 * 3. Arena reuse: a small training step (conv → ELU → mean, forward, backward,
 *    Adam) with parameters wrapped by nj_param_tensor is repeated in one graph
 *    with nj_graph_reset between steps; after the first step the arena must
 *    make no further system allocation (nj_arena_sysallocs) and the tape must
 *    record the same number of ops every step.
 */
#include "nn/adam.h"
#include "nn/ops.h"
#include "tests/check.h"
#include "tests/torch_ref.h"
#include <cjson/cJSON.h>
#include <math.h>
#include <omp.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define ADAM_TOL 1e-6

static cJSON *read_json(const char *path)
{
    FILE *f = fopen(path, "rb");
    if (!f) return NULL;
    char *text = calloc(1, 1 << 16);
    size_t n = fread(text, 1, (1 << 16) - 1, f);
    fclose(f);
    cJSON *j = n ? cJSON_Parse(text) : NULL;
    free(text);
    return j;
}

static double num(const cJSON *obj, const char *key)
{
    const cJSON *v = cJSON_GetObjectItemCaseSensitive(obj, key);
    return cJSON_IsNumber(v) ? v->valuedouble : 0;
}

/* Loads prefix<name>.npy into dst (n floats); returns 0 on success. */
static int load_into(const char *dir, const char *prefix, const char *name, float *dst, size_t n,
                     char *err, size_t errlen)
{
    char file[128];
    int s[4];
    snprintf(file, sizeof file, "%s%s", prefix, name);
    float *d = ref_load(dir, file, s, err, errlen);
    if (!d) return -1;
    int ok = (size_t)s[0] * s[1] * s[2] * s[3] == n;
    if (ok) memcpy(dst, d, n * sizeof *d);
    else snprintf(err, errlen, "%s/%s.npy has the wrong size", dir, file);
    free(d);
    return ok ? 0 : -1;
}

/* The parameters of meta.json with their initial values; a and t (per
 * parameter, malloc'd) hold the loss coefficients and targets. */
static int setup_params(const char *dir, const cJSON *meta, nj_params *ps, float **a, float **t,
                        char *err, size_t errlen)
{
    const cJSON *p;
    int k = 0;
    cJSON_ArrayForEach(p, cJSON_GetObjectItemCaseSensitive(meta, "params")) {
        const cJSON *name = cJSON_GetObjectItemCaseSensitive(p, "name");
        const cJSON *shape = cJSON_GetObjectItemCaseSensitive(p, "shape");
        if (!cJSON_IsString(name) || cJSON_GetArraySize(shape) != 4 || k >= 4) {
            snprintf(err, errlen, "meta.json: malformed parameter entry");
            return -1;
        }
        int d[4];
        for (int i = 0; i < 4; i++) d[i] = cJSON_GetArrayItem(shape, i)->valueint;
        nj_param *q = nj_params_add(ps, name->valuestring, (int)num(p, "group"), d[0], d[1], d[2], d[3]);
        if (!q) { snprintf(err, errlen, "nj_params_add failed for %s", name->valuestring); return -1; }
        size_t n = nj_param_numel(q);
        a[k] = malloc(n * sizeof(float));
        t[k] = malloc(n * sizeof(float));
        if (load_into(dir, "p0_", q->name, q->data, n, err, errlen) ||
            load_into(dir, "a_", q->name, a[k], n, err, errlen) ||
            load_into(dir, "t_", q->name, t[k], n, err, errlen))
            return -1;
        k++;
    }
    return k > 0 ? 0 : -1;
}

/* gradient of 0.5·Σ a (p − t)², by hand */
static void quadratic_grad(nj_params *ps, float *const *a, float *const *t)
{
    for (int k = 0; k < ps->count; k++) {
        nj_param *p = ps->items[k];
        for (size_t i = 0; i < nj_param_numel(p); i++)
            p->grad[i] = a[k][i] * (p->data[i] - t[k][i]);
    }
}

static void configure(nj_adam *opt, nj_params *ps, const cJSON *meta, const cJSON *setting)
{
    nj_adam_init(opt, (float)num(setting, "lr"));
    opt->beta1 = (float)num(setting, "beta1");
    opt->beta2 = (float)num(setting, "beta2");
    opt->eps = (float)num(setting, "eps");
    opt->weight_decay = (float)num(setting, "weight_decay");
    const cJSON *v;
    int g = 0;
    cJSON_ArrayForEach(v, cJSON_GetObjectItemCaseSensitive(meta, "group_lr"))
        if (g < NJ_MAX_GROUPS) opt->group_lr[g++] = (float)v->valuedouble;
    cJSON_ArrayForEach(v, cJSON_GetObjectItemCaseSensitive(meta, "frozen"))
        nj_params_freeze_group(ps, v->valueint, 1);
}

/* Runs one optimizer setting and compares every parameter; one check line. */
static void run_setting(const char *dir, const cJSON *meta, const cJSON *setting)
{
    const char *sname = cJSON_GetObjectItemCaseSensitive(setting, "name")->valuestring;
    char label[128], err[512] = "", msg[1024] = "", prefix[64];
    snprintf(label, sizeof label, "torch optim %s vs nj_adam_step: %d steps, final parameters",
             sname, (int)num(meta, "steps"));
    nj_params ps;
    nj_params_init(&ps);
    float *a[4] = {0}, *t[4] = {0}, *want = NULL;
    int ok = setup_params(dir, meta, &ps, a, t, err, sizeof err) == 0;
    if (ok) {
        nj_adam opt;
        configure(&opt, &ps, meta, setting);
        for (int s = 0; s < (int)num(meta, "steps"); s++) {
            quadratic_grad(&ps, a, t);
            nj_adam_step(&opt, &ps);
        }
        snprintf(prefix, sizeof prefix, "final_%s_", sname);
        for (int k = 0; k < ps.count && ok; k++) {
            nj_param *p = ps.items[k];
            size_t n = nj_param_numel(p), len = strlen(msg);
            want = realloc(want, n * sizeof *want);
            if (load_into(dir, prefix, p->name, want, n, err, sizeof err)) { ok = 0; break; }
            double e = ref_rel_err(p->data, want, n);
            int exact = memcmp(p->data, want, n * sizeof *want) == 0;
            int frozen = ps.frozen[p->group];
            ok &= frozen ? exact : e <= ADAM_TOL;
            snprintf(msg + len, sizeof msg - len, " %s%s %.2g", p->name, frozen ? " (frozen)" : "", e);
        }
    }
    check(ok, label, "%s; relative errors:%s", err, msg);
    printf("#  relative errors:%s\n", msg);
    for (int k = 0; k < 4; k++) { free(a[k]); free(t[k]); }
    free(want);
    nj_params_free(&ps);
}

static void test_adam_vs_torch(void)
{
    char why[512], script[4096], dir[4096], path[4200];
    if (!check(ref_python_present(why, sizeof why), "torch reference available", "%s", why)) return;
    if (!check(ref_script_path("torch_adam.py", script, sizeof script) == 0,
               "torch adam script found", "%s", script)) return;
    if (!check(ref_mkdtemp(dir, sizeof dir, "torch_adam") == 0, "torch adam temporary folder", "%s", dir))
        return;
    int rc = ref_run_python(script, dir);
    if (check(rc == 0, "torch adam script ran",
              "%s %s exited with %d (is python3-torch installed? see its message above)",
              REF_PYTHON, script, rc)) {
        snprintf(path, sizeof path, "%s/meta.json", dir);
        cJSON *meta = read_json(path);
        const cJSON *settings = cJSON_GetObjectItemCaseSensitive(meta, "settings"), *s;
        if (check(cJSON_GetArraySize(settings) == 2, "torch adam settings listed",
                  "%s lacks the two settings", path))
            cJSON_ArrayForEach(s, settings) run_setting(dir, meta, s);
        cJSON_Delete(meta);
    }
    if (test_failures()) printf("# reference files kept in %s\n", dir);
    else ref_rmtree(dir);
}

/* ---- gradient norm ---------------------------------------------------------- */

static void test_grad_norm(void)
{
    nj_params ps;
    nj_params_init(&ps);
    nj_param *a = nj_params_add(&ps, "a", 0, 1, 1, 1, 2), *b = nj_params_add(&ps, "b", 0, 1, 3, 1, 1);
    a->grad[0] = 3; a->grad[1] = -4;
    b->grad[0] = 1; b->grad[1] = 2; b->grad[2] = -2;
    double n = nj_params_grad_norm(&ps);
    nj_params_scale_grads(&ps, 0.5f);
    check(fabs(n - sqrt(34.0)) < 1e-12 && a->grad[1] == -2 && b->grad[2] == -1,
          "grad norm: hand-worked sqrt(9+16+1+4+4) and scaling by 0.5",
          "norm %.15g (want %.15g), scaled %g %g", n, sqrt(34.0), a->grad[1], b->grad[2]);
    nj_rng rng;
    nj_rng_seed(&rng, 3);
    for (int i = 0; i < 70; i++) {
        char name[16];
        snprintf(name, sizeof name, "p%d", i);
        nj_param *p = nj_params_add(&ps, name, 0, 1 + i % 5, 3, 3, 7 + 31 * i);
        for (size_t j = 0, k = nj_param_numel(p); j < k; j++) p->grad[j] = (float)nj_rng_normal(&rng);
    }
    double serial = 0;
    for (int i = 0; i < ps.count; i++)
        for (size_t j = 0, k = nj_param_numel(ps.items[i]); j < k; j++)
            serial += (double)ps.items[i]->grad[j] * ps.items[i]->grad[j];
    int saved = omp_get_max_threads();
    omp_set_num_threads(1);
    double one = nj_params_grad_norm(&ps);
    omp_set_num_threads(2);
    double two = nj_params_grad_norm(&ps);
    omp_set_num_threads(saved);
    check(one == two && fabs(one - sqrt(serial)) <= 1e-12 * sqrt(serial),
          "grad norm: 1 and 2 threads identical, equal to a serial sum",
          "1 thread %.17g, 2 threads %.17g, serial %.17g (%zu values)", one, two, sqrt(serial),
          nj_params_numel(&ps));
    nj_params_free(&ps);
}

/* ---- clipping folded into the update ------------------------------------------ */

static void fill_params(nj_params *ps, unsigned seed)
{
    nj_rng rng;
    nj_rng_seed(&rng, seed);
    for (int i = 0; i < 23; i++) {
        char name[16];
        snprintf(name, sizeof name, "q%d", i);
        nj_param *p = nj_params_add(ps, name, i % 3, 1 + i % 4, 5, 3, 1 + 97 * (i % 7) + 1000 * (i == 9));
        for (size_t j = 0, k = nj_param_numel(p); j < k; j++) {
            p->data[j] = (float)nj_rng_normal(&rng);
            p->grad[j] = (float)nj_rng_normal(&rng);
        }
    }
}

static int same_floats(const float *a, const float *b, size_t n) { return !memcmp(a, b, n * sizeof(float)); }

static void test_scaled_step(void)
{
    nj_params a, b;
    nj_params_init(&a);
    nj_params_init(&b);
    fill_params(&a, 21);
    fill_params(&b, 21);
    nj_params_freeze_group(&a, 2, 1);
    nj_params_freeze_group(&b, 2, 1);
    nj_adam oa, ob;
    nj_adam_init(&oa, 0.01f);
    nj_adam_init(&ob, 0.01f);
    oa.group_lr[1] = ob.group_lr[1] = 0.5f;
    oa.weight_decay = ob.weight_decay = 0.01f;
    int saved = omp_get_max_threads(), same = 1, grads_kept = 1;
    const float f[3] = {0.37f, 1.0f, 0.81f};
    for (int s = 0; s < 3; s++) {
        omp_set_num_threads(1);
        nj_params_scale_grads(&a, f[s]);
        nj_adam_step(&oa, &a);
        for (int i = 0; i < b.count; i++) /* both start the next step from the same grads */
            memcpy(a.items[i]->grad, b.items[i]->grad, sizeof(float) * nj_param_numel(b.items[i]));
        omp_set_num_threads(2);
        float *before = malloc(sizeof(float) * nj_param_numel(b.items[9]));
        memcpy(before, b.items[9]->grad, sizeof(float) * nj_param_numel(b.items[9]));
        nj_adam_step_scaled(&ob, &b, f[s]);
        grads_kept &= same_floats(before, b.items[9]->grad, nj_param_numel(b.items[9]));
        free(before);
    }
    omp_set_num_threads(saved);
    for (int i = 0; i < a.count; i++) {
        size_t k = nj_param_numel(a.items[i]);
        same &= same_floats(a.items[i]->data, b.items[i]->data, k) &&
                same_floats(a.items[i]->m, b.items[i]->m, k) && same_floats(a.items[i]->v, b.items[i]->v, k);
    }
    check(same && grads_kept && nj_params_numel(&a) > 65536,
          "adam: clipping folded into the update (2 threads) == scale grads then step (1 thread), bit for bit",
          "parameters and moments %s, grads %s, %zu values", same ? "equal" : "differ",
          grads_kept ? "kept" : "changed", nj_params_numel(&a));
    nj_params_free(&a);
    nj_params_free(&b);
}

/* ---- arena reuse --------------------------------------------------------------- */

/* One step: conv (reflect) → ELU → mean, backward, Adam.  Returns the loss. */
static float train_step(nj_graph *g, nj_params *ps, nj_adam *opt, const float *x)
{
    nj_graph_reset(g);
    nj_tensor *in = nj_tensor_from(g, 2, 3, 9, 11, x, 0);
    nj_tensor *w = nj_param_tensor(g, ps, nj_params_find(ps, "w"));
    nj_tensor *b = nj_param_tensor(g, ps, nj_params_find(ps, "b"));
    nj_tensor *loss = nj_mean(g, nj_elu(g, nj_conv2d(g, in, w, b, 1, 1, NJ_PAD_REFLECT)), NJ_AXIS_ALL);
    nj_params_zero_grad(ps);
    if (!loss || nj_backward(g, loss) != 0) return NAN;
    nj_adam_step(opt, ps);
    return loss->data[0];
}

static void test_arena_reuse(void)
{
    nj_params ps;
    nj_params_init(&ps);
    nj_rng rng;
    nj_rng_seed(&rng, 5);
    nj_init_kaiming_uniform(nj_params_add(&ps, "w", 0, 4, 3, 3, 3), 27, 1.41421356f, &rng);
    nj_init_uniform_bias(nj_params_add(&ps, "b", 0, 1, 4, 1, 1), 27, &rng);
    float x[2 * 3 * 9 * 11];
    for (size_t i = 0; i < sizeof x / sizeof *x; i++) x[i] = (float)nj_rng_normal(&rng);
    nj_adam opt;
    nj_adam_init(&opt, 0.01f);
    /* Small chunks, so one step spans several of them. */
    nj_graph *g = nj_graph_new(8 << 10);
    float first = train_step(g, &ps, &opt, x), last = first;
    size_t after_first = nj_arena_sysallocs(nj_graph_arena(g));
    int ops_first = nj_graph_ops(g), ops_changed = 0;
    for (int s = 1; s < 10; s++) {
        last = train_step(g, &ps, &opt, x);
        ops_changed += nj_graph_ops(g) != ops_first;
    }
    size_t after_last = nj_arena_sysallocs(nj_graph_arena(g));
    check(!nj_graph_failed(g) && after_first > 1 && after_last == after_first && ops_changed == 0
              && ops_first >= 3 && last < first,
          "arena: repeated training steps make no system allocation after the first",
          "graph error '%s'; sysallocs %zu after step 1, %zu after step 10; ops %d (changed %d times); "
          "loss %g -> %g", nj_graph_error(g), after_first, after_last, ops_first, ops_changed,
          first, last);
    nj_graph_free(g);
    nj_params_free(&ps);
}

int main(void)
{
    nj_threads_init(0);
    test_adam_vs_torch();
    test_grad_norm();
    test_scaled_step();
    test_arena_reuse();
    return test_exit();
}

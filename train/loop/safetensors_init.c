/* train/loop/safetensors_init.c — `--init FILE.safetensors`: an exported model's
 * folded tensors back into a model of the same architecture (rules in
 * safetensors.h).  Everything is checked before any weight is changed. */
#include "train/loop/safetensors.h"
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* The unit's export name: its weight parameter's name without ".w". */
static void unit_name(const nj_unit *u, char *out, size_t n)
{
    size_t len = strlen(u->w->name);
    if (len > 2 && !strcmp(u->w->name + len - 2, ".w")) len -= 2;
    snprintf(out, n, "%.*s", (int)len, u->w->name);
}

/* The tensor "UNIT.SUFFIX" with `dtype` and the given shape, or NULL with a message. */
static const nj_st_tensor *want(const nj_safetensors *st, const char *unit, const char *suffix, const char *dtype,
                                int nd, const uint64_t *dims, const char *path, char *err, size_t errlen)
{
    char name[160];
    snprintf(name, sizeof name, "%s.%s", unit, suffix);
    const nj_st_tensor *t = nj_safetensors_find(st, name);
    if (!t) {
        snprintf(err, errlen, "%s: tensor \"%s\" is missing: the file does not match this model's architecture",
                 path, name);
        return NULL;
    }
    int ok = !strcmp(t->dtype, dtype) && t->ndim == nd;
    for (int d = 0; ok && d < nd; d++) ok = t->shape[d] == dims[d];
    if (!ok) {
        char have[96] = "", need[96] = "";
        for (int d = 0, k = 0; d < t->ndim && k < 80; d++)
            k += snprintf(have + k, sizeof have - (size_t)k, d ? "x%llu" : "%llu", (unsigned long long)t->shape[d]);
        for (int d = 0, k = 0; d < nd && k < 80; d++)
            k += snprintf(need + k, sizeof need - (size_t)k, d ? "x%llu" : "%llu", (unsigned long long)dims[d]);
        snprintf(err, errlen, "%s: tensor \"%s\" is %s %s but this model needs %s %s: the file does not match "
                 "this model's architecture", path, name, t->dtype, have, dtype, need);
        return NULL;
    }
    for (uint64_t i = 0; i < t->numel; i++)
        if (!isfinite(nj_safetensors_value(st, t, i))) {
            snprintf(err, errlen, "%s: tensor \"%s\" holds NaN or infinite values", path, name);
            return NULL;
        }
    return t;
}

typedef struct unit_src {
    const nj_st_tensor *w, *scale, *b, *gamma, *beta;
} unit_src;

/* Finds (and counts) the tensors of one unit. */
static int find_unit(const nj_safetensors *st, const nj_unit *u, unit_src *s, int *used, const char *path,
                     char *err, size_t errlen)
{
    char name[96];
    unit_name(u, name, sizeof name);
    uint64_t wd[4] = {(uint64_t)u->cout, (uint64_t)u->cin, (uint64_t)u->k, (uint64_t)u->k}, cd[1] = {(uint64_t)u->cout};
    char wname[160];
    snprintf(wname, sizeof wname, "%s.weight", name);
    const nj_st_tensor *w = nj_safetensors_find(st, wname);
    int int8 = w && !strcmp(w->dtype, "I8");
    memset(s, 0, sizeof *s);
    if (!(s->w = want(st, name, "weight", int8 ? "I8" : "F32", 4, wd, path, err, errlen))) return -1;
    if (int8 && !(s->scale = want(st, name, "weight_scale", "F32", 1, cd, path, err, errlen))) return -1;
    if (!(s->b = want(st, name, "bias", "F32", 1, cd, path, err, errlen))) return -1;
    if (u->norm == NJ_NORM_GROUP && (!(s->gamma = want(st, name, "norm_gamma", "F32", 1, cd, path, err, errlen)) ||
                                     !(s->beta = want(st, name, "norm_beta", "F32", 1, cd, path, err, errlen))))
        return -1;
    *used += 2 + int8 + 2 * (u->norm == NJ_NORM_GROUP);
    return 0;
}

static void copy_unit(const nj_safetensors *st, nj_unit *u, const unit_src *s)
{
    const uint64_t per_out = (uint64_t)u->cin * u->k * u->k;
    for (uint64_t i = 0; i < s->w->numel; i++) {
        float v = nj_safetensors_value(st, s->w, i);
        u->w->data[i] = s->scale ? v * nj_safetensors_value(st, s->scale, i / per_out) : v;
    }
    for (int o = 0; o < u->cout; o++) u->b->data[o] = nj_safetensors_value(st, s->b, (uint64_t)o);
    if (u->norm == NJ_NORM_GROUP)
        for (int o = 0; o < u->cout; o++) {
            u->gamma->data[o] = nj_safetensors_value(st, s->gamma, (uint64_t)o);
            u->beta->data[o] = nj_safetensors_value(st, s->beta, (uint64_t)o);
        }
    if (u->norm == NJ_NORM_BATCH)
        for (int o = 0; o < u->cout; o++) {
            u->gamma->data[o] = 1.0f;
            u->beta->data[o] = 0.0f;
            u->run_mean->data[o] = 0.0f;
            u->run_var->data[o] = 1.0f - NJ_MODEL_NORM_EPS;   /* var + eps = 1: the identity */
        }
}

int nj_safetensors_init_model(const char *path, nj_model *m, char *err, size_t errlen)
{
    nj_safetensors st;
    if (nj_safetensors_read(&st, path, err, errlen)) return -1;
    unit_src *src = calloc((size_t)(m->nunits ? m->nunits : 1), sizeof *src);
    int used = 0, rc = src ? 0 : -1;
    if (!src) snprintf(err, errlen, "%s: out of memory", path);
    for (int i = 0; i < m->nunits && !rc; i++) rc = find_unit(&st, &m->units[i], &src[i], &used, path, err, errlen);
    if (!rc && used != st.n) {
        rc = -1;
        snprintf(err, errlen, "%s: holds %d tensors but this model's architecture has %d: the file does not match",
                 path, st.n, used);
    }
    for (int i = 0; i < m->nunits && !rc; i++) copy_unit(&st, &m->units[i], &src[i]);
    free(src);
    nj_safetensors_free(&st);
    return rc;
}

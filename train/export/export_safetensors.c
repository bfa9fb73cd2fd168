/* train/export/export_safetensors.c — `nightjar export --format safetensors`.
 *
 * The published safetensors layout: an 8-byte little-endian header length N,
 * N bytes of JSON (padded with spaces to a multiple of 8), then the raw
 * little-endian tensor bytes.  The JSON maps each tensor name to
 * {"dtype", "shape", "data_offsets": [begin, end)} (offsets relative to the
 * end of the header) and "__metadata__" to string → string entries.
 *
 * Tensors, for every layer of the depth and pose nets (batch norm folded):
 *   NAME.weight        F32 cout×cin×k×k   (I8 with --weights int8)
 *   NAME.weight_scale  F32 cout           (int8 only: weight = scale[o]·q)
 *   NAME.bias          F32 cout
 *   NAME.norm_gamma, NAME.norm_beta  F32 cout (group-norm layers only)
 * F32 tensors come first, then I8, so every tensor is aligned to its size.
 * Metadata: "format", "nightjar.weights", "nightjar.architecture" (JSON),
 * "nightjar.training_config" (JSON). */
#include "data/atomic.h"
#include "train/export/export.h"
#include "train/version.h"
#include <cjson/cJSON.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

typedef struct st_tensor {
    char name[96];
    const void *data;     /* float or int8_t values */
    int is_int8;
    int dims[4], nd;
    size_t count;
} st_tensor;

#define MAX_TENSORS (NJ_MAX_UNITS * 5)

typedef struct st_list {
    st_tensor t[MAX_TENSORS];
    int n;
} st_list;

static void add(st_list *s, const char *layer, const char *suffix, const void *data, int is_int8, int nd,
                const int *dims)
{
    st_tensor *t = &s->t[s->n++];
    snprintf(t->name, sizeof t->name, "%s.%s", layer, suffix);
    t->data = data;
    t->is_int8 = is_int8;
    t->nd = nd;
    t->count = 1;
    for (int i = 0; i < nd; i++) {
        t->dims[i] = dims[i];
        t->count *= (size_t)dims[i];
    }
}

/* Every tensor, F32 ones first. */
static void collect(const nj_export_net *net, st_list *s)
{
    s->n = 0;
    for (int pass = 0; pass < 2; pass++)
        for (int i = 0; i < net->nlayers; i++) {
            const nj_export_layer *l = &net->layers[i];
            int wd[4] = {l->cout, l->cin, l->k, l->k}, cd[1] = {l->cout};
            if (pass == 1) {
                if (l->q) add(s, l->name, "weight", l->q, 1, 4, wd);
                continue;
            }
            if (!l->q) add(s, l->name, "weight", l->w, 0, 4, wd);
            else add(s, l->name, "weight_scale", l->scale, 0, 1, cd);
            add(s, l->name, "bias", l->b, 0, 1, cd);
            if (l->groups) {
                add(s, l->name, "norm_gamma", l->gamma, 0, 1, cd);
                add(s, l->name, "norm_beta", l->beta, 0, 1, cd);
            }
        }
}

static size_t tensor_bytes(const st_tensor *t)
{
    return t->count * (t->is_int8 ? 1 : 4);
}

static char *header_json(const nj_export_net *net, const st_list *s)
{
    cJSON *root = cJSON_CreateObject(), *meta = cJSON_AddObjectToObject(root, "__metadata__");
    char *arch = nj_export_architecture_json(net), *cfg = nj_train_config_to_json(net->cfg);
    cJSON_AddStringToObject(meta, "format", "nightjar");
    cJSON_AddStringToObject(meta, "nightjar.version", NJ_VERSION);
    cJSON_AddStringToObject(meta, "nightjar.weights", net->int8 ? "int8" : "f32");
    cJSON_AddStringToObject(meta, "nightjar.architecture", arch ? arch : "");
    cJSON_AddStringToObject(meta, "nightjar.training_config", cfg ? cfg : "");
    free(arch);
    free(cfg);
    size_t off = 0;
    for (int i = 0; i < s->n; i++) {
        const st_tensor *t = &s->t[i];
        cJSON *o = cJSON_AddObjectToObject(root, t->name);
        cJSON_AddStringToObject(o, "dtype", t->is_int8 ? "I8" : "F32");
        cJSON *shape = cJSON_AddArrayToObject(o, "shape");
        for (int d = 0; d < t->nd; d++) cJSON_AddItemToArray(shape, cJSON_CreateNumber(t->dims[d]));
        cJSON *offs = cJSON_AddArrayToObject(o, "data_offsets");
        cJSON_AddItemToArray(offs, cJSON_CreateNumber((double)off));
        off += tensor_bytes(t);
        cJSON_AddItemToArray(offs, cJSON_CreateNumber((double)off));
    }
    char *text = cJSON_PrintUnformatted(root);
    cJSON_Delete(root);
    return text;
}

static int write_tensor(FILE *f, const st_tensor *t)
{
    if (t->is_int8) return fwrite(t->data, 1, t->count, f) == t->count ? 0 : -1;
    const float *v = t->data;
    for (size_t i = 0; i < t->count; i++) {
        uint32_t u;
        memcpy(&u, &v[i], 4);
        unsigned char b[4] = {(unsigned char)u, (unsigned char)(u >> 8), (unsigned char)(u >> 16),
                              (unsigned char)(u >> 24)};
        if (fwrite(b, 1, 4, f) != 4) return -1;
    }
    return 0;
}

static int write_all(FILE *f, const char *json, const st_list *s, long *bytes)
{
    size_t len = strlen(json), padded = (len + 7) / 8 * 8;
    unsigned char n8[8];
    for (int k = 0; k < 8; k++) n8[k] = (unsigned char)((uint64_t)padded >> (8 * k));
    if (fwrite(n8, 1, 8, f) != 8 || fwrite(json, 1, len, f) != len) return -1;
    for (size_t i = len; i < padded; i++)
        if (fputc(' ', f) == EOF) return -1;
    *bytes = (long)(8 + padded);
    for (int i = 0; i < s->n; i++) {
        if (write_tensor(f, &s->t[i])) return -1;
        *bytes += (long)tensor_bytes(&s->t[i]);
    }
    return 0;
}

int nj_export_safetensors(const nj_export_net *net, const char *path, long *bytes, char *err, size_t errlen)
{
    st_list *s = malloc(sizeof *s);
    char *json = NULL;
    if (!s || (collect(net, s), !(json = header_json(net, s)))) {
        free(s);
        snprintf(err, errlen, "%s: out of memory", path);
        return -1;
    }
    nj_atomic_file a;
    int rc = nj_atomic_open(&a, path, err, errlen);
    if (!rc) {
        int ok = write_all(a.f, json, s, bytes) == 0;
        rc = nj_atomic_close(&a, ok, err, errlen);
    }
    free(json);
    free(s);
    return rc;
}

/* train/loop/safetensors_read.c — parsing and validating a safetensors file
 * (rules in safetensors.h).  The JSON header is parsed with cJSON; every
 * number is checked to be a non-negative integer before use, and all size
 * arithmetic is bounded by the data section's length, so no claimed size can
 * cause an allocation or a read beyond the file. */
#include "train/loop/safetensors.h"
#include "data/jsondepth.h"
#include <cjson/cJSON.h>
#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#define MAX_FILE ((uint64_t)2 << 30)
#define MAX_TENSORS 65536

typedef struct dtype_info { const char *name; int size; } dtype_info;

static const dtype_info DTYPES[] = {
    {"F64", 8}, {"F32", 4}, {"F16", 2}, {"BF16", 2}, {"F8_E4M3", 1}, {"F8_E5M2", 1},
    {"I64", 8}, {"I32", 4}, {"I16", 2}, {"I8", 1}, {"U64", 8}, {"U32", 4}, {"U16", 2},
    {"U8", 1}, {"BOOL", 1}};

static int fail(char *err, size_t errlen, const char *name, const char *fmt, ...)
    __attribute__((format(printf, 4, 5)));
static int fail(char *err, size_t errlen, const char *name, const char *fmt, ...)
{
    char msg[400];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(msg, sizeof msg, fmt, ap);
    va_end(ap);
    if (err && errlen) snprintf(err, errlen, "%s: %s", name, msg);
    return -1;
}

static int dtype_size(const char *s)
{
    for (size_t i = 0; i < sizeof DTYPES / sizeof DTYPES[0]; i++)
        if (!strcmp(s, DTYPES[i].name)) return DTYPES[i].size;
    return 0;
}

/* A JSON number that is an integer in 0..2^53. */
static int get_uint(const cJSON *v, uint64_t *out)
{
    if (!cJSON_IsNumber(v)) return -1;
    double d = v->valuedouble;
    if (!(d >= 0) || d > 9007199254740992.0 || d != floor(d)) return -1;
    *out = (uint64_t)d;
    return 0;
}

static int parse_shape(nj_st_tensor *t, const cJSON *shape, uint64_t limit, const char *name, char *err,
                       size_t errlen)
{
    if (!cJSON_IsArray(shape)) return fail(err, errlen, name, "tensor \"%s\": \"shape\" must be an array", t->name);
    t->ndim = 0;
    t->numel = 1;
    for (const cJSON *d = shape->child; d; d = d->next) {
        if (t->ndim == NJ_ST_MAX_DIMS)
            return fail(err, errlen, name, "tensor \"%s\" has more than %d dimensions", t->name, NJ_ST_MAX_DIMS);
        uint64_t v;
        if (get_uint(d, &v))
            return fail(err, errlen, name, "tensor \"%s\": dimension %d is not a non-negative integer", t->name,
                        t->ndim);
        t->shape[t->ndim++] = v;
        if (v && t->numel > limit / v)
            return fail(err, errlen, name, "tensor \"%s\" claims more elements than the file holds", t->name);
        t->numel *= v;
    }
    return 0;
}

static int parse_offsets(nj_st_tensor *t, const cJSON *o, uint64_t data_len, const char *name, char *err,
                         size_t errlen)
{
    if (!cJSON_IsArray(o) || cJSON_GetArraySize(o) != 2 || get_uint(o->child, &t->begin) ||
        get_uint(o->child->next, &t->end))
        return fail(err, errlen, name, "tensor \"%s\": \"data_offsets\" must be [begin, end] integers", t->name);
    if (t->begin > t->end || t->end > data_len)
        return fail(err, errlen, name, "tensor \"%s\": data_offsets [%llu, %llu] lie outside the %llu data bytes",
                    t->name, (unsigned long long)t->begin, (unsigned long long)t->end,
                    (unsigned long long)data_len);
    if (t->end - t->begin != t->numel * (uint64_t)t->dtype_size)
        return fail(err, errlen, name, "tensor \"%s\": %llu bytes of data for %llu elements of %s", t->name,
                    (unsigned long long)(t->end - t->begin), (unsigned long long)t->numel, t->dtype);
    return 0;
}

static int parse_tensor(nj_st_tensor *t, const cJSON *e, uint64_t data_len, const char *name, char *err,
                        size_t errlen)
{
    size_t len = strlen(e->string);
    if (len == 0 || len > NJ_ST_NAME_MAX)
        return fail(err, errlen, name, "a tensor name has %zu bytes (1 to %d allowed)", len, NJ_ST_NAME_MAX);
    memcpy(t->name, e->string, len + 1);
    if (!cJSON_IsObject(e)) return fail(err, errlen, name, "tensor \"%s\" must be an object", t->name);
    int keys = 0;
    for (const cJSON *k = e->child; k; k = k->next) keys++;
    const cJSON *dt = cJSON_GetObjectItemCaseSensitive(e, "dtype");
    const cJSON *sh = cJSON_GetObjectItemCaseSensitive(e, "shape");
    const cJSON *of = cJSON_GetObjectItemCaseSensitive(e, "data_offsets");
    if (!dt || !sh || !of || keys != 3)
        return fail(err, errlen, name, "tensor \"%s\" must have exactly dtype, shape and data_offsets", t->name);
    if (!cJSON_IsString(dt) || !(t->dtype_size = dtype_size(dt->valuestring)))
        return fail(err, errlen, name, "tensor \"%s\" has an unknown dtype", t->name);
    snprintf(t->dtype, sizeof t->dtype, "%s", dt->valuestring);
    uint64_t limit = data_len / (uint64_t)t->dtype_size;
    if (parse_shape(t, sh, limit ? limit : 1, name, err, errlen)) return -1;
    return parse_offsets(t, of, data_len, name, err, errlen);
}

static int check_metadata(const cJSON *m, const char *name, char *err, size_t errlen)
{
    if (!cJSON_IsObject(m)) return fail(err, errlen, name, "\"__metadata__\" must be an object");
    for (const cJSON *k = m->child; k; k = k->next)
        if (!cJSON_IsString(k)) return fail(err, errlen, name, "metadata \"%.60s\" must be a string", k->string);
    return 0;
}

static int by_begin(const void *a, const void *b)
{
    const nj_st_tensor *x = a, *y = b;
    if (x->begin != y->begin) return x->begin < y->begin ? -1 : 1;
    return x->end < y->end ? -1 : x->end > y->end;
}

static int by_name(const void *a, const void *b)
{
    return strcmp((*(const nj_st_tensor *const *)a)->name, (*(const nj_st_tensor *const *)b)->name);
}

/* Unique names; tensors tile the data section exactly. */
static int check_layout(nj_safetensors *st, const char *name, char *err, size_t errlen)
{
    const nj_st_tensor **p = malloc((size_t)(st->n ? st->n : 1) * sizeof *p);
    if (!p) return fail(err, errlen, name, "out of memory");
    for (int i = 0; i < st->n; i++) p[i] = &st->t[i];
    qsort(p, (size_t)st->n, sizeof *p, by_name);
    for (int i = 1; i < st->n; i++)
        if (!strcmp(p[i]->name, p[i - 1]->name)) {
            int rc = fail(err, errlen, name, "tensor \"%s\" appears twice", p[i]->name);
            free(p);
            return rc;
        }
    free(p);
    nj_st_tensor *s = malloc((size_t)(st->n ? st->n : 1) * sizeof *s);
    if (!s) return fail(err, errlen, name, "out of memory");
    if (st->n) memcpy(s, st->t, (size_t)st->n * sizeof *s);
    qsort(s, (size_t)st->n, sizeof *s, by_begin);
    uint64_t at = 0;
    int rc = 0;
    for (int i = 0; i < st->n && !rc; i++) {
        if (s[i].begin != at)
            rc = fail(err, errlen, name, "tensor \"%s\" starts at byte %llu of the data, expected %llu (%s)",
                      s[i].name, (unsigned long long)s[i].begin, (unsigned long long)at,
                      s[i].begin < at ? "overlap" : "hole");
        at = s[i].end;
    }
    if (!rc && at != st->data_len)
        rc = fail(err, errlen, name, "%llu bytes after the last tensor's data", (unsigned long long)(st->data_len - at));
    free(s);
    return rc;
}

static int parse_entries(nj_safetensors *st, const cJSON *root, const char *name, char *err, size_t errlen)
{
    int n = 0;
    for (const cJSON *e = root->child; e; e = e->next) n += strcmp(e->string, "__metadata__") != 0;
    if (n > MAX_TENSORS) return fail(err, errlen, name, "%d tensors (at most %d are read)", n, MAX_TENSORS);
    st->t = calloc((size_t)(n ? n : 1), sizeof *st->t);
    if (!st->t) return fail(err, errlen, name, "out of memory");
    for (const cJSON *e = root->child; e; e = e->next) {
        if (!strcmp(e->string, "__metadata__")) {
            if (check_metadata(e, name, err, errlen)) return -1;
            continue;
        }
        if (parse_tensor(&st->t[st->n], e, st->data_len, name, err, errlen)) return -1;
        st->n++;
    }
    return check_layout(st, name, err, errlen);
}

/* The header text [8, 8+hlen) as a parsed JSON object. */
static cJSON *parse_header(const uint8_t *bytes, uint64_t hlen, const char *name, char *err, size_t errlen)
{
    if (hlen == 0 || bytes[8] != '{') {
        fail(err, errlen, name, "the header is not a JSON object");
        return NULL;
    }
    if (memchr(bytes + 8, 0, (size_t)hlen)) {
        fail(err, errlen, name, "the header contains a NUL byte");
        return NULL;
    }
    char *text = malloc((size_t)hlen + 1);
    if (!text) { fail(err, errlen, name, "out of memory for a %llu-byte header", (unsigned long long)hlen); return NULL; }
    memcpy(text, bytes + 8, (size_t)hlen);
    text[hlen] = 0;
    const char *end = NULL;
    cJSON *root = cJSON_ParseWithOpts(text, &end, 0);
    if (root && end) {
        while (*end == ' ' || *end == '\t' || *end == '\n' || *end == '\r') end++;
        if (*end) { cJSON_Delete(root); root = NULL; }
    }
    if (!root && nj_json_too_deep(text, end))
        fail(err, errlen, name, "the header JSON is nested more than %d levels deep", CJSON_NESTING_LIMIT);
    else if (!root) fail(err, errlen, name, "the header is not valid JSON near byte %ld",
                         end ? 8 + (long)(end - text) : 8L);
    else if (!cJSON_IsObject(root)) { cJSON_Delete(root); root = NULL; fail(err, errlen, name, "the header is not a JSON object"); }
    free(text);
    return root;
}

int nj_safetensors_parse(nj_safetensors *st, const uint8_t *bytes, size_t len, const char *name,
                         char *err, size_t errlen)
{
    memset(st, 0, sizeof *st);
    if (len < 8) return fail(err, errlen, name, "too short for a safetensors file (%zu bytes)", len);
    uint64_t hlen = 0;
    for (int i = 7; i >= 0; i--) hlen = hlen << 8 | bytes[i];
    if (hlen > NJ_ST_MAX_HEADER)
        return fail(err, errlen, name, "header length %llu exceeds the 100 MB limit", (unsigned long long)hlen);
    if (hlen > len - 8)
        return fail(err, errlen, name, "header length %llu runs past the end of the file (%zu bytes)",
                    (unsigned long long)hlen, len);
    st->data = bytes + 8 + hlen;
    st->data_len = len - 8 - hlen;
    cJSON *root = parse_header(bytes, hlen, name, err, errlen);
    if (!root) return -1;
    int rc = parse_entries(st, root, name, err, errlen);
    cJSON_Delete(root);
    if (rc) nj_safetensors_free(st);
    return rc;
}

int nj_safetensors_read(nj_safetensors *st, const char *path, char *err, size_t errlen)
{
    memset(st, 0, sizeof *st);
    FILE *f = fopen(path, "rb");
    if (!f) return fail(err, errlen, path, "cannot open: %s", strerror(errno));
    struct stat sb;
    int rc = 0;
    if (fstat(fileno(f), &sb) || !S_ISREG(sb.st_mode)) rc = fail(err, errlen, path, "not a regular file");
    else if ((uint64_t)sb.st_size > MAX_FILE) rc = fail(err, errlen, path, "larger than 2 GiB");
    uint8_t *buf = rc ? NULL : malloc(sb.st_size ? (size_t)sb.st_size : 1);
    if (!rc && !buf) rc = fail(err, errlen, path, "out of memory for %lld bytes", (long long)sb.st_size);
    if (!rc && fread(buf, 1, (size_t)sb.st_size, f) != (size_t)sb.st_size) rc = fail(err, errlen, path, "read error");
    fclose(f);
    if (!rc) rc = nj_safetensors_parse(st, buf, (size_t)sb.st_size, path, err, errlen);
    if (rc) { free(buf); return -1; }
    st->owned = buf;
    return 0;
}

void nj_safetensors_free(nj_safetensors *st)
{
    free(st->t);
    free(st->owned);
    memset(st, 0, sizeof *st);
}

const nj_st_tensor *nj_safetensors_find(const nj_safetensors *st, const char *name)
{
    for (int i = 0; i < st->n; i++)
        if (!strcmp(st->t[i].name, name)) return &st->t[i];
    return NULL;
}

float nj_safetensors_value(const nj_safetensors *st, const nj_st_tensor *t, uint64_t i)
{
    const uint8_t *p = st->data + t->begin + i * (uint64_t)t->dtype_size;
    if (t->dtype_size == 1) return (float)(int8_t)p[0];
    uint32_t u = (uint32_t)p[0] | (uint32_t)p[1] << 8 | (uint32_t)p[2] << 16 | (uint32_t)p[3] << 24;
    float f;
    memcpy(&f, &u, 4);
    return f;
}

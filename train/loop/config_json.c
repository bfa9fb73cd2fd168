/* train/loop/config_json.c — the configuration as JSON (cJSON): reading a file or
 * a text with one-line "PATH: problem" errors (syntax errors located by line
 * and column, unknown keys with a suggestion, wrong types, out-of-range
 * values, then the cross-field checks), and writing it back. */
#include "train/loop/config_fields.h"
#include "data/jsondepth.h"
#include <cjson/cJSON.h>
#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define MAX_CONFIG_BYTES (1L << 20)

typedef struct reader {
    nj_train_config *c;
    const char *origin;      /* file name (or label) used in messages */
    const char *base;        /* folder prefix for relative paths ("dir/"), NULL = keep as written */
    char *err;
    size_t errlen;
    int minutes_given, hours_given;
    double hours;
} reader;

static int fail(reader *r, const char *fmt, ...) __attribute__((format(printf, 2, 3)));
static int fail(reader *r, const char *fmt, ...)
{
    char msg[768];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(msg, sizeof msg, fmt, ap);
    va_end(ap);
    snprintf(r->err, r->errlen, "%s: %s", r->origin, msg);
    return -1;
}

static const char *type_name(const cJSON *v)
{
    if (cJSON_IsString(v)) return "a string";
    if (cJSON_IsNumber(v)) return "a number";
    if (cJSON_IsBool(v)) return "true/false";
    if (cJSON_IsNull(v)) return "null";
    if (cJSON_IsArray(v)) return "an array";
    return "an object";
}

/* Levenshtein distance (Levenshtein 1966) of two short keys, for suggestions. */
static int edit_distance(const char *a, const char *b)
{
    int la = (int)strlen(a), lb = (int)strlen(b);
    if (la > 63 || lb > 63) return 99;
    int row[64];
    for (int j = 0; j <= lb; j++) row[j] = j;
    for (int i = 1; i <= la; i++) {
        int diag = row[0];
        row[0] = i;
        for (int j = 1; j <= lb; j++) {
            int up = row[j], best = diag + (a[i - 1] != b[j - 1]);
            if (up + 1 < best) best = up + 1;
            if (row[j - 1] + 1 < best) best = row[j - 1] + 1;
            row[j] = best;
            diag = up;
        }
    }
    return row[lb];
}

/* Name of a child section of `section` ("" = top level) when `sub` is one. */
static const char *child_section(const char *section, const char *key, char *buf, size_t n)
{
    if (section[0]) snprintf(buf, n, "%s.%s", section, key);
    else snprintf(buf, n, "%s", key);
    for (int i = 0; i < nj_config_nsections; i++)
        if (!strcmp(nj_config_sections[i], buf)) return nj_config_sections[i];
    return NULL;
}

static const nj_config_field *find_field(const char *section, const char *key)
{
    for (int i = 0; i < nj_config_nfields; i++)
        if (!strcmp(nj_config_fields[i].section, section) && !strcmp(nj_config_fields[i].key, key))
            return &nj_config_fields[i];
    return NULL;
}

/* The closest known key (or sub-section) of `section` to `key`, or NULL. */
static const char *suggest(const char *section, const char *key)
{
    const char *best = NULL;
    int bestd = 3;
    for (int i = 0; i < nj_config_nfields; i++) {
        const nj_config_field *f = &nj_config_fields[i];
        int d = strcmp(f->section, section) ? 99 : edit_distance(f->key, key);
        if (d < bestd) { bestd = d; best = f->key; }
    }
    size_t n = strlen(section);
    for (int i = 0; i < nj_config_nsections; i++) {
        const char *s = nj_config_sections[i], *dot = strrchr(s, '.');
        int child = n ? (dot && (size_t)(dot - s) == n && !strncmp(s, section, n)) : !dot;
        const char *leaf = n ? (dot ? dot + 1 : s) : s;
        int d = child ? edit_distance(leaf, key) : 99;
        if (d < bestd) { bestd = d; best = leaf; }
    }
    return best && bestd < (int)strlen(key) ? best : NULL;
}

static int unknown_key(reader *r, const char *section, const char *key)
{
    const char *s = suggest(section, key);
    char hint[96] = "";
    if (s) snprintf(hint, sizeof hint, " (did you mean \"%s\"?)", s);
    if (!section[0]) {
        if (!s) snprintf(hint, sizeof hint, " (sections are run, data, model, loss, optim)");
        return fail(r, "unknown section \"%.64s\"%s", key, hint);
    }
    return fail(r, "unknown key \"%.64s\" in section \"%s\"%s", key, section, hint);
}

static int read_whole(reader *r, const nj_config_field *f, const cJSON *v, double lo, double hi, double *out)
{
    if (!cJSON_IsNumber(v))
        return fail(r, "%s.%s must be a whole number (got %s)", f->section, f->key, type_name(v));
    double x = v->valuedouble;
    if (x != floor(x)) return fail(r, "%s.%s must be a whole number (got %.10g)", f->section, f->key, x);
    char msg[256];
    if (!nj_config_range_ok(f, x, msg, sizeof msg) || x < lo || x > hi) return fail(r, "%s", msg);
    *out = x;
    return 0;
}

static int read_number(reader *r, const nj_config_field *f, const cJSON *v, double *out)
{
    if (!cJSON_IsNumber(v)) return fail(r, "%s.%s must be a number (got %s)", f->section, f->key, type_name(v));
    char msg[256];
    if (!nj_config_range_ok(f, v->valuedouble, msg, sizeof msg)) return fail(r, "%s", msg);
    *out = v->valuedouble;
    return 0;
}

static int read_offsets(reader *r, const nj_config_field *f, const cJSON *v)
{
    int n = cJSON_IsArray(v) ? cJSON_GetArraySize(v) : -1;
    if (n < 0 || n > NJ_MAX_OFFSETS)
        return fail(r, "data.frame_offsets must be an array of at most %d whole numbers (got %s)", NJ_MAX_OFFSETS,
                    n < 0 ? type_name(v) : "a longer array");
    int i = 0;
    for (const cJSON *e = v->child; e; e = e->next, i++) {
        double x = e->valuedouble;
        if (!cJSON_IsNumber(e) || x != floor(x) || x < f->lo || x > f->hi) {
            char got[40];
            if (cJSON_IsNumber(e)) snprintf(got, sizeof got, "%.10g", x);
            else snprintf(got, sizeof got, "%s", type_name(e));
            return fail(r, "data.frame_offsets[%d] must be a whole number between %.0f and %.0f (got %s)", i,
                        f->lo, f->hi, got);
        }
        r->c->offsets[i] = (int)x;
    }
    r->c->noffsets = n;
    return 0;
}

/* [near, far]: exactly two numbers, each inside the field's bounds; near < far
 * is a cross-field check (nj_train_config_check) like the other ranges. */
static int read_range(reader *r, const nj_config_field *f, const cJSON *v, nj_depth_range *dst)
{
    int n = cJSON_IsArray(v) ? cJSON_GetArraySize(v) : -1;
    if (n != 2) {
        char got[40];
        if (n < 0) snprintf(got, sizeof got, "%s", type_name(v));
        else snprintf(got, sizeof got, "%d value%s", n, n == 1 ? "" : "s");
        return fail(r, "%s.%s must be an array [near, far] of two numbers (got %s)", f->section, f->key, got);
    }
    double ends[2];
    int i = 0;
    for (const cJSON *e = v->child; e; e = e->next, i++) {
        if (!cJSON_IsNumber(e))
            return fail(r, "%s.%s[%d] must be a number (got %s)", f->section, f->key, i, type_name(e));
        ends[i] = e->valuedouble;
    }
    char msg[256];
    if (!nj_config_range_ends_ok(f, ends, msg, sizeof msg)) return fail(r, "%s", msg);
    *dst = (nj_depth_range){(float)ends[0], (float)ends[1]};
    return 0;
}

static int read_path(reader *r, const nj_config_field *f, const cJSON *v, char *dst)
{
    if (!cJSON_IsString(v)) return fail(r, "%s.%s must be a string (got %s)", f->section, f->key, type_name(v));
    const char *s = v->valuestring;
    const char *prefix = (r->base && s[0] && s[0] != '/') ? r->base : "";
    if (strlen(prefix) + strlen(s) >= NJ_PATH_MAX)
        return fail(r, "%s.%s is too long (more than %d bytes)", f->section, f->key, NJ_PATH_MAX - 1);
    snprintf(dst, NJ_PATH_MAX, "%s%s", prefix, s);
    return 0;
}

static int read_choice(reader *r, const nj_config_field *f, const cJSON *v, const char *const *names, int n, int *out)
{
    for (int i = 0; cJSON_IsString(v) && i < n; i++)
        if (!strcmp(v->valuestring, names[i])) { *out = i; return 0; }
    char list[128] = "", got[80];
    for (int i = 0; i < n; i++) {
        size_t len = strlen(list);
        snprintf(list + len, sizeof list - len, "%s\"%s\"", i == 0 ? "" : (i == n - 1 ? " or " : ", "), names[i]);
    }
    if (cJSON_IsString(v)) snprintf(got, sizeof got, "\"%.60s\"", v->valuestring);
    else snprintf(got, sizeof got, "%s", type_name(v));
    return fail(r, "%s.%s must be %s (got %s)", f->section, f->key, list, got);
}

static const char *const NORM_NAMES[3] = {"none", "batch", "group"};   /* index = nj_norm_kind */
static const char *const SCHEDULE_NAMES[2] = {"step", "cosine"};       /* index = cosine flag */

static int read_text_field(reader *r, const nj_config_field *f, const cJSON *v, char *p)
{
    int k;
    switch (f->kind) {
    case NJ_F_BOOL:
        if (!cJSON_IsBool(v)) return fail(r, "%s.%s must be true or false (got %s)", f->section, f->key, type_name(v));
        *(int *)p = cJSON_IsTrue(v);
        return 0;
    case NJ_F_NAME: {
        char msg[256];
        if (!cJSON_IsString(v)) return fail(r, "%s.%s must be a string (got %s)", f->section, f->key, type_name(v));
        if (!nj_config_name_ok(v->valuestring, msg, sizeof msg)) return fail(r, "%s", msg);
        snprintf(p, sizeof r->c->name, "%s", v->valuestring);
        return 0;
    }
    case NJ_F_PATH: return read_path(r, f, v, p);
    case NJ_F_NORM:
        if (read_choice(r, f, v, NORM_NAMES, 3, &k)) return -1;
        *(nj_norm_kind *)p = (nj_norm_kind)k;
        return 0;
    case NJ_F_SCHEDULE:
        if (read_choice(r, f, v, SCHEDULE_NAMES, 2, &k)) return -1;
        *(int *)p = k;
        return 0;
    case NJ_F_RANGE: return read_range(r, f, v, (nj_depth_range *)p);
    default: return read_offsets(r, f, v);
    }
}

static int read_field(reader *r, const nj_config_field *f, const cJSON *v)
{
    char *p = (char *)r->c + f->off;
    double x;
    switch (f->kind) {
    case NJ_F_INT:
        if (read_whole(r, f, v, -2147483648.0, 2147483647.0, &x)) return -1;
        *(int *)p = (int)x;
        return 0;
    case NJ_F_LONG:
        if (read_whole(r, f, v, -9e15, 9e15, &x)) return -1;
        *(long *)p = (long)x;
        return 0;
    case NJ_F_UINT:
        if (read_whole(r, f, v, 0, 4294967295.0, &x)) return -1;
        *(unsigned *)p = (unsigned)x;
        return 0;
    case NJ_F_FLOAT:
        if (read_number(r, f, v, &x)) return -1;
        *(float *)p = (float)x;
        return 0;
    case NJ_F_DOUBLE:
        if (read_number(r, f, v, &x)) return -1;
        *(double *)p = x;
        r->minutes_given |= p == (char *)&r->c->minutes;
        return 0;
    case NJ_F_HOURS:
        if (read_number(r, f, v, &r->hours)) return -1;
        r->hours_given = 1;
        return 0;
    default: return read_text_field(r, f, v, p);
    }
}

static int read_section(reader *r, const cJSON *obj, const char *section)
{
    if (!cJSON_IsObject(obj)) {
        if (!section[0]) return fail(r, "the configuration must be a JSON object (got %s)", type_name(obj));
        return fail(r, "\"%s\" must be an object (got %s)", section, type_name(obj));
    }
    for (const cJSON *v = obj->child; v; v = v->next) {
        const char *key = v->string;
        for (const cJSON *u = obj->child; u != v; u = u->next)
            if (!strcmp(u->string, key))
                return fail(r, "%s%s%.64s is given twice", section, section[0] ? "." : "", key);
        char buf[160];
        const nj_config_field *f = find_field(section, key);
        const char *sub = f ? NULL : child_section(section, key, buf, sizeof buf);
        int rc = f ? read_field(r, f, v) : sub ? read_section(r, v, sub) : unknown_key(r, section, key);
        if (rc) return -1;
    }
    return 0;
}

/* "run.minutes" and "run.hours" are two spellings of one budget. */
static int apply_hours(reader *r)
{
    if (!r->hours_given) return 0;
    if (r->minutes_given && r->c->minutes > 0 && r->hours > 0)
        return fail(r, "run.minutes and run.hours are both set: give the time budget once");
    if (!r->minutes_given || r->c->minutes <= 0) r->c->minutes = r->hours * 60.0;
    return 0;
}

/* 1-based line and column (bytes) of `at` in `text`. */
static void text_position(const char *text, const char *at, int *line, int *col)
{
    *line = 1;
    *col = 1;
    for (const char *p = text; *p && p < at; p++) {
        if (*p == '\n') { (*line)++; *col = 1; }
        else (*col)++;
    }
}

static int syntax_error(reader *r, const char *text, const char *at)
{
    int line, col;
    if (!at || at < text || at > text + strlen(text)) at = text + strlen(text);
    text_position(text, at, &line, &col);
    char near[24];
    int k = 0;
    for (const char *p = at; *p && *p != '\n' && k < 20; p++) near[k++] = *p;
    near[k] = 0;
    if (nj_json_too_deep(text, at))
        snprintf(r->err, r->errlen, "%s:%d:%d: bad JSON: nested more than %d levels deep", r->origin, line, col,
                 CJSON_NESTING_LIMIT);
    else if (k) snprintf(r->err, r->errlen, "%s:%d:%d: bad JSON near '%s'", r->origin, line, col, near);
    else snprintf(r->err, r->errlen, "%s:%d:%d: bad JSON (unexpected end of text)", r->origin, line, col);
    return -1;
}

static int parse_text(nj_train_config *c, const char *json, const char *origin, const char *base,
                      char *err, size_t errlen)
{
    nj_train_config tmp = *c;
    reader r = {.c = &tmp, .origin = origin ? origin : "config", .base = base, .err = err, .errlen = errlen};
    const char *end = NULL;
    cJSON *root = cJSON_ParseWithOpts(json, &end, 1);
    if (!root) return syntax_error(&r, json, end ? end : cJSON_GetErrorPtr());
    int rc = read_section(&r, root, "");
    cJSON_Delete(root);
    if (rc || apply_hours(&r)) return -1;
    tmp.model.seed = tmp.seed;   /* the network is initialised from the run's seed */
    char msg[512];
    if (nj_train_config_check(&tmp, msg, sizeof msg)) return fail(&r, "%s", msg);
    *c = tmp;
    return 0;
}

int nj_train_config_load_text(nj_train_config *c, const char *json, const char *origin,
                              char *err, size_t errlen)
{
    return parse_text(c, json, origin, NULL, err, errlen);
}

static char *read_file(const char *path, long *len, char *err, size_t errlen)
{
    FILE *f = fopen(path, "rb");
    if (!f) {
        snprintf(err, errlen, "%s: cannot open the configuration: %s", path, strerror(errno));
        return NULL;
    }
    char *buf = malloc(MAX_CONFIG_BYTES + 1);
    size_t n = buf ? fread(buf, 1, MAX_CONFIG_BYTES + 1, f) : 0;
    int bad = !buf || ferror(f);
    fclose(f);
    if (bad || n > MAX_CONFIG_BYTES) {
        snprintf(err, errlen, "%s: %s", path,
                 bad ? "cannot read the configuration" : "larger than 1 MB: not a configuration file");
        free(buf);
        return NULL;
    }
    buf[n] = 0;
    *len = (long)n;
    return buf;
}

int nj_train_config_load(nj_train_config *c, const char *path, char *err, size_t errlen)
{
    long len = 0;
    char *text = read_file(path, &len, err, errlen);
    if (!text) return -1;
    int rc = -1;
    if ((long)strlen(text) != len) {
        snprintf(err, errlen, "%s: contains a NUL byte at offset %zu: not a JSON text", path, strlen(text));
    } else {
        const char *slash = strrchr(path, '/');
        char base[NJ_PATH_MAX];
        snprintf(base, sizeof base, "%.*s", slash ? (int)(slash - path + 1) : 0, path);
        rc = parse_text(c, text, path, base[0] ? base : NULL, err, errlen);
    }
    free(text);
    return rc;
}

/* ---- writing ---- */

/* The shortest decimal that reads back as f, as a double (so cJSON prints it short). */
static double short_float(float f)
{
    char buf[32];
    for (int prec = 6; prec <= 9; prec++) {
        snprintf(buf, sizeof buf, "%.*g", prec, (double)f);
        if (strtof(buf, NULL) == f) break;
    }
    return strtod(buf, NULL);
}

/* A double as raw JSON text: the shortest of 15–17 significant digits that
 * reads back exactly (cJSON's own printer accepts an approximate 15-digit form). */
static cJSON *short_double(double d)
{
    char buf[40];
    for (int prec = 15; prec <= 17; prec++) {
        snprintf(buf, sizeof buf, "%.*g", prec, d);
        if (strtod(buf, NULL) == d) break;
    }
    return cJSON_CreateRaw(buf);
}

/* The object for a dotted section path, created on first use. */
static cJSON *section_object(cJSON *root, const char *section)
{
    char part[32];
    cJSON *obj = root;
    while (obj && *section) {
        size_t n = strcspn(section, ".");
        snprintf(part, sizeof part, "%.*s", (int)n, section);
        cJSON *next = cJSON_GetObjectItemCaseSensitive(obj, part);
        obj = next ? next : cJSON_AddObjectToObject(obj, part);
        section += n + (section[n] == '.');
    }
    return obj;
}

static cJSON *field_json(const nj_train_config *c, const nj_config_field *f)
{
    const char *p = (const char *)c + f->off;
    switch (f->kind) {
    case NJ_F_INT: return cJSON_CreateNumber(*(const int *)p);
    case NJ_F_LONG: return cJSON_CreateNumber((double)*(const long *)p);
    case NJ_F_UINT: return cJSON_CreateNumber(*(const unsigned *)p);
    case NJ_F_FLOAT: return cJSON_CreateNumber(short_float(*(const float *)p));
    case NJ_F_DOUBLE: return short_double(*(const double *)p);
    case NJ_F_BOOL: return cJSON_CreateBool(*(const int *)p != 0);
    case NJ_F_NAME:
    case NJ_F_PATH: return cJSON_CreateString(p);
    case NJ_F_NORM: {
        int k = *(const nj_norm_kind *)p;
        return cJSON_CreateString(NORM_NAMES[k >= 0 && k < 3 ? k : NJ_NORM_BATCH]);
    }
    case NJ_F_SCHEDULE: return cJSON_CreateString(SCHEDULE_NAMES[*(const int *)p != 0]);
    case NJ_F_RANGE: {
        const nj_depth_range *d = (const nj_depth_range *)p;
        cJSON *a = cJSON_CreateArray();
        if (a) {
            cJSON_AddItemToArray(a, cJSON_CreateNumber(short_float(d->near)));
            cJSON_AddItemToArray(a, cJSON_CreateNumber(short_float(d->far)));
        }
        return a;
    }
    case NJ_F_OFFSETS: {
        int n = c->noffsets < 0 ? 0 : (c->noffsets > NJ_MAX_OFFSETS ? NJ_MAX_OFFSETS : c->noffsets);
        return cJSON_CreateIntArray(c->offsets, n);
    }
    default: return NULL;
    }
}

char *nj_train_config_to_json(const nj_train_config *c)
{
    cJSON *root = cJSON_CreateObject();
    int ok = root != NULL;
    for (int i = 0; ok && i < nj_config_nfields; i++) {
        const nj_config_field *f = &nj_config_fields[i];
        if (f->kind == NJ_F_HOURS) continue;          /* written as minutes */
        cJSON *obj = section_object(root, f->section), *v = field_json(c, f);
        ok = obj && v && cJSON_AddItemToObject(obj, f->key, v);
        if (!ok) cJSON_Delete(v);
    }
    char *text = ok ? cJSON_Print(root) : NULL;
    cJSON_Delete(root);
    return text;
}

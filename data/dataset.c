/* data/dataset.c — parsing the dataset JSON (cJSON) into nj_dataset.
 * Syntax errors are located by line and column from cJSON's parse-end
 * pointer; every missing or ill-typed key is one problem line naming the
 * JSON file and the sequence. */
#include "data/dataset.h"
#include "data/jsondepth.h"
#include <cjson/cJSON.h>
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define MAX_JSON_BYTES (64L << 20)

typedef struct ctx {
    const char *path;        /* the JSON file */
    char where[160];         /* "sequence 2 (\"yard-03\")" */
    nj_problems *pr;
} ctx;

static char *read_text(const char *path, nj_problems *pr)
{
    FILE *f = fopen(path, "rb");
    if (!f) {
        nj_problem(pr, "%s: cannot open the dataset file: %s", path, strerror(errno));
        return NULL;
    }
    char *buf = NULL;
    long n = -1;
    if (fseek(f, 0, SEEK_END) == 0) n = ftell(f);
    if (n >= 0 && n <= MAX_JSON_BYTES && fseek(f, 0, SEEK_SET) == 0) buf = malloc((size_t)n + 1);
    if (buf && fread(buf, 1, (size_t)n, f) != (size_t)n) { free(buf); buf = NULL; }
    fclose(f);
    if (!buf) nj_problem(pr, "%s: cannot read the dataset file (larger than 64 MB or unreadable)", path);
    else buf[n] = 0;
    return buf;
}

/* 1-based line and column (in bytes) of `at` inside `text`. */
static void text_position(const char *text, const char *at, int *line, int *col)
{
    *line = 1;
    *col = 1;
    for (const char *c = text; *c && c < at; c++) {
        if (*c == '\n') { (*line)++; *col = 1; }
        else (*col)++;
    }
}

static void bad_json(const char *path, const char *text, const char *at, nj_problems *pr)
{
    int line, col;
    if (!at) at = text + strlen(text);
    text_position(text, at, &line, &col);
    char near[24];
    int k = 0;
    for (const char *c = at; *c && *c != '\n' && k < 20; c++) near[k++] = *c;
    near[k] = 0;
    if (nj_json_too_deep(text, at))
        nj_problem(pr, "%s:%d:%d: bad JSON: nested more than %d levels deep", path, line, col, CJSON_NESTING_LIMIT);
    else if (k) nj_problem(pr, "%s:%d:%d: bad JSON near '%s'", path, line, col, near);
    else nj_problem(pr, "%s:%d:%d: bad JSON (unexpected end of text)", path, line, col);
}

static char *resolve(const char *root, const char *p)
{
    if (p[0] == '/' || !strcmp(root, ".")) return strdup(p);
    return nj_path_join(root, p);
}

static const cJSON *member(const cJSON *obj, const char *key) { return cJSON_GetObjectItemCaseSensitive(obj, key); }

/* 1 present and a non-empty string, 0 absent, -1 wrong type (problem added). */
static int get_string(ctx *c, const cJSON *obj, const char *key, const char **out)
{
    const cJSON *v = member(obj, key);
    if (!v) return 0;
    if (!cJSON_IsString(v) || !v->valuestring[0]) {
        nj_problem(c->pr, "%s: %s: \"%s\" must be a non-empty string", c->path, c->where, key);
        return -1;
    }
    *out = v->valuestring;
    return 1;
}

static int get_number(ctx *c, const cJSON *obj, const char *prefix, const char *key, double *out)
{
    const cJSON *v = member(obj, key);
    if (!v) return 0;
    if (!cJSON_IsNumber(v) || !isfinite(v->valuedouble)) {
        nj_problem(c->pr, "%s: %s: \"%s%s\" must be a number", c->path, c->where, prefix, key);
        return -1;
    }
    *out = v->valuedouble;
    return 1;
}

static void missing(ctx *c, const char *key, const char *why)
{
    nj_problem(c->pr, "%s: %s: missing key \"%s\"%s", c->path, c->where, key, why);
}

static void positive(ctx *c, const char *key, double v, const char *what)
{
    if (!(v > 0)) nj_problem(c->pr, "%s: %s: %s \"%s\" must be positive (got %g)", c->path, c->where, what, key, v);
}

/* A key at the camera level that belongs inside "lens". */
static int is_coefficient(const char *k)
{
    static const char *const names[] = {"k1", "k2", "k3", "k4", "p1", "p2"};
    for (int i = 0; i < 6; i++)
        if (k && !strcmp(k, names[i])) return 1;
    return 0;
}

/* "lens": {"model": ..., coefficients} inside the camera object `what`. */
static void parse_lens(ctx *c, const cJSON *cam, const char *what, nj_lens *L)
{
    const cJSON *o = member(cam, "lens");
    memset(L, 0, sizeof *L);
    if (!o) return;
    const char *model = NULL;
    if (!cJSON_IsObject(o) || get_string(c, o, "model", &model) != 1) {
        nj_problem(c->pr, "%s: %s: \"%s.lens\" must be an object with \"model\": \"radial-tangential\" or \"fisheye\"",
                   c->path, c->where, what);
        return;
    }
    if (!strcmp(model, "radial-tangential")) L->kind = NJ_LENS_RADTAN;
    else if (!strcmp(model, "fisheye")) L->kind = NJ_LENS_FISHEYE;
    else {
        nj_problem(c->pr, "%s: %s: \"%s.lens.model\" is \"%.40s\"; expected radial-tangential or fisheye", c->path,
                   c->where, what, model);
        return;
    }
    int n;
    const char *const *names = nj_lens_coeff_names(L->kind, &n);
    char prefix[48];
    snprintf(prefix, sizeof prefix, "%s.lens.", what);
    for (const cJSON *it = o->child; it; it = it->next) {
        int k = -1;
        for (int i = 0; i < n && k < 0; i++)
            if (it->string && !strcmp(it->string, names[i])) k = i;
        if (k >= 0) get_number(c, o, prefix, names[k], &L->c[k]);
        else if (!it->string || strcmp(it->string, "model"))
            nj_problem(c->pr, "%s: %s: \"%s%.40s\" is not a coefficient of the %s model (%s)", c->path, c->where, prefix,
                       it->string ? it->string : "?", model, L->kind == NJ_LENS_RADTAN ? "k1, k2, p1, p2, k3" : "k1, k2, k3, k4");
    }
}

/* fx, fy, cx, cy (+ "lens") of the camera object `what` ("camera", "right_camera"). */
static void parse_intrinsics(ctx *c, const cJSON *cam, const char *what, nj_camera *out, nj_lens *L)
{
    static const char *keys[4] = {"fx", "fy", "cx", "cy"};
    double v[4] = {0, 0, 0, 0};
    char prefix[32];
    snprintf(prefix, sizeof prefix, "%s.", what);
    for (int i = 0; i < 4; i++) {
        char full[48];
        snprintf(full, sizeof full, "%s.%s", what, keys[i]);
        int r = get_number(c, cam, prefix, keys[i], &v[i]);
        if (r == 0) missing(c, full, "");
        if (r == 1 && i < 2) positive(c, full, v[i], "focal length");
    }
    *out = (nj_camera){(float)v[0], (float)v[1], (float)v[2], (float)v[3]};
    for (const cJSON *it = cam->child; it; it = it->next)
        if (is_coefficient(it->string))
            nj_problem(c->pr, "%s: %s: \"%s.%s\": distortion coefficients go inside \"%s.lens\" with its \"model\"",
                       c->path, c->where, what, it->string, what);
    parse_lens(c, cam, what, L);
}

static void parse_camera(ctx *c, const cJSON *seq, nj_sequence *s)
{
    const cJSON *cam = member(seq, "camera");
    if (!cam) { missing(c, "camera", ""); return; }
    if (!cJSON_IsObject(cam)) {
        nj_problem(c->pr, "%s: %s: \"camera\" must be an object with fx, fy, cx, cy", c->path, c->where);
        return;
    }
    /* the whole block as text: part of what the frame store keys its pixels on
     * (any camera key that changes the frames changes the text) */
    s->camera_text = cJSON_PrintUnformatted(cam);
    parse_intrinsics(c, cam, "camera", &s->camera, &s->lens);
    s->raw_camera = s->camera;
}

/* n numbers of the array `key` of obj (n_alt: a second accepted length).
 * Returns the count read, 0 when absent, -1 after a problem. */
static int get_numbers(ctx *c, const cJSON *obj, const char *what, const char *key, int n, int n_alt, double *out)
{
    const cJSON *a = member(obj, key);
    if (!a) return 0;
    int len = cJSON_IsArray(a) ? cJSON_GetArraySize(a) : -1, i = 0;
    if (len == n || len == n_alt)
        for (const cJSON *it = a->child; it; it = it->next, i++) {
            if (!cJSON_IsNumber(it) || !isfinite(it->valuedouble)) break;
            out[i] = it->valuedouble;
        }
    if (len < 0 || i != len || (len != n && len != n_alt)) {
        if (n_alt) nj_problem(c->pr, "%s: %s: \"%s.%s\" must be an array of %d or %d numbers", c->path, c->where, what, key, n, n_alt);
        else nj_problem(c->pr, "%s: %s: \"%s.%s\" must be an array of %d numbers", c->path, c->where, what, key, n);
        return -1;
    }
    return len;
}

/* "right_camera": the raw rig's second camera and its pose. */
static void parse_rig(ctx *c, const cJSON *cam, nj_sequence *s)
{
    double rot[9], pos[3], det;
    if (!cJSON_IsObject(cam)) {
        nj_problem(c->pr, "%s: %s: \"right_camera\" must be an object with fx, fy, cx, cy, rotation, position",
                   c->path, c->where);
        return;
    }
    static const char *known[] = {"fx", "fy", "cx", "cy", "lens", "rotation", "position"};
    for (const cJSON *it = cam->child; it; it = it->next) {
        int ok = is_coefficient(it->string);
        for (int i = 0; i < 7 && !ok; i++) ok = it->string && !strcmp(it->string, known[i]);
        if (!ok) nj_warning(c->pr, "%s: %s: unknown key \"right_camera.%s\" ignored", c->path, c->where, it->string ? it->string : "?");
    }
    parse_intrinsics(c, cam, "right_camera", &s->right_camera, &s->right_lens);
    int nr = get_numbers(c, cam, "right_camera", "rotation", 3, 9, rot);
    int np = get_numbers(c, cam, "right_camera", "position", 3, 0, pos);
    if (nr == 0) missing(c, "right_camera.rotation", " (a rotation vector in radians, or a 3x3 matrix)");
    if (np == 0) missing(c, "right_camera.position", " (metres, in the left camera's frame)");
    if (nr == 9 && (nj_rot_error(rot, &det) > 1e-4 || !(det > 0))) {
        nj_problem(c->pr, "%s: %s: \"right_camera.rotation\" is not a rotation matrix (|RtR - I| %.2g, det %.4g)",
                   c->path, c->where, nj_rot_error(rot, &det), det);
        return;
    }
    if (nr <= 0 || np <= 0) return;
    double vec[3];
    if (nr == 9) nj_rot_to_vec(rot, vec);     /* back and forth: the nearest exact rotation */
    else memcpy(vec, rot, sizeof vec);
    nj_rot_from_vec(vec, s->right_rot);
    memcpy(s->right_pos, pos, sizeof pos);
    double R1[9], R2[9], b;
    char why[256];
    if (nj_rectify_rotations(s->right_rot, s->right_pos, R1, R2, &b, why, sizeof why))
        nj_problem(c->pr, "%s: %s: right_camera: %s", c->path, c->where, why);
    s->rig = 1;
    s->baseline = (float)b;
}

static void parse_stereo(ctx *c, const cJSON *seq, nj_sequence *s, const char *root)
{
    const char *right = NULL;
    double b = 0;
    const cJSON *rig = member(seq, "right_camera");
    int r = get_string(c, seq, "right_images", &right);
    int rb = get_number(c, seq, "", "baseline", &b);
    if (r == 1) s->right_images = resolve(root, right);
    if (rig) {
        if (r == 0) missing(c, "right_images", " (required with \"right_camera\")");
        if (rb == 1)
            nj_problem(c->pr, "%s: %s: \"baseline\" is given by \"right_camera.position\" of a raw rig: leave it out",
                       c->path, c->where);
        parse_rig(c, rig, s);
        return;
    }
    if (r == 1 && s->lens.kind != NJ_LENS_NONE)
        nj_problem(c->pr, "%s: %s: \"camera.lens\" with a rectified stereo pair: describe the raw rig with "
                   "\"right_camera\" (its lens and pose) instead of \"baseline\"", c->path, c->where);
    if (r == 1 && rb == 0) missing(c, "baseline", " (required with \"right_images\")");
    if (r == 1 && rb == 1) positive(c, "baseline", b, "stereo");
    if (r == 0 && rb == 1) nj_warning(c->pr, "%s: %s: \"baseline\" is ignored without \"right_images\"", c->path, c->where);
    s->baseline = (float)b;
}

static void parse_depth(ctx *c, const cJSON *seq, nj_sequence *s, const char *root)
{
    const cJSON *d = member(seq, "depth");
    if (!d) return;
    if (!cJSON_IsObject(d)) {
        nj_problem(c->pr, "%s: %s: \"depth\" must be an object with dir, format (and scale)", c->path, c->where);
        return;
    }
    const char *dir = NULL, *fmt = NULL;
    double scale = 0;
    int rd = get_string(c, d, "dir", &dir), rf = get_string(c, d, "format", &fmt);
    int rs = get_number(c, d, "depth.", "scale", &scale);
    if (rd == 0) missing(c, "depth.dir", "");
    if (rf == 0) missing(c, "depth.format", "");
    if (rf == 1 && nj_depth_format_parse(fmt, &s->depth_format))
        nj_problem(c->pr, "%s: %s: \"depth.format\" is \"%s\"; expected png16, npy or pfm", c->path, c->where, fmt);
    if (s->depth_format == NJ_DEPTH_PNG16 && rs == 0) missing(c, "depth.scale", " (required with png16)");
    if (s->depth_format == NJ_DEPTH_PNG16 && rs == 1) positive(c, "depth.scale", scale, "depth");
    s->depth_scale = (float)scale;
    if (rd == 1) s->depth_dir = resolve(root, dir);
}

static void parse_split(ctx *c, const cJSON *seq, nj_sequence *s)
{
    const char *v = NULL;
    s->split = NJ_SPLIT_TRAIN;
    if (get_string(c, seq, "split", &v) != 1) return;
    if (!strcmp(v, "train")) s->split = NJ_SPLIT_TRAIN;
    else if (!strcmp(v, "val")) s->split = NJ_SPLIT_VAL;
    else if (!strcmp(v, "test")) s->split = NJ_SPLIT_TEST;
    else nj_problem(c->pr, "%s: %s: \"split\" is \"%s\"; expected train, val or test", c->path, c->where, v);
}

static void warn_unknown(ctx *c, const cJSON *obj, const char *const *known, int nknown)
{
    for (const cJSON *it = obj->child; it; it = it->next) {
        int ok = 0;
        for (int i = 0; i < nknown && !ok; i++) ok = it->string && !strcmp(it->string, known[i]);
        if (!ok) nj_warning(c->pr, "%s: %s: unknown key \"%s\" ignored", c->path, c->where, it->string ? it->string : "?");
    }
}

static void parse_sequence(ctx *c, const cJSON *seq, int i, nj_sequence *s, const char *root)
{
    static const char *known[] = {"name",  "images", "camera", "right_images", "baseline", "right_camera",
                                  "depth", "poses",  "split",  "lead_mask"};
    snprintf(c->where, sizeof c->where, "sequence %d", i + 1);
    if (!cJSON_IsObject(seq)) {
        nj_problem(c->pr, "%s: %s: must be an object", c->path, c->where);
        return;
    }
    const char *name = NULL, *images = NULL, *poses = NULL, *lead = NULL;
    if (get_string(c, seq, "name", &name) == 0) missing(c, "name", "");
    if (name) {
        s->name = strdup(name);
        snprintf(c->where, sizeof c->where, "sequence %d (\"%.100s\")", i + 1, name);
    }
    if (get_string(c, seq, "images", &images) == 0) missing(c, "images", "");
    if (images) s->images = resolve(root, images);
    parse_camera(c, seq, s);
    parse_stereo(c, seq, s, root);
    parse_depth(c, seq, s, root);
    if (get_string(c, seq, "poses", &poses) == 1) s->poses = resolve(root, poses);
    if (get_string(c, seq, "lead_mask", &lead) == 1) s->lead_mask_dir = resolve(root, lead);
    parse_split(c, seq, s);
    warn_unknown(c, seq, known, (int)(sizeof known / sizeof known[0]));
}

static void check_names(ctx *c, const nj_dataset *ds)
{
    for (int i = 0; i < ds->nseq; i++)
        for (int j = 0; j < i; j++)
            if (ds->seq[i].name && ds->seq[j].name && !strcmp(ds->seq[i].name, ds->seq[j].name)) {
                nj_problem(c->pr, "%s: sequences %d and %d share the name \"%s\"", c->path, j + 1, i + 1, ds->seq[i].name);
                break;
            }
}

static void parse_root(ctx *c, const cJSON *root, nj_dataset *ds)
{
    if (!cJSON_IsObject(root)) {
        nj_problem(c->pr, "%s: the top level must be an object with \"sequences\"", c->path);
        return;
    }
    const cJSON *seqs = member(root, "sequences");
    if (!seqs) { nj_problem(c->pr, "%s: missing key \"sequences\"", c->path); return; }
    if (!cJSON_IsArray(seqs)) { nj_problem(c->pr, "%s: \"sequences\" must be an array", c->path); return; }
    int n = cJSON_GetArraySize(seqs);
    if (n == 0) { nj_problem(c->pr, "%s: \"sequences\" is empty", c->path); return; }
    ds->seq = calloc((size_t)n, sizeof(nj_sequence));
    if (!ds->seq) { nj_problem(c->pr, "%s: out of memory", c->path); return; }
    ds->nseq = n;
    int i = 0;
    for (const cJSON *it = seqs->child; it; it = it->next, i++) parse_sequence(c, it, i, &ds->seq[i], ds->root);
    check_names(c, ds);
    static const char *known[] = {"sequences"};
    snprintf(c->where, sizeof c->where, "top level");
    warn_unknown(c, root, known, 1);
}

static char *folder_of(const char *path)
{
    const char *slash = strrchr(path, '/');
    if (!slash) return strdup(".");
    if (slash == path) return strdup("/");
    return strndup(path, (size_t)(slash - path));
}

int nj_dataset_parse(const char *path, nj_dataset *ds, nj_problems *pr)
{
    int before = pr->n;
    memset(ds, 0, sizeof *ds);
    ds->path = strdup(path);
    ds->root = folder_of(path);
    char *text = read_text(path, pr);
    if (!text) return pr->n - before;
    const char *end = NULL;
    cJSON *root = cJSON_ParseWithOpts(text, &end, 1);
    ctx c = {path, "", pr};
    if (!root) bad_json(path, text, end, pr);
    else parse_root(&c, root, ds);
    cJSON_Delete(root);
    free(text);
    return pr->n - before;
}

const char *nj_split_name(nj_split s)
{
    return s == NJ_SPLIT_VAL ? "val" : s == NJ_SPLIT_TEST ? "test" : "train";
}

void nj_data_options_default(nj_data_options *o)
{
    o->offsets[0] = 1;
    o->noffsets = 1;
    o->stereo = 1;
    o->dup_threshold = 0.003f;
    o->headers_only = 0;
    o->scan_cache = NULL;
    o->scan_cache_read = 0;
}

char *nj_lead_mask_path(const nj_sequence *s, int frame)
{
    if (!s->lead_mask_dir || frame < 0 || frame >= s->nframes) return NULL;
    const char *name = s->frames[frame], *dot = strrchr(name, '.');
    size_t stem = dot ? (size_t)(dot - name) : strlen(name);
    char *file = malloc(stem + 5);
    if (!file) return NULL;
    memcpy(file, name, stem);
    strcpy(file + stem, ".png");
    char *p = nj_path_join(s->lead_mask_dir, file);
    free(file);
    return p;
}

static void sequence_free(nj_sequence *s)
{
    for (int k = 0; s->undistort && k < 1 + s->rig; k++) nj_undistort_free(&s->undistort[k]);
    free(s->undistort);
    free(s->name);
    free(s->images);
    free(s->right_images);
    free(s->depth_dir);
    free(s->poses);
    free(s->lead_mask_dir);
    cJSON_free(s->camera_text);
    nj_free_names(s->frames, s->nframes);
    free(s->kept);
}

void nj_dataset_free(nj_dataset *ds)
{
    for (int i = 0; i < ds->nseq; i++) sequence_free(&ds->seq[i]);
    free(ds->seq);
    free(ds->path);
    free(ds->root);
    memset(ds, 0, sizeof *ds);
}

/* train/export/export_c.c — `nightjar export --format c`: a .c/.h pair computing the
 * depth net's finest depth map from an 8-bit RGB frame of a fixed size.
 *
 * The .c holds the weights as static const arrays (float, or signed char
 * plus per-channel float scales), a table of layers, the runtime of
 * export_c_runtime.c and nightjar_depth_run(), a straight-line sequence of
 * layer calls whose buffers sit at fixed offsets in the caller's scratch
 * array (placed by a first-fit plan; the header gives its size). */
#include "data/atomic.h"
#include "train/export/export.h"
#include "train/export/export_c.h"
#include "train/version.h"
#include <ctype.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

typedef struct c_paths {
    char c[4096], h[4096], base[256], guard[300];
} c_paths;

/* PATH.c / PATH.h (PATH may already end in .c). */
static int make_paths(const char *path, c_paths *p, char *err, size_t errlen)
{
    size_t len = strlen(path);
    if (len > 2 && !strcmp(path + len - 2, ".c")) len -= 2;
    const char *slash = strrchr(path, '/');
    const char *base = slash ? slash + 1 : path;
    size_t blen = (size_t)(path + len - base);
    if (len == 0 || len > 4000 || blen == 0 || blen > 200 || (slash && slash >= path + len)) {
        snprintf(err, errlen, "--out %.900s: need a file name (PATH or PATH.c)", path);
        return -1;
    }
    snprintf(p->c, sizeof p->c, "%.*s.c", (int)len, path);
    snprintf(p->h, sizeof p->h, "%.*s.h", (int)len, path);
    snprintf(p->base, sizeof p->base, "%.*s", (int)blen, base);
    size_t g = 0;
    for (size_t i = 0; i < blen && g + 3 < sizeof p->guard; i++)
        p->guard[g++] = isalnum((unsigned char)base[i]) ? (char)toupper((unsigned char)base[i]) : '_';
    snprintf(p->guard + g, sizeof p->guard - g, "_H");
    if (isdigit((unsigned char)p->guard[0])) p->guard[0] = '_';
    return 0;
}

/* C identifier suffix of a layer name ("enc0.1" → "enc0_1"). */
static void ident(const char *name, char *out, size_t n)
{
    size_t i = 0;
    for (; name[i] && i + 1 < n; i++) out[i] = isalnum((unsigned char)name[i]) ? name[i] : '_';
    out[i] = 0;
}

/* A float literal that reads back as exactly v. */
static void put_float(FILE *f, float v)
{
    char s[48];
    snprintf(s, sizeof s, "%.9g", (double)v);
    if (!strpbrk(s, ".e")) strcat(s, ".0");
    fprintf(f, "%sf", s);
}

static void put_floats(FILE *f, const char *type, const char *name, const float *v, size_t n)
{
    fprintf(f, "static const %s %s[%zu] = {\n", type, name, n);
    for (size_t i = 0; i < n; i++) {
        fputs(i % 8 == 0 ? "    " : " ", f);
        put_float(f, v[i]);
        fputs(i + 1 < n ? "," : "", f);
        if (i % 8 == 7 || i + 1 == n) fputc('\n', f);
    }
    fputs("};\n", f);
}

static void put_int8s(FILE *f, const char *name, const int8_t *v, size_t n)
{
    fprintf(f, "static const signed char %s[%zu] = {\n", name, n);
    for (size_t i = 0; i < n; i++) {
        fprintf(f, "%s%d%s", i % 24 == 0 ? "    " : "", v[i], i + 1 < n ? "," : "");
        if (i % 24 == 23 || i + 1 == n) fputc('\n', f);
    }
    fputs("};\n", f);
}

/* Units of the depth path in execution order: encoder, decoder, head 0. */
static int depth_path(const nj_model *m, int *order)
{
    int n = 0;
    for (int i = 0; i < m->cfg.stages; i++) {
        order[n++] = m->enc[i][0];
        order[n++] = m->enc[i][1];
    }
    for (int i = m->cfg.stages - 1; i >= 0; i--) {
        order[n++] = m->dec[i][0];
        order[n++] = m->dec[i][1];
    }
    order[n++] = m->head[0];
    return n;
}

static void put_layer_arrays(FILE *f, const nj_export_layer *l)
{
    char id[80], nm[100];
    ident(l->name, id, sizeof id);
    size_t nw = (size_t)l->cout * l->cin * l->k * l->k;
    fprintf(f, "/* %s: %d -> %d channels, %dx%d, stride %d, %s padding */\n", l->name, l->cin, l->cout, l->k,
            l->k, l->stride, l->pad_mode == NJ_PAD_REFLECT ? "reflection" : "zero");
    snprintf(nm, sizeof nm, "nd_w_%s", id);
    if (l->q) put_int8s(f, nm, l->q, nw);
    else put_floats(f, "float", nm, l->w, nw);
    snprintf(nm, sizeof nm, "nd_b_%s", id);
    put_floats(f, "float", nm, l->b, (size_t)l->cout);
    if (l->scale) {
        snprintf(nm, sizeof nm, "nd_s_%s", id);
        put_floats(f, "float", nm, l->scale, (size_t)l->cout);
    }
    if (l->groups) {
        snprintf(nm, sizeof nm, "nd_g_%s", id);
        put_floats(f, "float", nm, l->gamma, (size_t)l->cout);
        snprintf(nm, sizeof nm, "nd_e_%s", id);
        put_floats(f, "float", nm, l->beta, (size_t)l->cout);
    }
}

static void put_layer_entry(FILE *f, const nj_export_layer *l, int last)
{
    char id[80];
    ident(l->name, id, sizeof id);
    fprintf(f, "    {nd_w_%s, ", id);
    if (l->scale) fprintf(f, "nd_s_%s, ", id);
    else fputs("0, ", f);
    fprintf(f, "nd_b_%s, ", id);
    if (l->groups) fprintf(f, "nd_g_%s, nd_e_%s, ", id, id);
    else fputs("0, 0, ", f);
    fprintf(f, "%d, %d, %d, %d, %d, %d, %d, %d}%s /* %s */\n", l->groups, l->cin, l->cout, l->k, l->stride, l->pad,
            l->pad_mode == NJ_PAD_REFLECT, l->act == NJ_ACT_ELU ? 1 : (l->act == NJ_ACT_SIGMOID ? 2 : 0),
            last ? "" : ",", l->name);
}

/* ---- the run function --------------------------------------------------------- */

typedef struct emitter {
    FILE *f;
    const nj_export_net *net;
    nj_scratch_plan plan;
    int index[NJ_MAX_UNITS];   /* unit → row of nd_layers */
    int failed;
} emitter;

static long alloc_buf(emitter *e, long floats)
{
    long off = nj_plan_alloc(&e->plan, floats);
    if (off < 0) e->failed = 1;
    return off < 0 ? 0 : off;
}

/* Emits one layer call; returns the output's offset (or -1 for the depth array). */
static long emit_layer(emitter *e, int unit, long in, int c0, long skip, int h, int w, int to_depth)
{
    const nj_export_layer *l = &e->net->layers[unit];
    int oh = (h + 2 * l->pad - l->k) / l->stride + 1, ow = (w + 2 * l->pad - l->k) / l->stride + 1;
    long out = to_depth ? -1 : alloc_buf(e, (long)l->cout * oh * ow);
    long col = alloc_buf(e, (long)l->cin * l->k * l->k * ow);
    fprintf(e->f, "    nd_layer_run(&nd_layers[%d], scratch + %ld, %d, ", e->index[unit], in, c0);
    if (skip >= 0) fprintf(e->f, "scratch + %ld, ", skip);
    else fputs("0, ", e->f);
    fprintf(e->f, "%d, %d,\n                 ", h, w);
    if (to_depth) fputs("depth, ", e->f);
    else fprintf(e->f, "scratch + %ld, ", out);
    fprintf(e->f, "scratch + %ld); /* %s -> %dx%dx%d */\n", col, l->name, l->cout, oh, ow);
    nj_plan_free(&e->plan, col);
    return out;
}

static void emit_run(emitter *e)
{
    const nj_model *m = e->net->model;
    const int S = m->cfg.stages, H = e->net->height, W = e->net->width;
    long feat[NJ_MAX_STAGES], x = alloc_buf(e, 3L * H * W), cur;
    fputs("int nightjar_depth_run(const unsigned char *rgb, float *scratch, float *depth, float *disparity)\n{\n"
          "    if (!rgb || !scratch || !depth) return -1;\n", e->f);
    fprintf(e->f, "    nd_input(rgb, scratch + %ld);\n", x);
    cur = x;
    int c = 3, h = H, w = W;
    for (int i = 0; i < S; i++) {
        long t = emit_layer(e, m->enc[i][0], cur, c, -1, h, w, 0);
        if (i == 0) nj_plan_free(&e->plan, cur);   /* the input; later `cur` is a skip feature */
        h /= 2;
        w /= 2;
        c = e->net->layers[m->enc[i][0]].cout;
        cur = feat[i] = emit_layer(e, m->enc[i][1], t, c, -1, h, w, 0);
        nj_plan_free(&e->plan, t);
    }
    for (int i = S - 1; i >= 0; i--) {
        long d = emit_layer(e, m->dec[i][0], cur, c, -1, h, w, 0);
        nj_plan_free(&e->plan, cur);
        c = e->net->layers[m->dec[i][0]].cout;
        long up = alloc_buf(e, 4L * c * h * w);
        fprintf(e->f, "    nd_up2(scratch + %ld, %d, %d, %d, scratch + %ld);\n", d, c, h, w, up);
        nj_plan_free(&e->plan, d);
        h *= 2;
        w *= 2;
        cur = emit_layer(e, m->dec[i][1], up, c, i > 0 ? feat[i - 1] : -1, h, w, 0);
        nj_plan_free(&e->plan, up);
        if (i > 0) nj_plan_free(&e->plan, feat[i - 1]);
    }
    emit_layer(e, m->head[0], cur, c, -1, h, w, 1);
    fputs("    nd_output(depth, disparity);\n    return 0;\n}\n", e->f);
}

/* ---- files ----------------------------------------------------------------------- */

static void write_source(emitter *e, const c_paths *p, const char *ckpt_name)
{
    FILE *f = e->f;
    const nj_export_net *net = e->net;
    int order[4 * NJ_MAX_STAGES + 1], n = depth_path(net->model, order);
    for (int i = 0; i < NJ_MAX_UNITS; i++) e->index[i] = -1;
    for (int i = 0; i < n; i++) e->index[order[i]] = i;
    fprintf(f, "/* %s.c - depth from one camera frame; generated by nightjar %s export from %s.\n"
            " * See %s.h for the interface.  C99, libm only; no allocation, no threads. */\n",
            p->base, NJ_VERSION, ckpt_name, p->base);
    fprintf(f, "#include \"%s.h\"\n#include <math.h>\n\n", p->base);
    const float lo = 1.0f / net->depth_range.far, hi = 1.0f / net->depth_range.near;
    fputs("#define ND_IN_SCALE ", f);
    put_float(f, 1.0f / NJ_MODEL_INPUT_STD);
    fputs("\n#define ND_IN_SHIFT ", f);
    put_float(f, -NJ_MODEL_INPUT_MEAN / NJ_MODEL_INPUT_STD);
    fputs("\n#define ND_DISP_LO ", f);
    put_float(f, lo);
    fputs("\n#define ND_DISP_SPAN ", f);
    put_float(f, hi - lo);
    fputs("\n\n", f);
    nj_export_c_runtime(f, net->int8);
    fputs("/* ---- weights (batch norm folded into the convs) ---------------------------- */\n\n", f);
    for (int i = 0; i < n; i++) put_layer_arrays(f, &net->layers[order[i]]);
    fprintf(f, "\nstatic const struct nd_layer nd_layers[%d] = {\n", n);
    for (int i = 0; i < n; i++) put_layer_entry(f, &net->layers[order[i]], i + 1 == n);
    fputs("};\n\n", f);
    emit_run(e);
}

static void write_header(FILE *f, const nj_export_net *net, const c_paths *p, long scratch, const char *ckpt)
{
    const nj_model_config *mc = &net->model->cfg;
    char mean[32], std[32];
    nj_export_float_text(NJ_MODEL_INPUT_MEAN, mean, sizeof mean);
    nj_export_float_text(NJ_MODEL_INPUT_STD, std, sizeof std);
    fprintf(f,
        "/* %s.h - depth from one camera frame; generated by nightjar %s export from %s.\n"
        " *\n"
        " * Network: nightjar depth net (%d stages, width %g, %s normalisation%s),\n"
        " * finest disparity output; weights %s.\n"
        " * Trained on %dx%d frames.\n"
        " *\n"
        " * Input: one %dx%d frame, 8-bit RGB interleaved (R, G, B per pixel), rows top to\n"
        " *   bottom without padding: rgb[(y * NIGHTJAR_DEPTH_WIDTH + x) * 3 + c].  Resize the\n"
        " *   camera image to exactly this size first, keeping the field of view used in training.\n"
        " * Normalisation (done inside): v = byte / 255, x = (v - %s) / %s per channel.\n"
        " * Output: depth[y * NIGHTJAR_DEPTH_WIDTH + x],\n"
        " *   %s, between\n"
        " *   NIGHTJAR_DEPTH_MIN and NIGHTJAR_DEPTH_MAX; optionally the network's disparity\n"
        " *   s in (0, 1), with depth = 1 / (1/MAX + (1/MIN - 1/MAX) * s).\n"
        " * Memory: the caller passes a scratch array of NIGHTJAR_DEPTH_SCRATCH_FLOATS floats\n"
        " *   (NIGHTJAR_DEPTH_SCRATCH_BYTES bytes); nothing is allocated.  One call at a time per\n"
        " *   scratch array; no threads.  Link with libm (-lm).\n"
        " */\n",
        p->base, NJ_VERSION, ckpt, mc->stages, (double)mc->width,
        mc->norm == NJ_NORM_BATCH ? "batch" : (mc->norm == NJ_NORM_GROUP ? "group" : "no"),
        mc->norm == NJ_NORM_BATCH ? " folded into the convs" : "",
        net->int8 ? "int8 per output channel (symmetric, float scales), float activations" : "float32",
        net->cfg->width, net->cfg->height, net->width, net->height, mean, std,
        net->metric ? "in metres (the model was trained on rectified stereo pairs)"
                    : "in the model's own units: trained on monocular video, so the depth\n"
                      " *   is right only up to one unknown scale factor (not metres)");
    fprintf(f, "#ifndef %s\n#define %s\n\n", p->guard, p->guard);
    fprintf(f, "#define NIGHTJAR_DEPTH_WIDTH %d\n#define NIGHTJAR_DEPTH_HEIGHT %d\n", net->width, net->height);
    fputs("#define NIGHTJAR_DEPTH_MIN ", f);
    put_float(f, net->depth_range.near);
    fputs("\n#define NIGHTJAR_DEPTH_MAX ", f);
    put_float(f, net->depth_range.far);
    fprintf(f, "\n#define NIGHTJAR_DEPTH_SCRATCH_FLOATS %ldL\n", scratch);
    fputs("#define NIGHTJAR_DEPTH_SCRATCH_BYTES (NIGHTJAR_DEPTH_SCRATCH_FLOATS * (long)sizeof(float))\n\n", f);
    fputs("/* Computes the depth map of one frame.  rgb: the input above; scratch: at least\n"
          " * NIGHTJAR_DEPTH_SCRATCH_FLOATS floats; depth: WIDTH * HEIGHT floats; disparity: NULL or\n"
          " * WIDTH * HEIGHT floats.  Returns 0, or -1 when rgb, scratch or depth is NULL. */\n"
          "int nightjar_depth_run(const unsigned char *rgb, float *scratch, float *depth, float *disparity);\n\n",
          f);
    fprintf(f, "#endif\n");
}

/* The checkpoint's file name, safe inside a C comment. */
static void source_name(const char *source, char *out, size_t n)
{
    const char *s = source ? source : "a checkpoint", *slash = strrchr(s, '/');
    if (slash && slash[1]) s = slash + 1;
    size_t i = 0;
    for (; s[i] && i + 1 < n; i++) out[i] = isprint((unsigned char)s[i]) && s[i] != '*' ? s[i] : '_';
    out[i] = 0;
}

static long file_size(const char *path)
{
    struct stat st;
    return stat(path, &st) == 0 ? (long)st.st_size : 0;
}

int nj_export_c(const nj_export_net *net, const char *path, long *bytes, char *err, size_t errlen)
{
    c_paths p;
    if (make_paths(path, &p, err, errlen)) return -1;
    char ckpt[128];
    source_name(net->source, ckpt, sizeof ckpt);
    emitter e;
    memset(&e, 0, sizeof e);
    e.net = net;
    nj_atomic_file src, hdr;
    if (nj_atomic_open(&src, p.c, err, errlen)) return -1;
    e.f = src.f;
    write_source(&e, &p, ckpt);
    if (e.failed) snprintf(err, errlen, "%s: scratch plan overflow", p.c);
    int ok = !e.failed && !ferror(src.f);
    if (nj_atomic_close(&src, ok, err, errlen) || !ok) return -1;
    if (nj_atomic_open(&hdr, p.h, err, errlen)) return -1;
    write_header(hdr.f, net, &p, e.plan.peak, ckpt);
    if (nj_atomic_close(&hdr, !ferror(hdr.f), err, errlen)) return -1;
    *bytes = file_size(p.c) + file_size(p.h);
    return 0;
}

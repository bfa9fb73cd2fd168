/* train/export/export_c.c — `nightjar export --format c`: a .c/.h pair computing the
 * depth net's finest depth map from an 8-bit RGB frame of a fixed size.
 *
 * The .c holds the weights as static const arrays, packed in the order the
 * runtime's blocked kernel reads them (f32: ND_OB = 8 output channels at a
 * time, tap-major; int8: one row of taps per output channel, NHWC tap order,
 * padded to 16), a table of layers, the runtime of export_c_runtime.c and
 * PREFIX depth_run(), a straight-line sequence of layer calls whose buffers sit
 * at fixed offsets in the caller's scratch array (placed by a first-fit plan;
 * the header gives its size).  Every external name starts with the symbol
 * prefix (--symbol-prefix; functions as given, macros and the header guard in
 * upper case), so two exports link into one program. */
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
    char lower[40], upper[40];   /* the symbol prefix as given and in upper case */
} c_paths;

/* The prefix must start a C identifier: [A-Za-z_][A-Za-z0-9_]*, at most 32 characters. */
static int set_prefix(const char *prefix, c_paths *p, char *err, size_t errlen)
{
    size_t n = strlen(prefix);
    int ok = n > 0 && n <= 32 && !isdigit((unsigned char)prefix[0]);
    for (size_t i = 0; ok && i < n; i++) ok = isalnum((unsigned char)prefix[i]) || prefix[i] == '_';
    if (!ok) {
        snprintf(err, errlen, "--symbol-prefix '%.40s': need 1 to 32 letters, digits or '_', not starting with a "
                 "digit", prefix);
        return -1;
    }
    for (size_t i = 0; i <= n; i++) {
        p->lower[i] = prefix[i];
        p->upper[i] = (char)toupper((unsigned char)prefix[i]);
    }
    snprintf(p->guard, sizeof p->guard, "%sDEPTH_H", p->upper);
    return 0;
}

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

static void put_int32s(FILE *f, const char *name, const int32_t *v, size_t n)
{
    fprintf(f, "static const int %s[%zu] = {\n", name, n);
    for (size_t i = 0; i < n; i++) {
        fprintf(f, "%s%ld%s", i % 8 == 0 ? "    " : " ", (long)v[i], i + 1 < n ? "," : "");
        if (i % 8 == 7 || i + 1 == n) fputc('\n', f);
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

/* ---- kernel layout ------------------------------------------------------------ */

#define F32_OB 8          /* ND_OB of the f32 runtime: output channels per packed block */
#define I8_OB 4           /* output channels per block of the int8 kernel */
#define I8_PB 6           /* positions per block of the int8 kernel */

static long layer_positions(const nj_export_layer *l, int h, int w)
{
    return (long)((h + 2 * l->pad - l->k) / l->stride + 1) * ((w + 2 * l->pad - l->k) / l->stride + 1);
}

/* int8 tap rows: up to NJ_I8_KP_CONST taps the layer's kernel has kp as a
 * constant, and gcc covers it in 64-, 32- and 16-byte steps: rows are padded
 * to a multiple of 32 (48 for 33..48 taps; 80, 112 or 144 ran 3x slower
 * than 96, 128 or 160 in isolation: a 16-byte remainder after 64-byte steps
 * went scalar).  Beyond it kp is read at run time and gcc's loop takes 64
 * bytes a step and finishes a remainder with a 32-byte step and then scalar
 * code: a multiple of 64 (with the variable bound, padding 144 taps to 192
 * rather than 160 took the 16-channel layers from 0.92 to 0.69 ms). */
static int i8_kp(const nj_export_layer *l)
{
    const int kn = l->cin * l->k * l->k;
    if (kn <= 48) return kn <= 32 ? 32 : 48;
    const int align = (kn + 31) / 32 * 32 <= NJ_I8_KP_CONST ? 32 : 64;
    return (kn + align - 1) / align * align;
}

/* int8: rows of the layer's kernel (1 for the sigmoid head, else 4). */
static int i8_rows(const nj_export_layer *l)
{
    return l->act == NJ_ACT_SIGMOID ? 1 : I8_OB;
}

/* int8: bytes of one stacked input row (the runtime's nd_stack: iw + 2 pad
 * pixels of k * cin bytes). */
static long i8_stack_row(const nj_export_layer *l, int iw)
{
    return (long)(iw + 2 * l->pad) * l->k * l->cin;
}

/* Bytes of the int8 runtime's scratch: tile stacked rows and kp bytes, then
 * the int32 sums of their output positions (a multiple of I8_PB of them,
 * cout rounded up to I8_OB apart, cp), then cp + 15 biases and multipliers
 * repeating with period cp (for the requantisation's 16-sum steps). */
static long i8_col_bytes(const nj_export_layer *l, int iw, int tile)
{
    const long ow = (iw + 2 * l->pad - l->k) / l->stride + 1;
    const long pos = (tile * ow + I8_PB - 1) / I8_PB * I8_PB, cp = (l->cout + I8_OB - 1) / I8_OB * I8_OB;
    return (tile * i8_stack_row(l, iw) + i8_kp(l) + 63) / 64 * 64 + 4L * pos * cp + 8L * (cp + 15);
}

/* Positions per block of work.  f32: the data a block reads is kept near
 * 64 KiB, so it stays in the core's L2 while every output-channel block
 * reads it: stride 1, the padded input rows (cin values per position);
 * stride 2, the input-tap panel (cin * k * k per position); 32..512
 * positions, a multiple of 32; never much beyond the layer's positions.
 * int8: output rows (at least one) whose stacked input rows fill 256 KiB:
 * each block of 4 weight rows is read once per block of output rows, and
 * the big decoder layers' weights (up to 864 KiB) stream from L2/L3 (the
 * per-layer times at 320x96 summed, one run each on a loaded machine, at
 * the time: 128 KiB 8.3 ms, 256 KiB 7.5, 512 KiB 7.6). */
static int layer_tile(const nj_export_layer *l, int int8, long npos, int ih, int iw)
{
    if (int8) {
        const int oh = (ih + 2 * l->pad - l->k) / l->stride + 1;
        long rows = 262144 / i8_stack_row(l, iw);
        return (int)(rows < 1 ? 1 : (rows > oh ? oh : rows));
    }
    const long budget = 65536, unit = 32, lo = unit, hi = 512;
    const long row = l->stride == 1 ? 4L * l->cin : 4L * l->cin * l->k * l->k;
    long t = budget / row / unit * unit;
    t = t < lo ? lo : (t > hi ? hi : t);
    long need = (npos + unit - 1) / unit * unit;
    return (int)(t < need ? t : need);
}

/* Bytes of the f32 runtime's col scratch: the padded input (stride 1) or the panel. */
static long f32_col_bytes(const nj_export_layer *l, int ih, int iw, int tile)
{
    if (l->stride != 1) return 4L * l->cin * l->k * l->k * tile;
    const long wp = iw + 2 * l->pad;
    return 4L * ((long)l->cin * (ih + 2 * l->pad) * wp + 64 + 2 * wp);   /* ND_SLACK(wp) */
}

/* f32 weights packed for nd_kernel: blocks of F32_OB output channels, tap-major. */
static float *pack_f32(const nj_export_layer *l, size_t *n)
{
    const long kn = (long)l->cin * l->k * l->k, blocks = (l->cout + F32_OB - 1) / F32_OB;
    *n = (size_t)(blocks * F32_OB * kn);
    float *p = calloc(*n, sizeof *p);
    for (int o = 0; p && o < l->cout; o++)
        for (long j = 0; j < kn; j++) p[(o / F32_OB) * kn * F32_OB + j * F32_OB + o % F32_OB] = l->w[o * kn + j];
    return p;
}

/* int8 weights for the integer kernel: rows of kp taps in (kx, ky, ci) order,
 * the order of the runtime's row stacks. */
static int8_t *pack_i8(const nj_export_layer *l, size_t *n)
{
    const int kp = i8_kp(l), k = l->k, kk = k * k, rows = (l->cout + I8_OB - 1) / I8_OB * I8_OB;
    *n = (size_t)rows * kp;
    int8_t *p = calloc(*n, 1);
    for (int o = 0; p && o < l->cout; o++)
        for (int ci = 0; ci < l->cin; ci++)
            for (int ky = 0; ky < k; ky++)
                for (int kx = 0; kx < k; kx++)
                    p[(size_t)o * kp + (kx * k + ky) * l->cin + ci] = l->q[((size_t)o * l->cin + ci) * kk + ky * k + kx];
    return p;
}

/* Round half away from zero, saturated to int32 (the bias at the accumulator's scale). */
static int32_t round_i32(double v)
{
    double r = v >= 0 ? floor(v + 0.5) : -floor(-v + 0.5);
    return (int32_t)(r > 2147483647.0 ? 2147483647.0 : (r < -2147483647.0 ? -2147483647.0 : r));
}

static int put_layer_arrays(FILE *f, const nj_export_net *net, int unit)
{
    const nj_export_layer *l = &net->layers[unit];
    char id[80], nm[100];
    ident(l->name, id, sizeof id);
    size_t n = 0;
    fprintf(f, "/* %s: %d -> %d channels, %dx%d, stride %d, %s padding */\n", l->name, l->cin, l->cout, l->k,
            l->k, l->stride, l->pad_mode == NJ_PAD_REFLECT ? "reflection" : "zero");
    snprintf(nm, sizeof nm, "nd_w_%s", id);
    if (net->int8) {
        int8_t *q = pack_i8(l, &n);
        int32_t *bias = malloc(sizeof *bias * (size_t)l->cout);
        float *mul = malloc(sizeof *mul * (size_t)l->cout);
        if (!q || !bias || !mul) {
            free(q);
            free(bias);
            free(mul);
            return -1;
        }
        put_int8s(f, nm, q, n);
        const float sx = net->in_scale_of[unit];
        const long kn = (long)l->cin * l->k * l->k;
        for (int o = 0; o < l->cout; o++) {   /* activations come as q + 128: take 128 * sum(w) off the bias */
            long sw = 0;
            for (long j = 0; j < kn; j++) sw += l->q[o * kn + j];
            mul[o] = l->scale[o] * sx;
            bias[o] = round_i32((double)round_i32((double)l->b[o] / mul[o]) - 128.0 * (double)sw);
        }
        snprintf(nm, sizeof nm, "nd_b_%s", id);
        put_int32s(f, nm, bias, (size_t)l->cout);
        snprintf(nm, sizeof nm, "nd_m_%s", id);
        put_floats(f, "float", nm, mul, (size_t)l->cout);
        free(q);
        free(bias);
        free(mul);
        return 0;
    }
    float *w = pack_f32(l, &n);
    if (!w) return -1;
    put_floats(f, "float", nm, w, n);
    free(w);
    snprintf(nm, sizeof nm, "nd_b_%s", id);
    put_floats(f, "float", nm, l->b, (size_t)l->cout);
    if (l->groups) {
        snprintf(nm, sizeof nm, "nd_g_%s", id);
        put_floats(f, "float", nm, l->gamma, (size_t)l->cout);
        snprintf(nm, sizeof nm, "nd_e_%s", id);
        put_floats(f, "float", nm, l->beta, (size_t)l->cout);
    }
    return 0;
}

static int act_code(const nj_export_layer *l)
{
    return l->act == NJ_ACT_ELU ? 1 : (l->act == NJ_ACT_SIGMOID ? 2 : 0);
}

static void put_layer_entry(FILE *f, const nj_export_net *net, int unit, int tile, int up, int last)
{
    const nj_export_layer *l = &net->layers[unit];
    char id[80];
    ident(l->name, id, sizeof id);
    if (net->int8) {
        fprintf(f, "    {nd_w_%s, nd_b_%s, nd_m_%s, ", id, id, id);
        put_float(f, l->act == NJ_ACT_SIGMOID ? 1.0f : 1.0f / net->out_scale[unit]);
        char kern[40];
        nj_export_i8_kernel_name(i8_kp(l), i8_rows(l), kern, sizeof kern);
        fprintf(f, ", %d, %d, %d, %d, %d, %d, %d, %d, %d, %d, %s}%s /* %s */\n", l->cin, l->cout, l->k, l->stride,
                l->pad, l->pad_mode == NJ_PAD_REFLECT, act_code(l), i8_kp(l), tile, up, kern, last ? "" : ",", l->name);
        return;
    }
    fprintf(f, "    {nd_w_%s, nd_b_%s, ", id, id);
    if (l->groups) fprintf(f, "nd_g_%s, nd_e_%s, ", id, id);
    else fputs("0, 0, ", f);
    fprintf(f, "%d, %d, %d, %d, %d, %d, %d, %d, %d, %d}%s /* %s */\n", l->groups, l->cin, l->cout, l->k, l->stride,
            l->pad, l->pad_mode == NJ_PAD_REFLECT, act_code(l), tile, up, last ? "" : ",", l->name);
}

/* ---- the run function --------------------------------------------------------- */

typedef struct emitter {
    FILE *f;
    const nj_export_net *net;
    const c_paths *p;
    nj_scratch_plan plan;     /* in bytes */
    int index[NJ_MAX_UNITS];  /* unit → row of nd_layers */
    int tile[NJ_MAX_UNITS];   /* unit → positions per block of work */
    int up[NJ_MAX_UNITS];     /* unit → 1: upsamples its first input as it reads it (each dec[i][1]) */
    int failed;
} emitter;

/* Buffers start on 64-byte boundaries (a cache line, and any vector's alignment). */
static long alloc_buf(emitter *e, long bytes)
{
    long off = nj_plan_alloc(&e->plan, (bytes + 63) / 64 * 64);
    if (off < 0) e->failed = 1;
    return off < 0 ? 0 : off;
}

/* The C expression of the buffer at byte offset off. */
static const char *buf(const emitter *e, long off, char *s, size_t n)
{
    if (e->net->int8) snprintf(s, n, "sb + %ld", off);
    else snprintf(s, n, "scratch + %ld", off / 4);
    return s;
}

/* Bytes of one activation value. */
static long act_bytes(const emitter *e)
{
    return e->net->int8 ? 1 : 4;
}

/* Emits one layer call; returns the output's offset (or -1 for the depth array). */
static long emit_layer(emitter *e, int unit, long in, int c0, long skip, int h, int w, int to_depth)
{
    const nj_export_layer *l = &e->net->layers[unit];
    int oh = (h + 2 * l->pad - l->k) / l->stride + 1, ow = (w + 2 * l->pad - l->k) / l->stride + 1;
    const int tile = e->tile[unit];
    long out = to_depth ? -1 : alloc_buf(e, act_bytes(e) * l->cout * oh * ow);
    long col = alloc_buf(e, e->net->int8 ? i8_col_bytes(l, w, tile) : f32_col_bytes(l, h, w, tile));
    char a[64], b[64], c[64], d[64];
    fprintf(e->f, "    nd_layer_run(&nd_layers[%d], %s, %d, %s, %d, %d,\n                 ", e->index[unit],
            buf(e, in, a, sizeof a), c0, skip >= 0 ? buf(e, skip, b, sizeof b) : "0", h, w);
    if (to_depth) fputs(e->net->int8 ? "0, depth, " : "depth, ", e->f);
    else fprintf(e->f, "%s, %s", buf(e, out, c, sizeof c), e->net->int8 ? "0, " : "");
    fprintf(e->f, "%s); /* %s -> %dx%dx%d */\n", buf(e, col, d, sizeof d), l->name, l->cout, oh, ow);
    nj_plan_free(&e->plan, col);
    return out;
}

static void emit_run(emitter *e)
{
    const nj_model *m = e->net->model;
    const int S = m->cfg.stages, H = e->net->height, W = e->net->width;
    long feat[NJ_MAX_STAGES], x = alloc_buf(e, act_bytes(e) * 3L * H * W), cur;
    char a[64];
    fprintf(e->f, "int %sdepth_run(const unsigned char *rgb, float *scratch, float *depth, float *disparity)\n{\n",
            e->p->lower);
    if (e->net->int8) fputs("    unsigned char *sb = (unsigned char *)scratch;\n", e->f);
    fputs("    if (!rgb || !scratch || !depth) return -1;\n", e->f);
    fprintf(e->f, "    nd_input(rgb, %s);\n", buf(e, x, a, sizeof a));
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
        h *= 2;   /* dec[i][1] upsamples d as it pads (f32) or stacks (int8) its input */
        w *= 2;
        cur = emit_layer(e, m->dec[i][1], d, c, i > 0 ? feat[i - 1] : -1, h, w, 0);
        nj_plan_free(&e->plan, d);
        if (i > 0) nj_plan_free(&e->plan, feat[i - 1]);
    }
    emit_layer(e, m->head[0], cur, c, -1, h, w, 1);
    fputs("    nd_output(depth, disparity);\n    return 0;\n}\n", e->f);
}

/* Input height and width of each unit on the depth path at the export size. */
static void layer_sizes(const nj_export_net *net, int *ih, int *iw)
{
    const nj_model *m = net->model;
    int h = net->height, w = net->width;
    for (int i = 0; i < m->cfg.stages; i++) {
        ih[m->enc[i][0]] = h;
        iw[m->enc[i][0]] = w;
        h /= 2;
        w /= 2;
        ih[m->enc[i][1]] = h;
        iw[m->enc[i][1]] = w;
    }
    for (int i = m->cfg.stages - 1; i >= 0; i--) {
        ih[m->dec[i][0]] = h;
        iw[m->dec[i][0]] = w;
        h *= 2;
        w *= 2;
        ih[m->dec[i][1]] = h;
        iw[m->dec[i][1]] = w;
    }
    ih[m->head[0]] = h;
    iw[m->head[0]] = w;
}

/* int8: byte -> quantised standardised input + 128 (the runtime's bytes),
 * computed as the f32 runtime's nd_input does. */
static void put_input_table(FILE *f, const nj_export_net *net)
{
    int t[256];
    const float scale = 1.0f / NJ_MODEL_INPUT_STD, shift = -NJ_MODEL_INPUT_MEAN / NJ_MODEL_INPUT_STD;
    for (int v = 0; v < 256; v++) {
        float x = (scale * ((float)v / 255.0f) + shift) / net->in_scale;
        long q = lroundf(x);
        t[v] = (int)(q > 127 ? 127 : (q < -127 ? -127 : q)) + 128;
    }
    fputs("/* byte -> int8 of the standardised input at scale ", f);
    put_float(f, net->in_scale);
    fputs(", + 128 */\nstatic const unsigned char nd_in_u[256] = {\n", f);
    for (int v = 0; v < 256; v++) fprintf(f, "%s%d%s", v % 24 == 0 ? "    " : "", t[v], v % 24 == 23 || v == 255 ? ",\n" : ",");
    fputs("};\n", f);
    fputc('\n', f);
}

/* ---- files ----------------------------------------------------------------------- */

static int write_source(emitter *e, const c_paths *p, const char *ckpt_name)
{
    FILE *f = e->f;
    const nj_export_net *net = e->net;
    int order[4 * NJ_MAX_STAGES + 1], n = depth_path(net->model, order), ih[NJ_MAX_UNITS], iw[NJ_MAX_UNITS];
    for (int i = 0; i < NJ_MAX_UNITS; i++) e->index[i] = -1;
    layer_sizes(net, ih, iw);
    for (int i = 0; i < net->model->cfg.stages; i++) e->up[net->model->dec[i][1]] = 1;
    for (int i = 0; i < n; i++) {
        e->index[order[i]] = i;
        const nj_export_layer *l = &net->layers[order[i]];
        e->tile[order[i]] = layer_tile(l, net->int8, layer_positions(l, ih[order[i]], iw[order[i]]), ih[order[i]],
                                       iw[order[i]]);
    }
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
    if (net->int8) put_input_table(f, net);
    nj_i8_kernel kern[4 * NJ_MAX_STAGES + 1];   /* the int8 kernels the layers name, each once */
    char names[4 * NJ_MAX_STAGES + 1][40];
    int nkern = 0;
    for (int i = 0; net->int8 && i < n; i++) {
        const nj_export_layer *l = &net->layers[order[i]];
        nj_export_i8_kernel_name(i8_kp(l), i8_rows(l), names[nkern], sizeof names[nkern]);
        int k = 0;
        while (k < nkern && strcmp(names[k], names[nkern])) k++;
        if (k == nkern) kern[nkern++] = (nj_i8_kernel){i8_kp(l), i8_rows(l)};
    }
    nj_export_c_runtime(f, net->int8, p->upper, p->lower, kern, nkern);
    fputs("/* ---- weights (batch norm folded into the convs) ---------------------------- */\n\n", f);
    for (int i = 0; i < n; i++)
        if (put_layer_arrays(f, net, order[i])) return -1;
    fprintf(f, "\nstatic const struct nd_layer nd_layers[%d] = {\n", n);
    for (int i = 0; i < n; i++) put_layer_entry(f, net, order[i], e->tile[order[i]], e->up[order[i]], i + 1 == n);
    fputs("};\n\n", f);
    emit_run(e);
    return 0;
}

static const char INT8_DOC[] =
    " *\n"
    " * Integer arithmetic (int8 weights and activations, int32 sums), after Jacob et al.\n"
    " * 2018 (\"Quantization and training of neural networks for efficient integer-\n"
    " * arithmetic-only inference\"), with symmetric scales (zero point 0):\n"
    " *   real weight w = qw * sw[o]   (sw per output channel: max |w[o,:]| / 127)\n"
    " *   real activation x = qx * sx  (sx per layer output, from %d frames of the training\n"
    " *                                 data: the %g-th percentile of |x| / 127)\n"
    " *   acc = sum(qw * qx) + qb[o]   (int32; qb = round(bias / (sw[o] * sx_in)))\n"
    " *   v = (float)acc * m[o]        (m = sw[o] * sx_in: the real pre-activation)\n"
    " *   q_out = clamp(round_half_away(act(v) / sx_out), -127, 127)\n"
    " * act is ELU with e^v computed by additions and multiplications only (no libm),\n"
    " * and the head's sigmoid the same way, so the float steps give the same bits on\n"
    " * every IEEE-754 target: compile without FP contraction (-ffp-contract=off, the\n"
    " * default of gcc -std=c99/c11) for results bit-identical to other targets.\n"
    " * Activations are stored channels-last (NHWC) in the scratch array as the bytes\n"
    " * q + 128 (the sums are taken as u8 x s8 products, and 128 * sum(qw) comes off qb).\n";

static void write_header(FILE *f, const nj_export_net *net, const c_paths *p, long scratch, const char *ckpt)
{
    const nj_model_config *mc = &net->model->cfg;
    const char *P = p->upper;
    char mean[32], std[32];
    nj_export_float_text(NJ_MODEL_INPUT_MEAN, mean, sizeof mean);
    nj_export_float_text(NJ_MODEL_INPUT_STD, std, sizeof std);
    fprintf(f,
        "/* %s.h - depth from one camera frame; generated by nightjar %s export from %s.\n"
        " *\n"
        " * Network: nightjar depth net (%d stages, width %g, %s normalisation%s),\n"
        " * finest disparity output; %s.\n"
        " * Trained on %dx%d frames.\n",
        p->base, NJ_VERSION, ckpt, mc->stages, (double)mc->width,
        mc->norm == NJ_NORM_BATCH ? "batch" : (mc->norm == NJ_NORM_GROUP ? "group" : "no"),
        mc->norm == NJ_NORM_BATCH ? " folded into the convs" : "",
        net->int8 ? "int8 weights and activations" : "float32", net->cfg->width, net->cfg->height);
    if (net->int8) fprintf(f, INT8_DOC, net->calibrated, (double)net->percentile);
    fprintf(f,
        " *\n"
        " * Input: one %dx%d frame, 8-bit RGB interleaved (R, G, B per pixel), rows top to\n"
        " *   bottom without padding: rgb[(y * %sDEPTH_WIDTH + x) * 3 + c].  Resize the\n"
        " *   camera image to exactly this size first, keeping the field of view used in training.\n"
        " * Normalisation (done inside): v = byte / 255, x = (v - %s) / %s per channel.\n"
        " * Output: depth[y * %sDEPTH_WIDTH + x],\n"
        " *   %s, between\n"
        " *   %sDEPTH_MIN and %sDEPTH_MAX; optionally the network's disparity\n"
        " *   s in (0, 1), with depth = 1 / (1/MAX + (1/MIN - 1/MAX) * s).\n"
        " * Memory: the caller passes a scratch array of %sDEPTH_SCRATCH_FLOATS floats\n"
        " *   (%sDEPTH_SCRATCH_BYTES bytes); nothing is allocated.  One call at a time per\n"
        " *   scratch array; no threads.  Link with libm (-lm).\n"
        " * Names: every external name starts with \"%s\" (functions) or \"%s\" (macros).\n"
        " */\n",
        net->width, net->height, P, mean, std, P,
        net->metric ? "in metres (the model was trained on rectified stereo pairs)"
                    : "in the model's own units: trained on monocular video, so the depth\n"
                      " *   is right only up to one unknown scale factor (not metres)",
        P, P, P, P, p->lower, P);
    fprintf(f, "#ifndef %s\n#define %s\n\n", p->guard, p->guard);
    fprintf(f, "#define %sDEPTH_WIDTH %d\n#define %sDEPTH_HEIGHT %d\n", P, net->width, P, net->height);
    fprintf(f, "#define %sDEPTH_MIN ", P);
    put_float(f, net->depth_range.near);
    fprintf(f, "\n#define %sDEPTH_MAX ", P);
    put_float(f, net->depth_range.far);
    fprintf(f, "\n#define %sDEPTH_SCRATCH_FLOATS %ldL\n", P, (scratch + 3) / 4);
    fprintf(f, "#define %sDEPTH_SCRATCH_BYTES (%sDEPTH_SCRATCH_FLOATS * (long)sizeof(float))\n\n", P, P);
    fprintf(f, "/* Computes the depth map of one frame.  rgb: the input above; scratch: at least\n"
            " * %sDEPTH_SCRATCH_FLOATS floats; depth: WIDTH * HEIGHT floats; disparity: NULL or\n"
            " * WIDTH * HEIGHT floats.  Returns 0, or -1 when rgb, scratch or depth is NULL. */\n"
            "int %sdepth_run(const unsigned char *rgb, float *scratch, float *depth, float *disparity);\n\n",
            P, p->lower);
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

int nj_export_c(const nj_export_net *net, const char *path, const char *prefix, long *bytes, char *err,
                size_t errlen)
{
    c_paths p;
    if (make_paths(path, &p, err, errlen) || set_prefix(prefix ? prefix : NJ_EXPORT_PREFIX, &p, err, errlen))
        return -1;
    if (net->int8 && !net->calibrated) {
        snprintf(err, errlen, "--format c --weights int8 needs --calibrate DATASET (int8 activations need "
                 "their scales measured on frames)");
        return -1;
    }
    for (int i = 0; net->int8 && i < net->nlayers; i++)
        if (net->layers[i].groups) {
            snprintf(err, errlen, "--format c --weights int8: layer %s has group norm, whose per-frame statistics "
                     "the integer runtime does not compute; export f32", net->layers[i].name);
            return -1;
        }
    char ckpt[128];
    source_name(net->source, ckpt, sizeof ckpt);
    emitter e;
    memset(&e, 0, sizeof e);
    e.net = net;
    e.p = &p;
    nj_atomic_file src, hdr;
    if (nj_atomic_open(&src, p.c, err, errlen)) return -1;
    e.f = src.f;
    if (write_source(&e, &p, ckpt)) e.failed = 1;
    if (e.failed) snprintf(err, errlen, "%s: scratch plan overflow or out of memory", p.c);
    int ok = !e.failed && !ferror(src.f);
    if (nj_atomic_close(&src, ok, err, errlen) || !ok) return -1;
    if (nj_atomic_open(&hdr, p.h, err, errlen)) return -1;
    write_header(hdr.f, net, &p, e.plan.peak, ckpt);
    if (nj_atomic_close(&hdr, !ferror(hdr.f), err, errlen)) return -1;
    *bytes = file_size(p.c) + file_size(p.h);
    return 0;
}

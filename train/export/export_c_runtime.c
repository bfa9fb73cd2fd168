/* train/export/export_c_runtime.c — the small runtime every emitted depth .c file
 * carries (C99, libm only, no allocation, no threads), and the first-fit
 * planner that places the network's buffers in the caller's scratch array. */
#include "train/export/export_c.h"
#include "train/export/export.h"
#include <string.h>

/* Stands in the runtime's text for the model's normalisation eps, which
 * nj_export_c_runtime prints from NJ_MODEL_NORM_EPS (train/model/model.h). */
#define NORM_EPS "@NORM_EPS@"

static const char *const RUNTIME[] = {
    "/* ---- runtime ---------------------------------------------------------- */",
    "",
    "enum { ND_ACT_NONE = 0, ND_ACT_ELU = 1, ND_ACT_SIGMOID = 2 };",
    "",
    "/* One conv layer: conv (zero or reflection padding) + bias, optional group",
    " * norm, optional activation.  Weights are cout x cin x k x k, row-major;",
    " * with per-output-channel scales the conv is bias[o] + scale[o] * sum(w * x). */",
    "struct nd_layer {",
    "    const nd_weight *w;",
    "    const float *scale;",
    "    const float *bias;",
    "    const float *gamma, *beta;",
    "    int groups, cin, cout, k, stride, pad, reflect, act;",
    "};",
    "",
    "/* Source index of v along an axis of n values: reflected, or -1 (zero padding). */",
    "static int nd_src(int v, int n, int reflect)",
    "{",
    "    if (v >= 0 && v < n) return v;",
    "    if (!reflect) return -1;",
    "    return v < 0 ? -v : 2 * n - 2 - v;",
    "}",
    "",
    "/* col[x] = padded input row `src` (iw values) at x * stride + off, x in [0, ow). */",
    "static void nd_gather_row(float *restrict col, int ow, const float *restrict src, int iw, int stride,",
    "                          int off, int reflect)",
    "{",
    "    int lo = 0, hi = ow, x, j;",
    "    while (lo < ow && lo * stride + off < 0) lo++;",
    "    while (hi > lo && (hi - 1) * stride + off >= iw) hi--;",
    "    for (x = 0; x < lo; x++) col[x] = (j = nd_src(x * stride + off, iw, reflect)) >= 0 ? src[j] : 0.0f;",
    "    if (stride == 1)",
    "        for (x = lo; x < hi; x++) col[x] = src[x + off];",
    "    else",
    "        for (x = lo; x < hi; x++) col[x] = src[x * stride + off];",
    "    for (x = hi; x < ow; x++) col[x] = (j = nd_src(x * stride + off, iw, reflect)) >= 0 ? src[j] : 0.0f;",
    "}",
    "",
    "/* The cin * k * k input rows (tap-major, like the weights) that output row oy reads. */",
    "static void nd_gather(const struct nd_layer *l, const float *x0, int c0, const float *x1, int ih, int iw,",
    "                      int oy, int ow, float *col)",
    "{",
    "    const long plane = (long)ih * iw;",
    "    int i, ky, kx, x;",
    "    for (i = 0; i < l->cin; i++) {",
    "        const float *src = i < c0 ? x0 + i * plane : x1 + (i - c0) * plane;",
    "        for (ky = 0; ky < l->k; ky++) {",
    "            const int sy = nd_src(oy * l->stride + ky - l->pad, ih, l->reflect);",
    "            for (kx = 0; kx < l->k; kx++) {",
    "                float *dst = col + ((long)(i * l->k + ky) * l->k + kx) * ow;",
    "                if (sy < 0)",
    "                    for (x = 0; x < ow; x++) dst[x] = 0.0f;",
    "                else",
    "                    nd_gather_row(dst, ow, src + (long)sy * iw, iw, l->stride, kx - l->pad, l->reflect);",
    "            }",
    "        }",
    "    }",
    "}",
    "",
    "/* Four output rows at once: a_r[x] += sum_j w_r[j] * col[j * n + x]. */",
    "static void nd_dot4(float *restrict a0, float *restrict a1, float *restrict a2, float *restrict a3,",
    "                    const nd_weight *w0, long kn, const float *restrict col, int n)",
    "{",
    "    const nd_weight *w1 = w0 + kn, *w2 = w1 + kn, *w3 = w2 + kn;",
    "    long j;",
    "    int x;",
    "    for (j = 0; j < kn; j++) {",
    "        const float *c = col + j * n;",
    "        const float v0 = (float)w0[j], v1 = (float)w1[j], v2 = (float)w2[j], v3 = (float)w3[j];",
    "        for (x = 0; x < n; x++) {",
    "            const float cx = c[x];",
    "            a0[x] += v0 * cx;",
    "            a1[x] += v1 * cx;",
    "            a2[x] += v2 * cx;",
    "            a3[x] += v3 * cx;",
    "        }",
    "    }",
    "}",
    "",
    "/* One output row: a[x] += sum_j w[j] * col[j * n + x]. */",
    "static void nd_dot1(float *restrict a, const nd_weight *w, long kn, const float *restrict col, int n)",
    "{",
    "    long j;",
    "    int x;",
    "    for (j = 0; j < kn; j++) {",
    "        const float *c = col + j * n;",
    "        const float v = (float)w[j];",
    "        for (x = 0; x < n; x++) a[x] += v * c[x];",
    "    }",
    "}",
    "",
    "/* Group normalisation (Wu & He 2018) of cout planes of hw values. */",
    "static void nd_group_norm(const struct nd_layer *l, float *y, long hw)",
    "{",
    "    const int cpg = l->cout / l->groups;",
    "    const long n = (long)cpg * hw;",
    "    int g, c;",
    "    long i;",
    "    for (g = 0; g < l->groups; g++) {",
    "        float *p = y + (long)g * n;",
    "        double s = 0.0, q = 0.0, mu;",
    "        float mean, invstd;",
    "        for (i = 0; i < n; i++) s += p[i];",
    "        mu = s / (double)n;",
    "        for (i = 0; i < n; i++) q += (p[i] - mu) * (p[i] - mu);",
    "        mean = (float)mu;",
    "        invstd = (float)(1.0 / sqrt(q / (double)n + (double)" NORM_EPS "));",
    "        for (c = 0; c < cpg; c++) {",
    "            const float alpha = l->gamma[g * cpg + c] * invstd;",
    "            const float shift = l->beta[g * cpg + c] - mean * alpha;",
    "            float *pc = p + (long)c * hw;",
    "            for (i = 0; i < hw; i++) pc[i] = pc[i] * alpha + shift;",
    "        }",
    "    }",
    "}",
    "",
    "static float nd_sigmoid(float v)",
    "{",
    "    float e;",
    "    if (v >= 0.0f) return 1.0f / (1.0f + expf(-v));",
    "    e = expf(v);",
    "    return e / (1.0f + e);",
    "}",
    "",
    "static void nd_activate(int act, float *y, long n)",
    "{",
    "    long i;",
    "    if (act == ND_ACT_ELU)",
    "        for (i = 0; i < n; i++) y[i] = y[i] > 0.0f ? y[i] : expm1f(y[i]);",
    "    else if (act == ND_ACT_SIGMOID)",
    "        for (i = 0; i < n; i++) y[i] = nd_sigmoid(y[i]);",
    "}",
    "",
    "/* Runs layer l on an ih x iw input of cin planes: the first c0 planes from",
    " * x0, the rest from x1 (a skip connection); output planes into y.  col:",
    " * scratch for cin * k * k * ow floats (one output row's input taps). */",
    "static void nd_layer_run(const struct nd_layer *l, const float *x0, int c0, const float *x1,",
    "                         int ih, int iw, float *y, float *col)",
    "{",
    "    const int oh = (ih + 2 * l->pad - l->k) / l->stride + 1;",
    "    const int ow = (iw + 2 * l->pad - l->k) / l->stride + 1;",
    "    const long kn = (long)l->cin * l->k * l->k, out_plane = (long)oh * ow;",
    "    int o, oy, x;",
    "    for (oy = 0; oy < oh; oy++) {",
    "        float *row = y + (long)oy * ow;",
    "        nd_gather(l, x0, c0, x1, ih, iw, oy, ow, col);",
    "        for (o = 0; o < l->cout; o++)",
    "            for (x = 0; x < ow; x++) row[o * out_plane + x] = 0.0f;",
    "        for (o = 0; o + 4 <= l->cout; o += 4)",
    "            nd_dot4(row + o * out_plane, row + (o + 1) * out_plane, row + (o + 2) * out_plane,",
    "                    row + (o + 3) * out_plane, l->w + o * kn, kn, col, ow);",
    "        for (; o < l->cout; o++) nd_dot1(row + o * out_plane, l->w + o * kn, kn, col, ow);",
    "        for (o = 0; o < l->cout; o++) {",
    "            const float s = l->scale ? l->scale[o] : 1.0f, b = l->bias[o];",
    "            float *a = row + o * out_plane;",
    "            for (x = 0; x < ow; x++) a[x] = a[x] * s + b;",
    "        }",
    "    }",
    "    if (l->groups) nd_group_norm(l, y, out_plane);",
    "    nd_activate(l->act, y, (long)l->cout * out_plane);",
    "}",
    "",
    "/* Nearest-neighbour x2 upsampling of c planes h x w. */",
    "static void nd_up2(const float *x, int c, int h, int w, float *y)",
    "{",
    "    int ch, r, col;",
    "    for (ch = 0; ch < c; ch++)",
    "        for (r = 0; r < 2 * h; r++) {",
    "            const float *src = x + ((long)ch * h + r / 2) * w;",
    "            float *dst = y + ((long)ch * 2 * h + r) * 2 * w;",
    "            for (col = 0; col < 2 * w; col++) dst[col] = src[col / 2];",
    "        }",
    "}",
    "",
    "/* Interleaved 8-bit RGB -> standardised planar floats (x/255 - mean) / std. */",
    "static void nd_input(const unsigned char *rgb, float *x)",
    "{",
    "    const long n = (long)NIGHTJAR_DEPTH_WIDTH * NIGHTJAR_DEPTH_HEIGHT;",
    "    long p;",
    "    int c;",
    "    for (c = 0; c < 3; c++)",
    "        for (p = 0; p < n; p++) x[c * n + p] = ND_IN_SCALE * ((float)rgb[p * 3 + c] / 255.0f) + ND_IN_SHIFT;",
    "}",
    "",
    "/* Sigmoid disparity (in depth[]) -> depth by inverse-depth interpolation. */",
    "static void nd_output(float *depth, float *disparity)",
    "{",
    "    const long n = (long)NIGHTJAR_DEPTH_WIDTH * NIGHTJAR_DEPTH_HEIGHT;",
    "    long p;",
    "    for (p = 0; p < n; p++) {",
    "        const float s = depth[p];",
    "        if (disparity) disparity[p] = s;",
    "        depth[p] = 1.0f / (ND_DISP_LO + ND_DISP_SPAN * s);",
    "    }",
    "}",
    "",
};

void nj_export_c_runtime(FILE *f, int int8)
{
    char eps[32];
    nj_export_float_text(NJ_MODEL_NORM_EPS, eps, sizeof eps);
    fprintf(f, "typedef %s nd_weight;\n\n", int8 ? "signed char" : "float");
    for (size_t i = 0; i < sizeof RUNTIME / sizeof *RUNTIME; i++) {
        const char *line = RUNTIME[i], *at = strstr(line, NORM_EPS);
        if (at)
            fprintf(f, "%.*s%sf%s\n", (int)(at - line), line, eps, at + strlen(NORM_EPS));
        else
            fprintf(f, "%s\n", line);
    }
}

/* ---- scratch planner ------------------------------------------------------ */

long nj_plan_alloc(nj_scratch_plan *p, long size)
{
    if (p->n == NJ_PLAN_MAX) return -1;
    long at = 0;
    for (;;) {   /* lowest offset whose [at, at+size) meets no live buffer */
        int moved = 0;
        for (int i = 0; i < p->n; i++)
            if (at < p->off[i] + p->size[i] && p->off[i] < at + size) {
                at = p->off[i] + p->size[i];
                moved = 1;
            }
        if (!moved) break;
    }
    p->off[p->n] = at;
    p->size[p->n] = size;
    p->n++;
    if (at + size > p->peak) p->peak = at + size;
    return at;
}

void nj_plan_free(nj_scratch_plan *p, long off)
{
    for (int i = 0; i < p->n; i++)
        if (p->off[i] == off) {
            p->off[i] = p->off[p->n - 1];
            p->size[i] = p->size[p->n - 1];
            p->n--;
            return;
        }
}

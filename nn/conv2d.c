/* nn/conv2d.c — 2-D convolution, forward and backward: the op, its shape
 * checks, and the choice between the direct kernels (nn/conv_direct.c, for the
 * geometries nj_dconv_suits picks, forward and backward decided apart) and
 * im2col + sgemm (Chellapilla, Puri & Simard 2006), which this file implements
 * for the rest.
 *
 * The output of each sample is cut into bands of whole output rows.  A band's
 * im2col tile (Cin·kh·kw rows × band pixels) is built in per-thread scratch
 * sized for the L2 cache, and multiplied by the weights.  Reflection
 * padding is an index mapping inside im2col, and the same mapping scatters the
 * gradient back in col2im.  A 1×1 stride-1 unpadded conv uses the input itself
 * as the column matrix.
 *
 * Threads (OpenMP, one level) take (sample, band) items; OpenBLAS runs
 * single-threaded inside.  Backward: dW goes into per-thread partials summed at
 * the end; dx is scattered in two phases (even bands, then odd bands), and the
 * band height is chosen so that two bands of the same parity never touch the
 * same input row.  Outputs and dx therefore do not depend on the thread count;
 * dW only through the rounding of the partial sums.
 */
#include "nn/conv_direct.h"
#include "nn/ops.h"
#include "nn/prof.h"
#include <cblas.h>
#include <omp.h>
#include <string.h>

/* Target size of one im2col tile: a quarter of a 1 MiB L2 cache. */
#define COL_TILE_BYTES (256 * 1024)
/* Below this many flops a conv runs on one thread. */
#define PAR_FLOPS 2000000.0

typedef struct conv_geom {
    int n, cin, h, w, cout, kh, kw, stride, pad, reflect;
    int oh, ow, k;          /* k = cin·kh·kw, the GEMM inner size */
    int band, nbands;       /* output rows per band, bands per sample */
    int direct;             /* 1×1, stride 1, no padding: no im2col */
} conv_geom;

static inline int reflect_index(int i, int n)
{
    return i < 0 ? -i : (i >= n ? 2 * (n - 1) - i : i);
}

/* ceil(a / s) for s > 0 and any sign of a. */
static inline int ceil_div(int a, int s)
{
    return a >= 0 ? (a + s - 1) / s : -((-a) / s);
}

/* Input-row interval [lo, hi] touched by output rows [oy0, oy1); lo > hi if none. */
static void band_rows(const conv_geom *G, int oy0, int oy1, int *lo, int *hi)
{
    *lo = G->h; *hi = -1;
    int a = oy0 * G->stride - G->pad, b = (oy1 - 1) * G->stride - G->pad + G->kh - 1;
    for (int i = a; i <= b; i++) {
        int r = i;
        if (r < 0 || r >= G->h) {
            if (!G->reflect) continue;
            r = reflect_index(r, G->h);
        }
        if (r < *lo) *lo = r;
        if (r > *hi) *hi = r;
    }
}

/* 1 when no two bands of the same parity touch a common input row. */
static int bands_separate(const conv_geom *G, int band)
{
    int nb = (G->oh + band - 1) / band;
    if (nb <= 2) return 1;
    for (int b = 0; b < nb; b++) {
        int lo, hi;
        band_rows(G, b * band, b * band + band < G->oh ? b * band + band : G->oh, &lo, &hi);
        for (int c = b + 2; c < nb; c += 2) {
            int lo2, hi2;
            band_rows(G, c * band, c * band + band < G->oh ? c * band + band : G->oh, &lo2, &hi2);
            if (lo <= hi && lo2 <= hi2 && lo <= hi2 && lo2 <= hi) return 0;
        }
    }
    return 1;
}

static void geom_init(conv_geom *G, const nj_tensor *x, const nj_tensor *w,
                      int stride, int pad, nj_pad_mode mode)
{
    G->n = x->n; G->cin = x->c; G->h = x->h; G->w = x->w;
    G->cout = w->n; G->kh = w->h; G->kw = w->w;
    G->stride = stride; G->pad = pad; G->reflect = mode == NJ_PAD_REFLECT && pad > 0;
    G->oh = (G->h + 2 * pad - G->kh) / stride + 1;
    G->ow = (G->w + 2 * pad - G->kw) / stride + 1;
    G->k = G->cin * G->kh * G->kw;
    G->direct = G->kh == 1 && G->kw == 1 && stride == 1 && pad == 0;
    long cols = COL_TILE_BYTES / (4L * G->k);
    if (cols < 64) cols = 64;
    int band = (int)((cols + G->ow - 1) / G->ow);
    if (band > G->oh) band = G->oh;
    while (band < G->oh && !bands_separate(G, band)) band *= 2;
    G->band = band < G->oh ? band : G->oh;
    G->nbands = (G->oh + G->band - 1) / G->band;
}

/* Output columns [lo, hi) whose input column ox·s − p + kx lies inside the row. */
static void inner_span(const conv_geom *G, int kx, int *lo, int *hi)
{
    int off = kx - G->pad;
    *lo = ceil_div(-off, G->stride);
    *hi = ceil_div(G->w - off, G->stride);
    if (*lo < 0) *lo = 0;
    if (*hi > G->ow) *hi = G->ow;
    if (*hi < *lo) *hi = *lo;
}

/* One im2col row segment: dst[ox] = src[ox·s − p + kx] with padding. */
static void gather_row(const conv_geom *G, const float *src, int kx, float *dst)
{
    int lo, hi, s = G->stride, off = kx - G->pad;
    inner_span(G, kx, &lo, &hi);
    for (int ox = 0; ox < lo; ox++)
        dst[ox] = G->reflect ? src[reflect_index(ox * s + off, G->w)] : 0.0f;
    if (s == 1) {
        memcpy(dst + lo, src + lo + off, sizeof(float) * (size_t)(hi - lo));
    } else {
        for (int ox = lo; ox < hi; ox++) dst[ox] = src[ox * s + off];
    }
    for (int ox = hi; ox < G->ow; ox++)
        dst[ox] = G->reflect ? src[reflect_index(ox * s + off, G->w)] : 0.0f;
}

/* Adjoint of gather_row: dx[ox·s − p + kx] += dcol[ox]. */
static void scatter_row(const conv_geom *G, const float *dcol, int kx, float *dx)
{
    int lo, hi, s = G->stride, off = kx - G->pad;
    inner_span(G, kx, &lo, &hi);
    if (G->reflect) {
        for (int ox = 0; ox < lo; ox++) dx[reflect_index(ox * s + off, G->w)] += dcol[ox];
        for (int ox = hi; ox < G->ow; ox++) dx[reflect_index(ox * s + off, G->w)] += dcol[ox];
    }
    if (s == 1) {
        float *d = dx + off;
        #pragma omp simd
        for (int ox = lo; ox < hi; ox++) d[ox] += dcol[ox];
    } else {
        for (int ox = lo; ox < hi; ox++) dx[ox * s + off] += dcol[ox];
    }
}

/* Input row for output row oy and kernel row ky, or -1 for a zero-padded row. */
static inline int input_row(const conv_geom *G, int oy, int ky)
{
    int iy = oy * G->stride - G->pad + ky;
    if (iy >= 0 && iy < G->h) return iy;
    return G->reflect ? reflect_index(iy, G->h) : -1;
}

/* col (k × pt) for output rows [oy0, oy1) of one sample x (cin×h×w). */
static void im2col_band(const conv_geom *G, const float *x, int oy0, int oy1, float *col)
{
    size_t pt = (size_t)(oy1 - oy0) * G->ow;
    for (int c = 0; c < G->cin; c++)
        for (int ky = 0; ky < G->kh; ky++)
            for (int kx = 0; kx < G->kw; kx++) {
                float *dst = col + (size_t)((c * G->kh + ky) * G->kw + kx) * pt;
                for (int oy = oy0; oy < oy1; oy++, dst += G->ow) {
                    int iy = input_row(G, oy, ky);
                    if (iy < 0) memset(dst, 0, sizeof(float) * (size_t)G->ow);
                    else gather_row(G, x + ((size_t)c * G->h + iy) * G->w, kx, dst);
                }
            }
}

/* dx (cin×h×w of one sample) += col2im of dcol for output rows [oy0, oy1). */
static void col2im_band(const conv_geom *G, const float *dcol, int oy0, int oy1, float *dx)
{
    size_t pt = (size_t)(oy1 - oy0) * G->ow;
    for (int c = 0; c < G->cin; c++)
        for (int ky = 0; ky < G->kh; ky++)
            for (int kx = 0; kx < G->kw; kx++) {
                const float *src = dcol + (size_t)((c * G->kh + ky) * G->kw + kx) * pt;
                for (int oy = oy0; oy < oy1; oy++, src += G->ow) {
                    int iy = input_row(G, oy, ky);
                    if (iy >= 0) scatter_row(G, src, kx, dx + ((size_t)c * G->h + iy) * G->w);
                }
            }
}

static size_t tile_floats(const conv_geom *G)
{
    if (G->direct) return 0;
    size_t f = (size_t)G->k * (size_t)G->band * (size_t)G->ow;
    return (f + 15) / 16 * 16; /* keep every thread's tile on its own cache lines */
}

static int use_threads(const conv_geom *G)
{
    double flops = 2.0 * G->n * G->cout * (double)G->k * G->oh * G->ow;
    return flops > PAR_FLOPS && G->n * G->nbands > 1;
}

/* Column matrix of one band: the input itself (direct) or an im2col tile. */
static const float *band_columns(const conv_geom *G, const float *xn, int oy0, int oy1,
                      float *scratch, int *ld)
{
    if (G->direct) {
        *ld = G->h * G->w;
        return xn + (size_t)oy0 * G->ow;
    }
    im2col_band(G, xn, oy0, oy1, scratch);
    *ld = (oy1 - oy0) * G->ow;
    return scratch;
}

static void forward_item(const conv_geom *G, const nj_tensor *x, const nj_tensor *w,
                         const nj_tensor *b, nj_tensor *y, int n, int band, float *scratch)
{
    int oy0 = band * G->band, oy1 = oy0 + G->band < G->oh ? oy0 + G->band : G->oh;
    int pt = (oy1 - oy0) * G->ow, ohw = G->oh * G->ow, ld;
    const float *xn = x->data + (size_t)n * G->cin * G->h * G->w;
    const float *col = band_columns(G, xn, oy0, oy1, scratch, &ld);
    float *yt = y->data + (size_t)n * G->cout * ohw + (size_t)oy0 * G->ow;
    if (b) {
        for (int o = 0; o < G->cout; o++)
            for (int p = 0; p < pt; p++) yt[(size_t)o * ohw + p] = b->data[o];
    }
    cblas_sgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, G->cout, pt, G->k,
                1.0f, w->data, G->k, col, ld, b ? 1.0f : 0.0f, yt, ohw);
}

static void backward_item(const conv_geom *G, const nj_op *op, int n, int band,
                          float *scratch, float *dw)
{
    const nj_tensor *x = op->in[0], *w = op->in[1], *y = op->out;
    int oy0 = band * G->band, oy1 = oy0 + G->band < G->oh ? oy0 + G->band : G->oh;
    int pt = (oy1 - oy0) * G->ow, ohw = G->oh * G->ow, hw = G->h * G->w, ld;
    size_t xoff = (size_t)n * G->cin * hw;
    const float *dy = y->grad + (size_t)n * G->cout * ohw + (size_t)oy0 * G->ow;
    if (dw) {
        const float *col = band_columns(G, x->data + xoff, oy0, oy1, scratch, &ld);
        cblas_sgemm(CblasRowMajor, CblasNoTrans, CblasTrans, G->cout, G->k, pt,
                    1.0f, dy, ohw, col, ld, 1.0f, dw, G->k);
    }
    if (!x->grad) return;
    if (G->direct) {
        cblas_sgemm(CblasRowMajor, CblasTrans, CblasNoTrans, G->k, pt, G->cout,
                    1.0f, w->data, G->k, dy, ohw, 1.0f, x->grad + xoff + (size_t)oy0 * G->ow, hw);
        return;
    }
    cblas_sgemm(CblasRowMajor, CblasTrans, CblasNoTrans, G->k, pt, G->cout,
                1.0f, w->data, G->k, dy, ohw, 0.0f, scratch, pt);
    col2im_band(G, scratch, oy0, oy1, x->grad + xoff);
}

/* Runs the bands of parity `phase` (or all bands when phase < 0) of every sample. */
static void backward_phase(const conv_geom *G, const nj_op *op, int phase,
                           float *scratch, float *dw_parts, int par)
{
    int step = phase < 0 ? 1 : 2, first = phase < 0 ? 0 : phase;
    int per = (G->nbands - first + step - 1) / step, items = G->n * per;
    size_t tile = tile_floats(G), wsize = (size_t)G->cout * G->k;
    /* static: each thread gets the same items every step, so its dW partial
     * (and hence the reduced dW) is bit-identical from run to run */
    #pragma omp parallel for schedule(static) if (par)
    for (int it = 0; it < items; it++) {
        int t = omp_get_thread_num();
        backward_item(G, op, it / per, first + step * (it % per),
                      scratch ? scratch + (size_t)t * tile : NULL,
                      dw_parts ? dw_parts + (size_t)t * wsize : NULL);
    }
}

static void bias_backward(const conv_geom *G, const nj_tensor *y, float *db)
{
    size_t ohw = (size_t)G->oh * G->ow;
    #pragma omp parallel for if (use_threads(G))
    for (int o = 0; o < G->cout; o++) {
        double s = 0;
        for (int n = 0; n < G->n; n++) {
            const float *d = y->grad + ((size_t)n * G->cout + o) * ohw;
            /* in double, several partial sums at once (not one long chain of dependent adds) */
            #pragma omp simd reduction(+ : s)
            for (size_t p = 0; p < ohw; p++) s += d[p];
        }
        db[o] += (float)s;
    }
}

static void reduce_dw(const float *parts, int nparts, size_t wsize, float *dw, int par)
{
    #pragma omp parallel for if (par)
    for (size_t i = 0; i < wsize; i++) {
        float s = 0;
        for (int t = 0; t < nparts; t++) s += parts[(size_t)t * wsize + i];
        dw[i] += s;
    }
}

/* The direct-kernel description of the geometry for the forward (backward = 0)
 * or backward pass; 0 when im2col + sgemm suits that pass better. */
static int direct_kernel(const conv_geom *G, nj_dconv *D, int backward)
{
    if (G->direct) return 0;
    *D = (nj_dconv){G->n, G->cin, G->h, G->w, G->cout, G->kh, G->kw, G->stride, G->pad, G->reflect,
                    G->oh, G->ow};
    return nj_dconv_suits(D, backward);
}

/* dW and dx by im2col + sgemm, band by band. */
static void backward_gemm(nj_graph *g, const conv_geom *G, const nj_op *op)
{
    nj_tensor *x = op->in[0], *w = op->in[1];
    int threads = omp_get_max_threads(), par = use_threads(G);
    size_t tile = tile_floats(G), wsize = (size_t)G->cout * G->k;
    size_t nparts = w->grad ? (wsize * (size_t)threads + 15) / 16 * 16 : 0;
    /* one scratch block: dW partials (zeroed) then the im2col tiles */
    float *block = nj_graph_scratch(g, sizeof(float) * (nparts + tile * (size_t)threads));
    if (!block) return;
    float *parts = nparts ? block : NULL, *scratch = tile ? block + nparts : NULL;
    if (parts) memset(parts, 0, sizeof(float) * nparts);
    if (x->grad && !G->direct) {
        backward_phase(G, op, 0, scratch, parts, par);
        backward_phase(G, op, 1, scratch, parts, par);
    } else {
        backward_phase(G, op, -1, scratch, parts, par);
    }
    if (parts) reduce_dw(parts, threads, wsize, w->grad, wsize * (size_t)threads > 65536);
}

static void conv2d_backward(nj_graph *g, const nj_op *op)
{
    nj_tensor *x = op->in[0], *w = op->in[1], *b = op->in[2];
    conv_geom G;
    nj_dconv D;
    geom_init(&G, x, w, op->i[0], op->i[1], (nj_pad_mode)op->i[2]);
    if (b && b->grad) bias_backward(&G, op->out, b->grad);
    if (!x->grad && !w->grad) return;
    int direct = direct_kernel(&G, &D, 1), par = use_threads(&G), threads = omp_get_max_threads();
    if (!direct) {
        backward_gemm(g, &G, op);
        return;
    }
    if (w->grad) {
        float *s = nj_graph_scratch(g, sizeof(float) * nj_dconv_dw_scratch(&D, threads));
        if (s) nj_dconv_backward_dw(&D, x->data, op->out->grad, w->grad, s, par);
    }
    if (!x->grad) return;
    float *scratch = nj_graph_scratch(g, sizeof(float) * nj_dconv_dx_scratch(&D, threads));
    if (scratch) nj_dconv_backward_dx(&D, op->out->grad, w->data, x->grad, scratch, par);
}

/* y = conv(x, w) + b by the direct kernel or by im2col + sgemm; 0 when out of scratch. */
static int conv_forward(nj_graph *g, const conv_geom *G, const nj_tensor *x, const nj_tensor *w,
                        const nj_tensor *b, nj_tensor *y)
{
    int threads = omp_get_max_threads(), items = G->n * G->nbands;
    nj_dconv D;
    if (direct_kernel(G, &D, 0)) {
        float *s = nj_graph_scratch(g, sizeof(float) * nj_dconv_forward_scratch(&D, threads));
        if (!s) return 0;
        nj_dconv_forward(&D, x->data, w->data, b ? b->data : NULL, y->data, s, use_threads(G));
        return 1;
    }
    size_t tile = tile_floats(G);
    float *scratch = NULL;
    if (tile && !(scratch = nj_graph_scratch(g, sizeof(float) * tile * (size_t)threads))) return 0;
    #pragma omp parallel for schedule(dynamic, 1) if (use_threads(G))
    for (int it = 0; it < items; it++) {
        float *s = scratch ? scratch + (size_t)omp_get_thread_num() * tile : NULL;
        forward_item(G, x, w, b, y, it / G->nbands, it % G->nbands, s);
    }
    return 1;
}

/* 1 when the shapes and settings are valid; otherwise fails the graph. */
static int check_shapes(nj_graph *g, const nj_tensor *x, const nj_tensor *w,
                        const nj_tensor *b, int stride, int pad, nj_pad_mode mode)
{
    if (x->c != w->c) {
        nj_graph_fail(g, "conv2d: x %dx%dx%dx%d and w %dx%dx%dx%d disagree on input channels",
                      x->n, x->c, x->h, x->w, w->n, w->c, w->h, w->w);
        return 0;
    }
    if (b && (b->n != 1 || b->c != w->n || b->h != 1 || b->w != 1)) {
        nj_graph_fail(g, "conv2d: bias %dx%dx%dx%d is not 1x%dx1x1 for w %dx%dx%dx%d",
                      b->n, b->c, b->h, b->w, w->n, w->n, w->c, w->h, w->w);
        return 0;
    }
    if (stride != 1 && stride != 2) {
        nj_graph_fail(g, "conv2d: stride %d (only 1 or 2) for x %dx%dx%dx%d",
                      stride, x->n, x->c, x->h, x->w);
        return 0;
    }
    if (pad < 0 || (mode == NJ_PAD_REFLECT && (pad >= x->h || pad >= x->w))) {
        nj_graph_fail(g, "conv2d: %s padding %d invalid for x %dx%dx%dx%d",
                      mode == NJ_PAD_REFLECT ? "reflection" : "zero", pad,
                      x->n, x->c, x->h, x->w);
        return 0;
    }
    if (x->h + 2 * pad < w->h || x->w + 2 * pad < w->w) {
        nj_graph_fail(g, "conv2d: kernel %dx%d larger than padded x %dx%dx%dx%d (pad %d)",
                      w->h, w->w, x->n, x->c, x->h, x->w, pad);
        return 0;
    }
    return 1;
}

nj_tensor *nj_conv2d(nj_graph *g, nj_tensor *x, nj_tensor *w, nj_tensor *b,
                     int stride, int pad, nj_pad_mode mode)
{
    if (!x || !w || nj_graph_failed(g)) return NULL;
    if (!check_shapes(g, x, w, b, stride, pad, mode)) return NULL;
    conv_geom G;
    geom_init(&G, x, w, stride, pad, mode);
    nj_tensor *in[3] = {x, w, b};
    nj_tensor *y = nj_op_output(g, G.n, G.cout, G.oh, G.ow, in, 3);
    if (!y) return NULL;
    double t0 = nj_prof_start();
    if (!conv_forward(g, &G, x, w, b, y)) return NULL;
    nj_prof_stop("conv_forward", t0);
    nj_op *op = nj_graph_record(g, "conv2d", conv2d_backward, y, in, 3);
    if (op) {
        op->prof = "conv_backward";
        op->i[0] = stride;
        op->i[1] = pad;
        op->i[2] = (int)mode;
    }
    return y;
}

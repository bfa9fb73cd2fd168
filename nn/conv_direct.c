/* nn/conv_direct.c — stride-1 convolution by register-blocked direct kernels
 * (see conv_direct.h).
 *
 * Work items are (sample, band of rows).  Each thread copies its band of the
 * input, with the padding applied and zeros after the row end, into scratch;
 * the kernel then accumulates an OB-channel × NV·16-pixel block in registers
 * over every input channel and tap and stores it once.  GCC vector extensions
 * compile to AVX-512, AVX2 or SSE as the -march allows; this file is built
 * with -ffp-contract=fast so that multiply-adds fuse. */
#include "nn/conv_direct.h"
#include <omp.h>
#include <string.h>

#define VL 16                       /* floats per vector */
#define BAND_BYTES (192 * 1024)     /* target size of one thread's input band */
#define MIN_BANDS 4                 /* bands per sample, for balance across threads */
#define DW_BAND_BYTES (2048 * 1024) /* the weight gradient's band (re-read per channel pair) */
#define DW_MIN_PIXELS 2048

typedef float vf __attribute__((vector_size(VL * sizeof(float))));
typedef float vfu __attribute__((vector_size(VL * sizeof(float)), aligned(4), may_alias));

/* The source of one correlation: C planes (plane stride ps, row stride ls) and
 * weights wt[((c·kh + ky)·kw + kx)·O + o]. */
typedef struct band_src {
    const float *in;
    size_t ps;
    int ls, c, kh, kw;
    const float *wt;
    int o;
} band_src;

static inline int round_up(int a, int m) { return (a + m - 1) / m * m; }

static inline int reflect_index(int i, int n)
{
    return i < 0 ? -i : (i >= n ? 2 * (n - 1) - i : i);
}

/* Row stride of a band buffer whose correlation yields `cols` columns: room for
 * the widest pixel block (64) to read past the last column. */
static int band_stride(int cols, int kw)
{
    return round_up(round_up(cols, 4 * VL) + kw - 1, VL);
}

/* Stores one accumulator vector: whole, or its first `left` lanes at the row end. */
static inline void store_vec(float *d, vf a, int left)
{
    if (left >= VL) {
        *(vfu *)d = a;
    } else if (left > 0) {
        float t[VL];
        *(vfu *)t = a;
        memcpy(d, t, sizeof(float) * (size_t)left);
    }
}

/* Repetition over the OB output channels (RO*) and NV pixel vectors (RV*) of
 * a block, so that every accumulator is a named variable (registers). */
#define RV1(M, o) M(o, 0)
#define RV2(M, o) M(o, 0) M(o, 1)
#define RV4(M, o) M(o, 0) M(o, 1) M(o, 2) M(o, 3)
#define RO1(M, RV) RV(M, 0)
#define RO4(M, RV) RV(M, 0) RV(M, 1) RV(M, 2) RV(M, 3)
#define RO8(M, RV) RO4(M, RV) RV(M, 4) RV(M, 5) RV(M, 6) RV(M, 7)
#define RO16(M, RV) RO8(M, RV) RV(M, 8) RV(M, 9) RV(M, 10) RV(M, 11) \
                    RV(M, 12) RV(M, 13) RV(M, 14) RV(M, 15)
#define LOAD1(M) M(0)
#define LOAD2(M) M(0) M(1)
#define LOAD4(M) M(0) M(1) M(2) M(3)

#define ACC_INIT(o, v) vf a_##o##_##v = (vf){0} + (bias ? bias[o0 + o] : 0.0f);
#define ACC_FMA(o, v) a_##o##_##v += wr[o] * x_##v;
#define ACC_STORE(o, v) store_vec(out + (size_t)(o) * ops + VL * (v), a_##o##_##v, ncols - VL * (v));
#define X_LOAD(v) vf x_##v = *(const vfu *)(row + kx + VL * (v));

/* out[o][x] = bias[o] + Σ_c,ky,kx wt[c,ky,kx][o0+o] · in[c][ky][x+kx] for an
 * OB × NV·VL block; `ncols` columns of out are valid from here on. */
#define KERNEL(name, RO, RV, LOADS)                                                   \
    static void name(const band_src *S, const float *in, int o0, const float *bias,   \
                     float *out, size_t ops, int ncols)                               \
    {                                                                                 \
        RO(ACC_INIT, RV)                                                              \
        for (int c = 0; c < S->c; c++)                                                \
            for (int ky = 0; ky < S->kh; ky++) {                                      \
                const float *row = in + (size_t)c * S->ps + (size_t)ky * S->ls;       \
                const float *wr = S->wt + (size_t)(c * S->kh + ky) * S->kw * S->o + o0; \
                for (int kx = 0; kx < S->kw; kx++, wr += S->o) {                      \
                    LOADS(X_LOAD)                                                     \
                    RO(ACC_FMA, RV)                                                   \
                }                                                                     \
            }                                                                         \
        RO(ACC_STORE, RV)                                                             \
    }
KERNEL(k16x1, RO16, RV1, LOAD1)
KERNEL(k8x2, RO8, RV2, LOAD2)
KERNEL(k4x4, RO4, RV4, LOAD4)
KERNEL(k1x4, RO1, RV4, LOAD4)

typedef void (*kernel_fn)(const band_src *, const float *, int, const float *, float *, size_t, int);

/* Output row `inrow` → `outrow` (plane stride ops), all S->o channels, ncols columns. */
static void row_conv(const band_src *S, const float *inrow, const float *bias,
                     float *outrow, size_t ops, int ncols)
{
    static const struct { int ob, px; kernel_fn f; } kinds[] = {
        {16, VL, k16x1}, {8, 2 * VL, k8x2}, {4, 4 * VL, k4x4}, {1, 4 * VL, k1x4}};
    int o0 = 0;
    for (size_t k = 0; k < sizeof kinds / sizeof kinds[0]; k++)
        for (; o0 + kinds[k].ob <= S->o; o0 += kinds[k].ob)
            for (int x0 = 0; x0 < ncols; x0 += kinds[k].px)
                kinds[k].f(S, inrow + x0, o0, bias, outrow + (size_t)o0 * ops + x0, ops, ncols - x0);
}

/* One padded input row: X ∈ [0, ls) holds src column X − pad (reflected or zero
 * outside the row, zero beyond w + 2·pad); `iy` may lie outside [0, h). */
static void fill_row(float *dst, const float *plane, int iy, int h, int w, int pad,
                     int reflect, int ls)
{
    if (iy < 0 || iy >= h) {
        if (!reflect) {
            memset(dst, 0, sizeof(float) * (size_t)ls);
            return;
        }
        iy = reflect_index(iy, h);
    }
    const float *src = plane + (size_t)iy * w;
    for (int X = 0; X < pad; X++) dst[X] = reflect ? src[reflect_index(X - pad, w)] : 0.0f;
    memcpy(dst + pad, src, sizeof(float) * (size_t)w);
    for (int X = pad + w; X < w + 2 * pad; X++)
        dst[X] = reflect ? src[reflect_index(X - pad, w)] : 0.0f;
    memset(dst + w + 2 * pad, 0, sizeof(float) * (size_t)(ls - w - 2 * pad));
}

/* Band height for `rows` rows whose buffer rows hold `row_floats` floats: fits
 * `bytes` with `halo` extra rows, at least min_rows, and min_bands bands per
 * sample where possible.  The last band takes the remainder (fewer than 2
 * bands' worth). */
static int band_height(int rows, long row_floats, long bytes, int halo, int min_rows, int min_bands)
{
    long fit = bytes / (4L * row_floats) - halo;
    int b = fit < 1 ? 1 : (int)fit;
    int balanced = (rows + min_bands - 1) / min_bands;
    if (b > balanced) b = balanced;
    if (b < min_rows) b = min_rows;
    return b < rows ? b : rows;
}

static int band_count(int rows, int band) { return rows / band > 1 ? rows / band : 1; }

static int last_band_rows(int rows, int band) { return rows - (band_count(rows, band) - 1) * band; }

/* ---- forward ------------------------------------------------------------ */

static int fwd_band(const nj_dconv *D)
{
    return band_height(D->oh, (long)D->cin * band_stride(D->ow, D->kw), BAND_BYTES, D->kh - 1, 1,
                       MIN_BANDS);
}

size_t nj_dconv_forward_scratch(const nj_dconv *D, int threads)
{
    int ls = band_stride(D->ow, D->kw);
    size_t rows = (size_t)last_band_rows(D->oh, fwd_band(D)) + D->kh - 1;
    size_t wt = (size_t)round_up(D->cin * D->kh * D->kw * D->cout, VL);
    return wt + (size_t)threads * round_up((int)((size_t)D->cin * rows * ls), VL);
}

/* wt[((c·kh + ky)·kw + kx)·cout + o] = w[o][c][ky][kx]. */
static void forward_weights(const nj_dconv *D, const float *w, float *wt)
{
    int taps = D->kh * D->kw;
    for (int o = 0; o < D->cout; o++)
        for (int c = 0; c < D->cin; c++)
            for (int t = 0; t < taps; t++)
                wt[((size_t)c * taps + t) * D->cout + o] = w[((size_t)o * D->cin + c) * taps + t];
}

static void forward_item(const nj_dconv *D, const float *x, const float *wt, const float *b,
                         float *y, int n, int oy0, int oy1, float *buf)
{
    int ls = band_stride(D->ow, D->kw), rows = oy1 - oy0 + D->kh - 1;
    size_t ps = (size_t)rows * ls, ohw = (size_t)D->oh * D->ow;
    const float *xn = x + (size_t)n * D->cin * D->h * D->w;
    for (int c = 0; c < D->cin; c++)
        for (int r = 0; r < rows; r++)
            fill_row(buf + c * ps + (size_t)r * ls, xn + (size_t)c * D->h * D->w,
                     oy0 + r - D->pad, D->h, D->w, D->pad, D->reflect, ls);
    band_src S = {buf, ps, ls, D->cin, D->kh, D->kw, wt, D->cout};
    float *yn = y + (size_t)n * D->cout * ohw;
    for (int oy = oy0; oy < oy1; oy++)
        row_conv(&S, buf + (size_t)(oy - oy0) * ls, b, yn + (size_t)oy * D->ow, ohw, D->ow);
}

void nj_dconv_forward(const nj_dconv *D, const float *x, const float *w, const float *b,
                      float *y, float *scratch, int par)
{
    int band = fwd_band(D), nb = band_count(D->oh, band), items = D->n * nb;
    int ls = band_stride(D->ow, D->kw);
    size_t wsz = (size_t)round_up(D->cin * D->kh * D->kw * D->cout, VL);
    size_t per = (size_t)round_up((int)((size_t)D->cin * (last_band_rows(D->oh, band) + D->kh - 1) * ls), VL);
    forward_weights(D, w, scratch);
    #pragma omp parallel for schedule(dynamic, 1) if (par)
    for (int it = 0; it < items; it++) {
        int k = it % nb, oy0 = k * band, oy1 = k == nb - 1 ? D->oh : oy0 + band;
        forward_item(D, x, scratch, b, y, it / nb, oy0, oy1,
                     scratch + wsz + (size_t)omp_get_thread_num() * per);
    }
}

/* ---- input gradient -----------------------------------------------------
 * With xp the padded input (Hp×Wp = (oh+kh−1)×(ow+kw−1)), the gradient of xp
 * is the correlation of dy, zero-extended by kh−1 rows and kw−1 columns on
 * each side, with wt'[o][ky][kx][c] = w[o][c][kh−1−ky][kw−1−kx].  A band owns
 * dx rows [y0, y1): it computes the xp-gradient rows that land there (with the
 * top/bottom padding rows if it is the first/last band) and folds the padding
 * back — reflected or dropped.  Bands are at least pad+1 rows, so every
 * reflected row lands inside its own band and bands never write the same row. */

static int dx_band(const nj_dconv *D)
{
    int wp = D->ow + D->kw - 1;
    return band_height(D->h, (long)D->cout * band_stride(wp, D->kw), BAND_BYTES,
                       2 * D->pad + D->kh - 1, D->pad + 1, MIN_BANDS);
}

static size_t dx_per_thread(const nj_dconv *D, int band)
{
    int wp = D->ow + D->kw - 1, ls = band_stride(wp, D->kw);
    size_t rows = (size_t)last_band_rows(D->h, band) + 2 * D->pad;
    size_t in = (size_t)D->cout * (rows + D->kh - 1) * ls, out = (size_t)D->cin * rows * wp;
    return (size_t)round_up((int)(in + out), VL);
}

size_t nj_dconv_dx_scratch(const nj_dconv *D, int threads)
{
    size_t wt = (size_t)round_up(D->cin * D->kh * D->kw * D->cout, VL);
    return wt + (size_t)threads * dx_per_thread(D, dx_band(D));
}

/* wt[((o·kh + ky)·kw + kx)·cin + c] = w[o][c][kh−1−ky][kw−1−kx]. */
static void dx_weights(const nj_dconv *D, const float *w, float *wt)
{
    for (int o = 0; o < D->cout; o++)
        for (int c = 0; c < D->cin; c++)
            for (int ky = 0; ky < D->kh; ky++)
                for (int kx = 0; kx < D->kw; kx++)
                    wt[(((size_t)o * D->kh + ky) * D->kw + kx) * D->cin + c] =
                        w[(((size_t)o * D->cin + c) * D->kh + D->kh - 1 - ky) * D->kw + D->kw - 1 - kx];
}

/* One row of dy zero-extended: dst[X] = dy[Y − (kh−1)][X − (kw−1)] or 0. */
static void fill_dy_row(const nj_dconv *D, float *dst, const float *plane, int Y, int ls)
{
    int src = Y - (D->kh - 1);
    memset(dst, 0, sizeof(float) * (size_t)ls);
    if (src >= 0 && src < D->oh)
        memcpy(dst + D->kw - 1, plane + (size_t)src * D->ow, sizeof(float) * (size_t)D->ow);
}

/* Adds one xp-gradient row (wp = w + 2·pad columns) to dx row ydst, folding the padding. */
static void fold_row(const nj_dconv *D, const float *s, float *d)
{
    int p = D->pad, w = D->w;
    for (int x = 0; x < w; x++) d[x] += s[x + p];
    if (!D->reflect) return;
    for (int X = 0; X < p; X++) d[reflect_index(X - p, w)] += s[X];
    for (int X = p + w; X < w + 2 * p; X++) d[reflect_index(X - p, w)] += s[X];
}

static void dx_item(const nj_dconv *D, const float *dy, const float *wt, float *dx,
                    int n, int y0, int y1, float *buf)
{
    int p = D->pad, wp = D->ow + D->kw - 1, ls = band_stride(wp, D->kw);
    int Ya = y0 == 0 ? 0 : y0 + p, Yb = y1 == D->h ? D->h + 2 * p : y1 + p, rows = Yb - Ya;
    int inrows = rows + D->kh - 1;
    size_t ps = (size_t)inrows * ls, ohw = (size_t)D->oh * D->ow, ops = (size_t)rows * wp;
    float *tmp = buf + (size_t)D->cout * ps;
    const float *dyn = dy + (size_t)n * D->cout * ohw;
    for (int o = 0; o < D->cout; o++)
        for (int r = 0; r < inrows; r++)
            fill_dy_row(D, buf + o * ps + (size_t)r * ls, dyn + o * ohw, Ya + r, ls);
    band_src S = {buf, ps, ls, D->cout, D->kh, D->kw, wt, D->cin};
    for (int r = 0; r < rows; r++)
        row_conv(&S, buf + (size_t)r * ls, NULL, tmp + (size_t)r * wp, ops, wp);
    float *dxn = dx + (size_t)n * D->cin * D->h * D->w;
    for (int c = 0; c < D->cin; c++)
        for (int r = 0; r < rows; r++) {
            int yy = Ya + r - p;
            if (yy < 0 || yy >= D->h) {
                if (!D->reflect) continue;
                yy = reflect_index(yy, D->h);
            }
            fold_row(D, tmp + c * ops + (size_t)r * wp, dxn + ((size_t)c * D->h + yy) * D->w);
        }
}

void nj_dconv_backward_dx(const nj_dconv *D, const float *dy, const float *w, float *dx,
                          float *scratch, int par)
{
    int band = dx_band(D), nb = band_count(D->h, band), items = D->n * nb;
    size_t wsz = (size_t)round_up(D->cin * D->kh * D->kw * D->cout, VL);
    size_t per = dx_per_thread(D, band);
    dx_weights(D, w, scratch);
    #pragma omp parallel for schedule(dynamic, 1) if (par)
    for (int it = 0; it < items; it++) {
        int k = it % nb, y0 = k * band, y1 = k == nb - 1 ? D->h : y0 + band;
        dx_item(D, dy, scratch, dx, it / nb, y0, y1,
                scratch + wsz + (size_t)omp_get_thread_num() * per);
    }
}

/* ---- weight gradient (3×3) ----------------------------------------------
 * dW[o][c][ky][kx] = Σ_y,x dy[o][y][x] · xp[c][y+ky][x+kx].  Items are
 * (sample, band); for each pair of output channels and each input channel the
 * 2 × 9 taps are accumulated as vectors of partial sums over the band, then
 * reduced into the thread's own partial dW.  Partials are added in thread
 * order, so dW is the same from run to run at a given thread count. */

static inline float hsum(vf a)
{
    float t[VL], s = 0.0f;
    *(vfu *)t = a;
    for (int i = 0; i < VL; i++) s += t[i];
    return s;
}

#define TAPS(M) M(0, 0) M(0, 1) M(0, 2) M(1, 0) M(1, 1) M(1, 2) M(2, 0) M(2, 1) M(2, 2)
#define DW_DECL(ky, kx) vf p_##ky##_##kx = (vf){0}, q_##ky##_##kx = (vf){0};
#define DW_FMA2(ky, kx) { vf xv = *(const vfu *)(r##ky + x + kx); \
                          p_##ky##_##kx += g0 * xv; q_##ky##_##kx += g1 * xv; }
#define DW_FMA1(ky, kx) { vf xv = *(const vfu *)(r##ky + x + kx); p_##ky##_##kx += g0 * xv; }
#define DW_OUT2(ky, kx) o0[(ky) * 3 + (kx)] += hsum(p_##ky##_##kx); \
                        o1[(ky) * 3 + (kx)] += hsum(q_##ky##_##kx);
#define DW_OUT1(ky, kx) o0[(ky) * 3 + (kx)] += hsum(p_##ky##_##kx);

/* One band: xp (rows+2 rows, stride ls) of one input channel against dy rows of
 * channels o and o+1 (d0, d1; stride dls, zero past the row end) → o0[9], o1[9]. */
static void dw_pair(const float *xp, int ls, const float *d0, const float *d1, int dls,
                    int rows, float *o0, float *o1)
{
    TAPS(DW_DECL)
    for (int r = 0; r < rows; r++) {
        const float *r0 = xp + (size_t)r * ls, *r1 = r0 + ls, *r2 = r1 + ls;
        const float *e0 = d0 + (size_t)r * dls, *e1 = d1 + (size_t)r * dls;
        for (int x = 0; x < dls; x += VL) {
            vf g0 = *(const vfu *)(e0 + x), g1 = *(const vfu *)(e1 + x);
            TAPS(DW_FMA2)
        }
    }
    TAPS(DW_OUT2)
}

static void dw_single(const float *xp, int ls, const float *d0, int dls, int rows, float *o0)
{
    TAPS(DW_DECL)
    (void)q_0_0; (void)q_0_1; (void)q_0_2; (void)q_1_0; (void)q_1_1; (void)q_1_2;
    (void)q_2_0; (void)q_2_1; (void)q_2_2;
    for (int r = 0; r < rows; r++) {
        const float *r0 = xp + (size_t)r * ls, *r1 = r0 + ls, *r2 = r1 + ls;
        const float *e0 = d0 + (size_t)r * dls;
        for (int x = 0; x < dls; x += VL) {
            vf g0 = *(const vfu *)(e0 + x);
            TAPS(DW_FMA1)
        }
    }
    TAPS(DW_OUT1)
}

static int dw_band(const nj_dconv *D)
{
    int ls = band_stride(D->ow, D->kw), dls = round_up(D->ow, VL);
    /* big bands: each holds ≥ DW_MIN_PIXELS so the per-band reductions stay cheap */
    int min_rows = (DW_MIN_PIXELS + D->ow - 1) / D->ow;
    return band_height(D->oh, (long)D->cin * ls + (long)D->cout * dls, DW_BAND_BYTES, D->kh - 1,
                       min_rows, 1);
}

static size_t dw_per_thread(const nj_dconv *D, int band)
{
    int ls = band_stride(D->ow, D->kw), dls = round_up(D->ow, VL);
    size_t rows = (size_t)last_band_rows(D->oh, band);
    size_t f = (size_t)D->cin * (rows + D->kh - 1) * ls + (size_t)D->cout * rows * dls
               + (size_t)D->cout * D->cin * 9;
    return (size_t)round_up((int)f, VL);
}

int nj_dconv_dw_direct(const nj_dconv *D) { return D->kh == 3 && D->kw == 3; }

size_t nj_dconv_dw_scratch(const nj_dconv *D, int threads)
{
    return (size_t)threads * dw_per_thread(D, dw_band(D));
}

static void dw_item(const nj_dconv *D, const float *x, const float *dy, int n, int oy0, int oy1,
                    float *buf, float *part)
{
    int ls = band_stride(D->ow, D->kw), dls = round_up(D->ow, VL), rows = oy1 - oy0;
    size_t ps = (size_t)(rows + D->kh - 1) * ls, ds = (size_t)rows * dls, ohw = (size_t)D->oh * D->ow;
    float *dyb = buf + (size_t)D->cin * ps;
    const float *xn = x + (size_t)n * D->cin * D->h * D->w, *dyn = dy + (size_t)n * D->cout * ohw;
    for (int c = 0; c < D->cin; c++)
        for (int r = 0; r < rows + D->kh - 1; r++)
            fill_row(buf + c * ps + (size_t)r * ls, xn + (size_t)c * D->h * D->w,
                     oy0 + r - D->pad, D->h, D->w, D->pad, D->reflect, ls);
    for (int o = 0; o < D->cout; o++)
        for (int r = 0; r < rows; r++) {
            float *d = dyb + o * ds + (size_t)r * dls;
            memcpy(d, dyn + o * ohw + (size_t)(oy0 + r) * D->ow, sizeof(float) * (size_t)D->ow);
            memset(d + D->ow, 0, sizeof(float) * (size_t)(dls - D->ow));
        }
    size_t wc = (size_t)D->cin * 9;
    int o = 0;
    for (; o + 2 <= D->cout; o += 2)
        for (int c = 0; c < D->cin; c++)
            dw_pair(buf + c * ps, ls, dyb + o * ds, dyb + (o + 1) * ds, dls, rows,
                    part + o * wc + c * 9, part + (o + 1) * wc + c * 9);
    for (; o < D->cout; o++)
        for (int c = 0; c < D->cin; c++)
            dw_single(buf + c * ps, ls, dyb + o * ds, dls, rows, part + o * wc + c * 9);
}

void nj_dconv_backward_dw(const nj_dconv *D, const float *x, const float *dy, float *dw,
                          float *scratch, int par)
{
    int band = dw_band(D), nb = band_count(D->oh, band), items = D->n * nb;
    int threads = par ? omp_get_max_threads() : 1;
    size_t per = dw_per_thread(D, band), wsize = (size_t)D->cout * D->cin * 9;
    for (int t = 0; t < threads; t++) memset(scratch + (size_t)(t + 1) * per - wsize, 0, sizeof(float) * wsize);
    #pragma omp parallel num_threads(threads) if (par)
    {
        float *buf = scratch + (size_t)omp_get_thread_num() * per;
        float *part = buf + per - wsize;
        /* static: a thread gets the same items every step (reproducible dW) */
        #pragma omp for schedule(static)
        for (int it = 0; it < items; it++) {
            int k = it % nb, oy0 = k * band, oy1 = k == nb - 1 ? D->oh : oy0 + band;
            dw_item(D, x, dy, it / nb, oy0, oy1, buf, part);
        }
    }
    for (int t = 0; t < threads; t++) {
        const float *part = scratch + (size_t)(t + 1) * per - wsize;
        for (size_t i = 0; i < wsize; i++) dw[i] += part[i];
    }
}

int nj_dconv_suits(const nj_dconv *D)
{
    /* measured per layer of the default nets (320x96 and 416x128, 1 thread):
     * faster from 40 columns up to 64 output channels, and always for the
     * disparity heads (1 channel); im2col + sgemm wins on wide, short maps */
    return (D->ow >= 40 && D->cout <= 64) || D->cout <= 4;
}

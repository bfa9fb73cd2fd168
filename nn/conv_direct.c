/* nn/conv_direct.c — convolution by register-blocked direct kernels
 * (see conv_direct.h).
 *
 * Staging.  A work item (sample, band of output rows) copies its part of the
 * padded input into per-thread scratch as s×s phase planes (s = stride):
 * plane (py, px) holds padded pixel (s·i + py, s·j + px) at (i, j), row stride
 * L = ow + (kw−1)/s.  Tap (ky, kx) of output (i, j) then reads plane
 * (ky mod s, kx mod s) at (i + ky/s, j + kx/s): a fixed offset from the flat
 * index q = i·L + j.  The kernels run over q across row ends (the columns
 * j ≥ ow are computed and dropped), so narrow maps waste no vector lanes.
 *
 * Kernel.  An OB-channel × NV·16-pixel block of outputs is accumulated in
 * named vector variables (registers) over every input channel and tap, then
 * stored once.  The block shape (12×32, 8×48, 16×16 or 8×32) is picked per
 * channel count and width by estimated cycles: wide blocks need fewer loads
 * per multiply-add, narrow ones waste fewer lanes on small maps.  GCC vector
 * extensions compile to AVX-512, AVX2 or SSE as the -march allows; this file
 * is built with -ffp-contract=fast so that multiply-adds fuse.
 *
 * Weight gradient: per (pair of output channels, input channel), 9 taps at a
 * time are accumulated as vectors over the band and reduced once.
 * Input gradient: stride 1 is the same correlation applied to the output
 * gradient, zero-extended, with the flipped kernel; stride 2 splits into the
 * four phases of the input, each a stride-1 correlation with the taps of its
 * parity.  Both fold the padding back (reflected or dropped). */
#include "nn/conv_direct.h"
#include <omp.h>
#include <string.h>

#define VL 16                       /* floats per vector */
#define MAX_TAPS 64
#define BAND_BYTES (192 * 1024)     /* target size of one thread's staged input band */
#define MIN_BANDS 4                 /* bands per sample, for balance across threads */
#define DW_BAND_BYTES (1024 * 1024) /* the weight gradient's band budget (see dw_band) */
#define DW_MIN_PIXELS 2048

typedef float vf __attribute__((vector_size(VL * sizeof(float))));
typedef float vfu __attribute__((vector_size(VL * sizeof(float)), aligned(4), may_alias));

static inline int round_up(int a, int m) { return (a + m - 1) / m * m; }
static inline size_t round_upz(size_t a, size_t m) { return (a + m - 1) / m * m; }

static inline int reflect_index(int i, int n)
{
    return i < 0 ? -i : (i >= n ? 2 * (n - 1) - i : i);
}

/* ---- the correlation kernel -------------------------------------------- */

/* C channels (channel stride cs) of staged input, taps at offsets off[0..taps),
 * weights wt[(c·taps + t)·O + o]. */
typedef struct corr_src {
    const float *in;
    size_t cs;
    const int *off;
    int taps;
    const float *wt;
    int c, o;
} corr_src;

/* Stores one accumulator vector: whole, or its first `left` lanes at the end. */
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
 * a block, so that every accumulator is a named variable. */
#define RV1(M, o) M(o, 0)
#define RV2(M, o) M(o, 0) M(o, 1)
#define RV3(M, o) M(o, 0) M(o, 1) M(o, 2)
#define RV4(M, o) M(o, 0) M(o, 1) M(o, 2) M(o, 3)
#define RO1(M, RV) RV(M, 0)
#define RO4(M, RV) RV(M, 0) RV(M, 1) RV(M, 2) RV(M, 3)
#define RO8(M, RV) RO4(M, RV) RV(M, 4) RV(M, 5) RV(M, 6) RV(M, 7)
#define RO12(M, RV) RO8(M, RV) RV(M, 8) RV(M, 9) RV(M, 10) RV(M, 11)
#define RO16(M, RV) RO8(M, RV) RV(M, 8) RV(M, 9) RV(M, 10) RV(M, 11) \
                    RV(M, 12) RV(M, 13) RV(M, 14) RV(M, 15)
#define LOAD1(M) M(0)
#define LOAD2(M) M(0) M(1)
#define LOAD3(M) M(0) M(1) M(2)
#define LOAD4(M) M(0) M(1) M(2) M(3)

#define ACC_INIT(o, v) vf a_##o##_##v = (vf){0} + (bias ? bias[o0 + o] : 0.0f);
#define ACC_FMA(o, v) a_##o##_##v += wr[o] * x_##v;
#define ACC_STORE(o, v) store_vec(out + (size_t)(o) * ops + VL * (v), a_##o##_##v, n - VL * (v));
#define X_LOAD(v) vf x_##v = *(const vfu *)(p + VL * (v));

/* out[o][q] = bias[o] + Σ_c,t wt[c,t][o0+o] · in[c][off[t] + q] for an OB ×
 * NV·VL block starting at q0 (in and out already offset by q0); `n` outputs
 * are valid from here on. */
#define KERNEL(name, RO, RV, LOADS)                                                   \
    static void name(const corr_src *S, const float *in, int o0, const float *bias,   \
                     float *out, size_t ops, int n)                                   \
    {                                                                                 \
        RO(ACC_INIT, RV)                                                              \
        const float *wr = S->wt + o0;                                                 \
        for (int c = 0; c < S->c; c++) {                                              \
            const float *inc = in + (size_t)c * S->cs;                                \
            for (int t = 0; t < S->taps; t++, wr += S->o) {                           \
                const float *p = inc + S->off[t];                                     \
                LOADS(X_LOAD)                                                         \
                RO(ACC_FMA, RV)                                                       \
            }                                                                         \
        }                                                                             \
        RO(ACC_STORE, RV)                                                             \
    }
KERNEL(k16x1, RO16, RV1, LOAD1)
KERNEL(k12x2, RO12, RV2, LOAD2)
KERNEL(k8x3, RO8, RV3, LOAD3)
KERNEL(k8x2, RO8, RV2, LOAD2)
KERNEL(k4x4, RO4, RV4, LOAD4)
KERNEL(k1x4, RO1, RV4, LOAD4)

typedef void (*kernel_fn)(const corr_src *, const float *, int, const float *, float *, size_t, int);

/* A block shape: ob output channels × px positions, and its estimated cycles
 * per (channel, tap) step on a core with two vector FMA and two load ports:
 * the larger of ob·px/16 FMAs and ob + px/16 loads, halved, plus one for the
 * loop.  A model, not a timing (so the pick is the same on every run); on the
 * default nets at 320×96 it picks the shape each layer ran fastest with when
 * all four were timed (12×32 on large maps, 8×48 for 256 outputs on 6×20,
 * 16×16 on 3×10). */
typedef struct kernel_kind {
    int ob, px;
    kernel_fn f;
    double cycles;
} kernel_kind;

static const kernel_kind MAIN_KINDS[] = {
    {12, 2 * VL, k12x2, 13.0}, {8, 3 * VL, k8x3, 13.0}, {16, VL, k16x1, 9.5}, {8, 2 * VL, k8x2, 9.0}};
/* The remainder's kinds, widest first: every channel count is covered. */
static const kernel_kind REST_KINDS[] = {
    {16, VL, k16x1, 9.5}, {8, 2 * VL, k8x2, 9.0}, {4, 4 * VL, k4x4, 9.0}, {1, 4 * VL, k1x4, 3.5}};
#define NKINDS(a) (int)(sizeof a / sizeof a[0])

/* Estimated cycles per (channel, tap) of covering o channels × nq positions
 * with `main` as often as it fits, then the remainder kinds; with S given,
 * also runs those kernels. */
static double block_plan(const kernel_kind *main, int o, int nq, const corr_src *S,
                         const float *bias, float *out, size_t ops)
{
    double cost = 0;
    int o0 = 0;
    for (int k = -1; k < NKINDS(REST_KINDS); k++) {
        const kernel_kind *K = k < 0 ? main : &REST_KINDS[k];
        for (; o0 + K->ob <= o; o0 += K->ob) {
            cost += K->cycles * (double)((nq + K->px - 1) / K->px);
            if (!S) continue;
            for (int q = 0; q < nq; q += K->px)
                K->f(S, S->in + q, o0, bias, out + (size_t)o0 * ops + q, ops, nq - q);
        }
    }
    return cost;
}

/* out[o][q] for q ∈ [0, nq), every channel o (plane stride ops), by the main
 * block shape of least estimated cost for this channel count and width (the
 * shape changes only which outputs share a block, not any output's sum). */
static void correlate(const corr_src *S, const float *bias, float *out, size_t ops, int nq)
{
    int best = 0;
    double best_cost = 0;
    for (int k = 0; k < NKINDS(MAIN_KINDS); k++) {
        double c = block_plan(&MAIN_KINDS[k], S->o, nq, NULL, NULL, NULL, 0);
        if (k == 0 || c < best_cost) best = k, best_cost = c;
    }
    block_plan(&MAIN_KINDS[best], S->o, nq, S, bias, out, ops);
}

/* Reads past the last flat index: the widest block (4·VL) plus the largest
 * in-row tap offset. */
static int slack(int kw) { return 4 * VL + kw; }

/* ---- staging the input -------------------------------------------------- */

typedef struct stage {
    int s, L, rows, prow;   /* stride, row stride, output rows, plane rows */
    size_t ps, cs;          /* plane stride, channel stride (s·s planes) */
} stage;

static void stage_geom(const nj_dconv *D, int rows, stage *st)
{
    st->s = D->stride;
    st->L = D->ow + (D->kw - 1) / D->stride;
    st->rows = rows;
    st->prow = rows + (D->kh - 1) / D->stride;
    st->ps = round_upz((size_t)st->prow * st->L + slack(D->kw), VL);
    st->cs = (size_t)st->s * st->s * st->ps;
}

/* Tap offsets: tap (ky, kx) reads plane (ky mod s, kx mod s) at (ky/s, kx/s). */
static void stage_taps(const nj_dconv *D, const stage *st, int *off)
{
    int s = st->s;
    for (int ky = 0; ky < D->kh; ky++)
        for (int kx = 0; kx < D->kw; kx++)
            off[ky * D->kw + kx] = (int)(((ky % s) * s + kx % s) * st->ps) + (ky / s) * st->L + kx / s;
}

/* Padded input value at padded (Y, X) of one channel plane (h×w). */
static inline float padded_at(const nj_dconv *D, const float *plane, int Y, int X)
{
    int iy = Y - D->pad, ix = X - D->pad;
    if (Y >= D->h + 2 * D->pad || X >= D->w + 2 * D->pad) return 0.0f;
    if (iy < 0 || iy >= D->h || ix < 0 || ix >= D->w) {
        if (!D->reflect) return 0.0f;
        iy = reflect_index(iy, D->h);
        ix = reflect_index(ix, D->w);
    }
    return plane[(size_t)iy * D->w + ix];
}

static int ceil_div(int a, int s) { return a >= 0 ? (a + s - 1) / s : -((-a) / s); }

/* One row of phase plane column px: padded row Y, padded columns s·j + px for
 * j ∈ [0, L) (the columns inside the image copied directly, the rest through
 * padded_at). */
static void fill_row(const nj_dconv *D, float *dst, const float *plane, int Y, int px, int L)
{
    int iy = Y - D->pad, p = D->pad, w = D->w, s = D->stride;
    int valid = Y < D->h + 2 * p && ((iy >= 0 && iy < D->h) || D->reflect);
    if (!valid) {
        memset(dst, 0, sizeof(float) * (size_t)L);
        return;
    }
    const float *src = plane + (size_t)reflect_index(iy, D->h) * w;
    int j0 = ceil_div(p - px, s), j1 = ceil_div(w + p - px, s);
    if (j0 < 0) j0 = 0;
    if (j0 > L) j0 = L;
    if (j1 > L) j1 = L;
    if (j1 < j0) j1 = j0;
    for (int j = 0; j < j0; j++) dst[j] = padded_at(D, plane, Y, s * j + px);
    int off = px - p; /* s·j + off ∈ [0, w) for j ∈ [j0, j1) */
    if (s == 1) {
        if (j1 > j0) memcpy(dst + j0, src + j0 + off, sizeof(float) * (size_t)(j1 - j0));
    } else {
        for (int j = j0; j < j1; j++) dst[j] = src[s * j + off];
    }
    for (int j = j1; j < L; j++) dst[j] = padded_at(D, plane, Y, s * j + px);
}

/* Stages output rows [oy0, oy0 + st->rows) of channels [c0, c1) of sample xn
 * into buf (channel c at buf + (c − c0)·cs). */
static void stage_fill(const nj_dconv *D, const stage *st, const float *xn, int oy0, int c0, int c1,
                       float *buf)
{
    int s = st->s, L = st->L;
    size_t hw = (size_t)D->h * D->w, used = (size_t)st->prow * L;
    for (int c = c0; c < c1; c++)
        for (int py = 0; py < s; py++)
            for (int px = 0; px < s; px++) {
                float *pl = buf + (c - c0) * st->cs + (size_t)(py * s + px) * st->ps;
                const float *src = xn + c * hw;
                for (int i = 0; i < st->prow; i++) {
                    float *d = pl + (size_t)i * L;
                    int Y = s * (oy0 + i) + py;
                    fill_row(D, d, src, Y, px, L);
                }
                memset(pl + used, 0, sizeof(float) * (st->ps - used));
            }
}

/* Stages output rows [oy0, oy1) of channels [c0, c1) of sample n: geometry,
 * tap offsets, data. */
static void stage_band(const nj_dconv *D, const float *x, int n, int oy0, int oy1, int c0, int c1,
                       float *buf, stage *st, int *off)
{
    stage_geom(D, oy1 - oy0, st);
    stage_taps(D, st, off);
    stage_fill(D, st, x + (size_t)n * D->cin * D->h * D->w, oy0, c0, c1, buf);
}

/* Band height for `rows` rows whose staged rows hold `row_floats` floats: fits
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

/* Floats of one thread's staged band of `rows` output rows. */
static size_t stage_floats(const nj_dconv *D, int rows)
{
    stage st;
    stage_geom(D, rows, &st);
    return (size_t)D->cin * st.cs;
}

/* ---- forward ------------------------------------------------------------ */

static int fwd_band(const nj_dconv *D)
{
    long row = (long)D->cin * D->stride * D->stride * (D->ow + D->kw);
    return band_height(D->oh, row, BAND_BYTES, (D->kh - 1) / D->stride, 1, MIN_BANDS);
}

static size_t fwd_per_thread(const nj_dconv *D, int band)
{
    int rows = last_band_rows(D->oh, band);
    stage st;
    stage_geom(D, rows, &st);
    size_t out = (size_t)D->cout * round_upz((size_t)rows * st.L, VL);
    return round_upz(stage_floats(D, rows) + out, VL);
}

static size_t weight_floats(const nj_dconv *D)
{
    return round_upz((size_t)D->cin * D->kh * D->kw * D->cout, VL);
}

size_t nj_dconv_forward_scratch(const nj_dconv *D, int threads)
{
    return weight_floats(D) + (size_t)threads * fwd_per_thread(D, fwd_band(D));
}

/* wt[(c·taps + t)·cout + o] = w[o][c][t]; channels in parallel (each writes
 * its own block). */
static void forward_weights(const nj_dconv *D, const float *w, float *wt)
{
    int taps = D->kh * D->kw;
    #pragma omp parallel for schedule(static) if ((long)D->cin * taps * D->cout > 65536)
    for (int c = 0; c < D->cin; c++)
        for (int t = 0; t < taps; t++)
            for (int o = 0; o < D->cout; o++)
                wt[((size_t)c * taps + t) * D->cout + o] = w[((size_t)o * D->cin + c) * taps + t];
}

static void forward_item(const nj_dconv *D, const float *x, const float *wt, const float *b,
                         float *y, int n, int oy0, int oy1, float *buf)
{
    stage st;
    int off[MAX_TAPS];
    stage_band(D, x, n, oy0, oy1, 0, D->cin, buf, &st, off);
    int nq = st.rows * st.L;
    size_t oq = round_upz((size_t)nq, VL), ohw = (size_t)D->oh * D->ow;
    float *tmp = buf + (size_t)D->cin * st.cs;
    corr_src S = {buf, st.cs, off, D->kh * D->kw, wt, D->cin, D->cout};
    correlate(&S, b, tmp, oq, nq);
    float *yn = y + (size_t)n * D->cout * ohw + (size_t)oy0 * D->ow;
    for (int o = 0; o < D->cout; o++)
        for (int r = 0; r < st.rows; r++)
            memcpy(yn + o * ohw + (size_t)r * D->ow, tmp + o * oq + (size_t)r * st.L,
                   sizeof(float) * (size_t)D->ow);
}

void nj_dconv_forward(const nj_dconv *D, const float *x, const float *w, const float *b,
                      float *y, float *scratch, int par)
{
    int band = fwd_band(D), nb = band_count(D->oh, band), items = D->n * nb;
    size_t wsz = weight_floats(D), per = fwd_per_thread(D, band);
    forward_weights(D, w, scratch);
    #pragma omp parallel for schedule(dynamic, 1) if (par)
    for (int it = 0; it < items; it++) {
        int k = it % nb, oy0 = k * band, oy1 = k == nb - 1 ? D->oh : oy0 + band;
        forward_item(D, x, scratch, b, y, it / nb, oy0, oy1,
                     scratch + wsz + (size_t)omp_get_thread_num() * per);
    }
}

/* ---- weight gradient ----------------------------------------------------
 * dW[o][c][t] = Σ_q dy[o][q] · staged[c][off[t] + q] over the valid positions
 * of each (sample, band).
 *
 * From 16 output channels on, the kernel runs along output channels: dy of
 * the whole batch is transposed to position-major rows of cp = cout rounded
 * up to 16 floats, and a block of 9 (channel, tap) combinations × 16 or 32
 * output channels is held in vector registers while a band's positions
 * stream past (one broadcast input value and 1–2 dy vectors per position; no
 * horizontal sums).  Chunks of combination groups go to whichever thread is
 * free and accumulate into a shared transposed dwt[combination][cp], which is
 * added into dW at the end; every element is summed by one thread in item
 * order, so dW does not depend on the thread count or the schedule.
 *
 * Below 16 output channels (the disparity heads) the kernel runs along
 * positions: 9 taps × 2 output channels of position vectors, reduced once per
 * band; items (sample, band) go to threads statically, each adding into its
 * own partial dW, and the partials are summed in thread order (reproducible
 * at a given thread count). */

#define NINE(M) M(0) M(1) M(2) M(3) M(4) M(5) M(6) M(7) M(8)

/* -- along output channels -- */

#define GO_DECL1(i) vf a##i##_0 = (vf){0}; const float *x##i = xp[i];
#define GO_DECL2(i) vf a##i##_0 = (vf){0}, a##i##_1 = (vf){0}; const float *x##i = xp[i];
#define GO_FMA1(i) { float v = x##i[q]; a##i##_0 += g0 * v; }
#define GO_FMA2(i) { float v = x##i[q]; a##i##_0 += g0 * v; a##i##_1 += g1 * v; }
#define GO_ADD1(i) if (i < m) { *(vfu *)(pt + (size_t)(i) * cp) += a##i##_0; }
#define GO_ADD2(i) if (i < m) { *(vfu *)(pt + (size_t)(i) * cp) += a##i##_0; \
                                *(vfu *)(pt + (size_t)(i) * cp + VL) += a##i##_1; }

/* Geometry of one band for the kernels below: rows × ow valid positions at
 * flat index r·L + j of the staged input, dy rows of cp floats. */
typedef struct dwo_band {
    int rows, ow, L;
    size_t cp;
} dwo_band;

/* pt[i][0..NO·16) += Σ_pos dyt[pos][0..NO·16) · xp[i][q(pos)] for i < m. */
#define DWO_KERNEL(name, NOV, DECL, FMA, ADD)                                          \
    static void name(const dwo_band *B, const float *dyt, const float *const *xp, int m, \
                     float *pt)                                                         \
    {                                                                                   \
        size_t cp = B->cp;                                                              \
        NINE(DECL)                                                                      \
        for (int r = 0; r < B->rows; r++) {                                             \
            const float *dr = dyt + (size_t)r * B->ow * cp;                             \
            for (int j = 0, q = r * B->L; j < B->ow; j++, q++, dr += cp) {              \
                vf g0 = *(const vfu *)dr, g1 = g0;                                      \
                if (NOV > 1) g1 = *(const vfu *)(dr + VL);                              \
                (void)g1;                                                               \
                NINE(FMA)                                                               \
            }                                                                           \
        }                                                                               \
        NINE(ADD)                                                                       \
    }
DWO_KERNEL(dwo_32, 2, GO_DECL2, GO_FMA2, GO_ADD2)
DWO_KERNEL(dwo_16, 1, GO_DECL1, GO_FMA1, GO_ADD1)

static size_t dwo_cp(const nj_dconv *D) { return round_upz((size_t)D->cout, VL); }

/* dy rows [oy0, oy0 + rows) of sample n → dyt[pos][o] (pos = r·ow + j), zero
 * for o ≥ cout; in blocks of 16 positions so reads and writes stay in cache. */
static void dwo_transpose(const nj_dconv *D, const float *dy, int n, int oy0, int rows, float *dyt)
{
    size_t cp = dwo_cp(D), ohw = (size_t)D->oh * D->ow, np = (size_t)rows * D->ow;
    const float *src = dy + (size_t)n * D->cout * ohw + (size_t)oy0 * D->ow;
    for (size_t p0 = 0; p0 < np; p0 += VL) {
        size_t pe = p0 + VL < np ? p0 + VL : np;
        for (int o = 0; o < D->cout; o++) {
            const float *so = src + (size_t)o * ohw;
            for (size_t p = p0; p < pe; p++) dyt[p * cp + (size_t)o] = so[p];
        }
        for (size_t p = p0; p < pe; p++)
            for (size_t o = (size_t)D->cout; o < cp; o++) dyt[p * cp + o] = 0.0f;
    }
}

/* Adds combinations [k0, k1) of one staged band (channel c at staged +
 * (c − c0)·cs) into the transposed gradient dwt[k][cp]. */
static void dwo_range(const nj_dconv *D, const stage *st, const int *off, const float *staged,
                      int c0, const float *dyt, int k0, int k1, float *dwt)
{
    int taps = D->kh * D->kw;
    dwo_band B = {st->rows, D->ow, st->L, dwo_cp(D)};
    for (size_t o0 = 0; o0 < B.cp; o0 += 2 * VL) {
        int wide = o0 + 2 * VL <= B.cp;
        for (int g = k0; g < k1; g += 9) {
            const float *xp[9];
            int m = k1 - g < 9 ? k1 - g : 9;
            for (int i = 0; i < 9; i++) {
                int k = g + (i < m ? i : 0);
                xp[i] = staged + (size_t)(k / taps - c0) * st->cs + off[k % taps];
            }
            float *pt = dwt + (size_t)g * B.cp + o0;
            if (wide) dwo_32(&B, dyt + o0, xp, m, pt);
            else dwo_16(&B, dyt + o0, xp, m, pt);
        }
    }
}

/* Combinations [k0, k1) over every (sample, band), with dy already transposed
 * for the whole batch (dyt_all, sample n at n·oh·ow·cp). */
static void dwo_chunk(const nj_dconv *D, const float *x, const float *dyt_all, int band, int k0,
                      int k1, float *buf, float *dwt)
{
    int taps = D->kh * D->kw, nb = band_count(D->oh, band);
    int c0 = k0 / taps, c1 = (k1 + taps - 1) / taps, off[MAX_TAPS];
    size_t cp = dwo_cp(D);
    memset(dwt + (size_t)k0 * cp, 0, sizeof(float) * (size_t)(k1 - k0) * cp);
    for (int it = 0; it < D->n * nb; it++) {
        int n = it / nb, k = it % nb, oy0 = k * band, oy1 = k == nb - 1 ? D->oh : oy0 + band;
        stage st;
        stage_band(D, x, n, oy0, oy1, c0, c1, buf, &st, off);
        const float *dyt = dyt_all + ((size_t)n * D->oh + (size_t)oy0) * D->ow * cp;
        dwo_range(D, &st, off, buf, c0, dyt, k0, k1, dwt);
    }
}

/* -- along positions (fewer than 16 output channels) -- */

static inline float hsum(vf a)
{
    float t[VL], s = 0.0f;
    *(vfu *)t = a;
    for (int i = 0; i < VL; i++) s += t[i];
    return s;
}

#define DW_DECL(k) vf p##k = (vf){0}, r##k = (vf){0}; const float *x##k = in + off[k];
#define DW_FMA2(k) { vf xv = *(const vfu *)(x##k + q); p##k += g0 * xv; r##k += g1 * xv; }
#define DW_FMA1(k) { vf xv = *(const vfu *)(x##k + q); p##k += g0 * xv; }
#define DW_OUT(k) s0[k] = hsum(p##k); s1[k] = hsum(r##k);

/* Nine taps (offsets off[0..9)) of one staged channel against dy channels d0
 * and d1 (d1 may equal d0) over nq flat positions → s0[9], s1[9]. */
static void dw_nine(const float *in, const int *off, const float *d0, const float *d1, int nq,
                    int pair, float *s0, float *s1)
{
    NINE(DW_DECL)
    if (pair) {
        for (int q = 0; q < nq; q += VL) {
            vf g0 = *(const vfu *)(d0 + q), g1 = *(const vfu *)(d1 + q);
            NINE(DW_FMA2)
        }
    } else {
        for (int q = 0; q < nq; q += VL) {
            vf g0 = *(const vfu *)(d0 + q);
            NINE(DW_FMA1)
        }
    }
    NINE(DW_OUT)
}

/* Adds one staged channel's taps against dy channels o (and o+1 when pair). */
static void dw_channel(const nj_dconv *D, const float *in, const int *off, const float *d0,
                       const float *d1, int nq, int pair, float *p0, float *p1)
{
    int taps = D->kh * D->kw;
    for (int t0 = 0; t0 < taps; t0 += 9) {
        int o9[9], m = taps - t0 < 9 ? taps - t0 : 9;
        float s0[9], s1[9];
        for (int k = 0; k < 9; k++) o9[k] = off[t0 + (k < m ? k : 0)];
        dw_nine(in, o9, d0, d1, nq, pair, s0, s1);
        for (int k = 0; k < m; k++) {
            p0[t0 + k] += s0[k];
            if (pair) p1[t0 + k] += s1[k];
        }
    }
}

/* dy rows of sample n laid out like the staged outputs (row stride L, zeros
 * in the dropped columns), then the taps of every channel pair. */
static void dwq_item(const nj_dconv *D, const stage *st, const int *off, const float *staged,
                     const float *dy, int n, int oy0, float *dyb, float *part)
{
    int nq = st->rows * st->L, taps = D->kh * D->kw;
    size_t oq = round_upz((size_t)nq, VL), ohw = (size_t)D->oh * D->ow;
    const float *dyn = dy + (size_t)n * D->cout * ohw + (size_t)oy0 * D->ow;
    for (int o = 0; o < D->cout; o++) {
        float *d = dyb + o * oq;
        memset(d, 0, sizeof(float) * oq);
        for (int r = 0; r < st->rows; r++)
            memcpy(d + (size_t)r * st->L, dyn + o * ohw + (size_t)r * D->ow, sizeof(float) * (size_t)D->ow);
    }
    size_t wc = (size_t)D->cin * taps;
    for (int o = 0; o < D->cout; o += 2) {
        int pair = o + 1 < D->cout;
        for (int c = 0; c < D->cin; c++)
            dw_channel(D, staged + c * st->cs, off, dyb + o * oq, dyb + (o + pair) * oq, (int)oq, pair,
                       part + o * wc + (size_t)c * taps, part + (o + pair) * wc + (size_t)c * taps);
    }
}

/* -- both -- */

static int dw_along_outputs(const nj_dconv *D) { return D->cout >= VL; }

static int dw_band(const nj_dconv *D)
{
    /* sized as measured: a staged row of every input channel plus a dy row
     * (along outputs a chunk stages only its channels and dy lives elsewhere,
     * so the band is smaller than the budget needs; changing it reorders sums) */
    int L = D->ow + D->kw;
    long row = (long)D->cin * D->stride * D->stride * L + (long)round_up(D->cout, VL) * L;
    /* along positions: bands of ≥ DW_MIN_PIXELS keep the per-band reductions cheap */
    int min_rows = dw_along_outputs(D) ? 1 : (DW_MIN_PIXELS + D->ow - 1) / D->ow;
    return band_height(D->oh, row, DW_BAND_BYTES, (D->kh - 1) / D->stride, min_rows, 1);
}

/* Floats of one thread's partial dW (along positions) or of the shared
 * transposed dW (along outputs). */
static size_t dw_part_floats(const nj_dconv *D)
{
    size_t kk = (size_t)D->cin * D->kh * D->kw;
    return round_upz(kk * (dw_along_outputs(D) ? dwo_cp(D) : (size_t)D->cout), VL);
}

static size_t dw_per_thread(const nj_dconv *D, int band)
{
    int rows = last_band_rows(D->oh, band);
    if (dw_along_outputs(D)) return round_upz(stage_floats(D, rows), VL);
    stage st;
    stage_geom(D, rows, &st);
    size_t dy = (size_t)D->cout * round_upz((size_t)rows * st.L, VL);
    return round_upz(stage_floats(D, rows) + round_upz(dy, VL), VL) + dw_part_floats(D);
}

/* Along outputs: the whole batch's dy transposed, then the shared dwt. */
static size_t dwo_shared_floats(const nj_dconv *D)
{
    return round_upz((size_t)D->n * D->oh * D->ow * dwo_cp(D), VL) + dw_part_floats(D);
}

size_t nj_dconv_dw_scratch(const nj_dconv *D, int threads)
{
    return (size_t)threads * dw_per_thread(D, dw_band(D)) +
           (dw_along_outputs(D) ? dwo_shared_floats(D) : 0);
}

/* Along positions: item (sample, band) added into one thread's partial part[o][k]. */
static void dwq_band(const nj_dconv *D, const float *x, const float *dy, int n, int oy0, int oy1,
                     float *buf, float *part)
{
    stage st;
    int off[MAX_TAPS];
    stage_band(D, x, n, oy0, oy1, 0, D->cin, buf, &st, off);
    dwq_item(D, &st, off, buf, dy, n, oy0, buf + (size_t)D->cin * st.cs, part);
}

/* Along positions: (sample, band) items split across threads, each adding into
 * its own partial; the partials are summed in thread order. */
static void dwq_all(const nj_dconv *D, const float *x, const float *dy, float *dw, float *scratch,
                    int par)
{
    int band = dw_band(D), nb = band_count(D->oh, band), items = D->n * nb;
    int threads = par ? omp_get_max_threads() : 1;
    size_t per = dw_per_thread(D, band), pf = dw_part_floats(D);
    size_t wsize = (size_t)D->cout * D->cin * D->kh * D->kw;
    #pragma omp parallel num_threads(threads) if (par)
    {
        float *buf = scratch + (size_t)omp_get_thread_num() * per;
        float *part = buf + per - pf;
        memset(part, 0, sizeof(float) * pf);
        /* static: a thread gets the same items every step (reproducible dW) */
        #pragma omp for schedule(static)
        for (int it = 0; it < items; it++) {
            int k = it % nb, oy0 = k * band, oy1 = k == nb - 1 ? D->oh : oy0 + band;
            dwq_band(D, x, dy, it / nb, oy0, oy1, buf, part);
        }
    }
    for (int t = 0; t < threads; t++) {
        const float *part = scratch + (size_t)(t + 1) * per - pf;
        for (size_t i = 0; i < wsize; i++) dw[i] += part[i];
    }
}

/* Along outputs: dy is transposed for the whole batch, then chunks of whole
 * groups of 9 combinations are taken by whichever thread is free (the two
 * cores of a VM need not run at the same speed), each over every item into the
 * shared dwt[k][cp]; then dw[o][k] += dwt[k][o].  Every element is summed by
 * one thread in item order, whatever the thread count or the schedule. */
static void dwo_all(const nj_dconv *D, const float *x, const float *dy, float *dw, float *scratch,
                    int par)
{
    int band = dw_band(D), threads = par ? omp_get_max_threads() : 1;
    int kk = D->cin * D->kh * D->kw, groups = (kk + 8) / 9, rows_per = 8;
    int chunks = par ? (groups < 4 * threads ? groups : 4 * threads) : 1;
    int row_items = D->n * ((D->oh + rows_per - 1) / rows_per), per_n = row_items / D->n;
    size_t cp = dwo_cp(D), per = dw_per_thread(D, band);
    float *dyt_all = scratch + (size_t)threads * per;
    float *dwt = dyt_all + round_upz((size_t)D->n * D->oh * D->ow * cp, VL);
    #pragma omp parallel num_threads(threads) if (par)
    {
        float *buf = scratch + (size_t)omp_get_thread_num() * per;
        #pragma omp for schedule(dynamic, 1)
        for (int it = 0; it < row_items; it++) {
            int n = it / per_n, oy0 = (it % per_n) * rows_per;
            int rows = oy0 + rows_per < D->oh ? rows_per : D->oh - oy0;
            dwo_transpose(D, dy, n, oy0, rows, dyt_all + ((size_t)n * D->oh + (size_t)oy0) * D->ow * cp);
        }
        #pragma omp for schedule(dynamic, 1)
        for (int c = 0; c < chunks; c++) {
            int k0 = 9 * (int)((long)groups * c / chunks), k1 = 9 * (int)((long)groups * (c + 1) / chunks);
            if (k1 > kk) k1 = kk;
            if (k0 < k1) dwo_chunk(D, x, dyt_all, band, k0, k1, buf, dwt);
        }
        #pragma omp for schedule(dynamic, 4)
        for (int kb = 0; kb < kk; kb += VL) {
            int ke = kb + VL < kk ? kb + VL : kk;
            for (int o = 0; o < D->cout; o++)
                for (int k = kb; k < ke; k++) dw[(size_t)o * kk + k] += dwt[(size_t)k * cp + o];
        }
    }
}

void nj_dconv_backward_dw(const nj_dconv *D, const float *x, const float *dy, float *dw,
                          float *scratch, int par)
{
    if (dw_along_outputs(D)) dwo_all(D, x, dy, dw, scratch, par);
    else dwq_all(D, x, dy, dw, scratch, par);
}

/* ---- input gradient -----------------------------------------------------
 * For stride s, input phase (py, px) — padded pixels (s·i + py, s·j + px) —
 * receives tap (ky, kx) ≡ (py, px) mod s only:
 *     dxp[c][i][j] = Σ_o Σ_taps w[o][c][ky][kx] · dy[o][i − a][j − b],
 * a = (ky − py)/s, b = (kx − px)/s: a stride-1 correlation of dy, zero-
 * extended by Ey = (kh−1)/s rows and Ex = (kw−1)/s columns, at offset
 * (Ey − a, Ex − b).  A band owns dx rows [y0, y1): it computes the padded
 * rows that land there (with the top/bottom padding rows if it is the
 * first/last band) and folds the padding back.  Bands are at least pad+1
 * rows, so every reflected row lands inside its own band and bands never
 * write the same row. */

typedef struct dx_geom {
    int s, Ey, Ex, wq, L;   /* stride, zero extension, phase width, row stride */
} dx_geom;

static void dx_geom_init(const nj_dconv *D, dx_geom *G)
{
    int wp = D->w + 2 * D->pad;
    G->s = D->stride;
    G->Ey = (D->kh - 1) / G->s;
    G->Ex = (D->kw - 1) / G->s;
    G->wq = (wp + G->s - 1) / G->s;
    G->L = G->wq + G->Ex;
}

static int dx_band(const nj_dconv *D)
{
    dx_geom G;
    dx_geom_init(D, &G);
    long row = (long)(D->cout + D->cin) * G.L / G.s;
    return band_height(D->h, row, 2 * BAND_BYTES, G.Ey, D->pad + 1, MIN_BANDS);
}

/* Phase rows of a band of `rows` dx rows (with the padding rows), and the dy rows it reads. */
static int dx_phase_rows(const nj_dconv *D, int rows) { return (rows + 2 * D->pad) / D->stride + 1; }

static size_t dx_in_floats(const nj_dconv *D, const dx_geom *G, int rows)
{
    return round_upz((size_t)(dx_phase_rows(D, rows) + G->Ey) * G->L + slack(D->kw), VL);
}

static size_t dx_per_thread(const nj_dconv *D, int band)
{
    dx_geom G;
    dx_geom_init(D, &G);
    int rows = last_band_rows(D->h, band);
    size_t out = round_upz((size_t)dx_phase_rows(D, rows) * G.L, VL);
    return round_upz((size_t)D->cout * dx_in_floats(D, &G, rows) + (size_t)D->cin * out, VL);
}

size_t nj_dconv_dx_scratch(const nj_dconv *D, int threads)
{
    return weight_floats(D) + (size_t)threads * dx_per_thread(D, dx_band(D));
}

/* Per phase (py, px) in order: its taps' weights wt[(o·ntaps + t)·cin + c]; the
 * phases' weights follow one another. */
static void dx_weights(const nj_dconv *D, const float *w, float *wt)
{
    int s = D->stride;
    size_t base = 0;
    for (int py = 0; py < s; py++)
        for (int px = 0; px < s; px++) {
            int ny = (D->kh - py + s - 1) / s, nx = (D->kw - px + s - 1) / s;
            size_t per_o = (size_t)ny * nx * D->cin;
            #pragma omp parallel for schedule(static) if ((long)per_o * D->cout > 65536)
            for (int o = 0; o < D->cout; o++) {
                float *d = wt + base + (size_t)o * per_o;
                for (int ky = py; ky < D->kh; ky += s)
                    for (int kx = px; kx < D->kw; kx += s)
                        for (int c = 0; c < D->cin; c++)
                            *d++ = w[(((size_t)o * D->cin + c) * D->kh + ky) * D->kw + kx];
            }
            base += per_o * D->cout;
        }
}

/* Tap offsets of phase (py, px); returns the tap count. */
static int dx_taps(const nj_dconv *D, const dx_geom *G, int py, int px, int *off)
{
    int n = 0;
    for (int ky = py; ky < D->kh; ky += G->s)
        for (int kx = px; kx < D->kw; kx += G->s)
            off[n++] = (G->Ey - (ky - py) / G->s) * G->L + (G->Ex - (kx - px) / G->s);
    return n;
}

/* dy zero-extended, rows [i0, i0 + rows) of the extended grid, into buf (plane stride ps). */
static void dx_fill(const nj_dconv *D, const dx_geom *G, const float *dyn, int i0, int rows,
                    float *buf, size_t ps)
{
    size_t ohw = (size_t)D->oh * D->ow;
    for (int o = 0; o < D->cout; o++) {
        float *pl = buf + o * ps;
        memset(pl, 0, sizeof(float) * ps);
        for (int r = 0; r < rows; r++) {
            int src = i0 + r - G->Ey;
            if (src >= 0 && src < D->oh)
                memcpy(pl + (size_t)r * G->L + G->Ex, dyn + o * ohw + (size_t)src * D->ow,
                       sizeof(float) * (size_t)D->ow);
        }
    }
}

/* Adds one phase row (entries j < wq: padded column s·j + px) to dx row d. */
static void dx_fold_row(const nj_dconv *D, const dx_geom *G, const float *src, int px, float *d)
{
    int s = G->s, p = D->pad, w = D->w, wp = w + 2 * p;
    int jlo = ceil_div(p - px, s), jhi = ceil_div(w + p - px, s);
    if (jlo < 0) jlo = 0;
    if (jhi > G->wq) jhi = G->wq;
    if (s == 1) {
        float *dd = d - p;
        #pragma omp simd
        for (int j = jlo; j < jhi; j++) dd[j] += src[j];
    } else {
        for (int j = jlo; j < jhi; j++) d[s * j + px - p] += src[j];
    }
    if (!D->reflect) return;
    for (int j = 0; j < jlo; j++) d[reflect_index(s * j + px - p, w)] += src[j];
    for (int j = jhi; j < G->wq && s * j + px < wp; j++) d[reflect_index(s * j + px - p, w)] += src[j];
}

/* Adds phase rows [i0, i1) of (py, px) — tmp, row stride L — to dx, folding the padding. */
static void dx_fold(const nj_dconv *D, const dx_geom *G, const float *tmp, size_t oq, int py, int px,
                    int i0, int i1, float *dxn)
{
    for (int c = 0; c < D->cin; c++)
        for (int i = i0; i < i1; i++) {
            int iy = G->s * i + py - D->pad;
            if (iy < 0 || iy >= D->h) {
                if (!D->reflect) continue;
                iy = reflect_index(iy, D->h);
            }
            dx_fold_row(D, G, tmp + c * oq + (size_t)(i - i0) * G->L, px,
                        dxn + ((size_t)c * D->h + iy) * D->w);
        }
}

static void dx_item(const nj_dconv *D, const float *dy, const float *wt, float *dx,
                    int n, int y0, int y1, float *buf)
{
    dx_geom G;
    dx_geom_init(D, &G);
    int p = D->pad, Ya = y0 == 0 ? 0 : y0 + p, Yb = y1 == D->h ? D->h + 2 * p : y1 + p;
    size_t ps = dx_in_floats(D, &G, y1 - y0), ohw = (size_t)D->oh * D->ow;
    float *tmp = buf + (size_t)D->cout * ps;
    const float *dyn = dy + (size_t)n * D->cout * ohw;
    float *dxn = dx + (size_t)n * D->cin * D->h * D->w;
    for (int py = 0; py < G.s; py++)
        for (int px = 0; px < G.s; px++) {
            int off[MAX_TAPS], taps = dx_taps(D, &G, py, px, off);
            const float *wp = wt;
            wt += (size_t)taps * D->cout * D->cin;
            int i0 = ceil_div(Ya - py, G.s), i1 = ceil_div(Yb - py, G.s);
            if (taps == 0 || i1 <= i0) continue;
            dx_fill(D, &G, dyn, i0, i1 - i0 + G.Ey, buf, ps);
            int nq = (i1 - i0) * G.L;
            size_t oq = round_upz((size_t)nq, VL);
            corr_src S = {buf, ps, off, taps, wp, D->cout, D->cin};
            correlate(&S, NULL, tmp, oq, nq);
            dx_fold(D, &G, tmp, oq, py, px, i0, i1, dxn);
        }
}

void nj_dconv_backward_dx(const nj_dconv *D, const float *dy, const float *w, float *dx,
                          float *scratch, int par)
{
    int band = dx_band(D), nb = band_count(D->h, band), items = D->n * nb;
    size_t wsz = weight_floats(D), per = dx_per_thread(D, band);
    dx_weights(D, w, scratch);
    #pragma omp parallel for schedule(dynamic, 1) if (par)
    for (int it = 0; it < items; it++) {
        int k = it % nb, y0 = k * band, y1 = k == nb - 1 ? D->h : y0 + band;
        dx_item(D, dy, scratch, dx, it / nb, y0, y1,
                scratch + wsz + (size_t)omp_get_thread_num() * per);
    }
}

int nj_dconv_suits(const nj_dconv *D, int backward)
{
    if (D->kh * D->kw > MAX_TAPS || (D->stride != 1 && D->stride != 2) || D->kh * D->kw == 1) return 0;
    /* measured per layer of the default nets (320x96, 1 thread, forward and
     * backward timed apart): im2col + sgemm wins only where a sample's output
     * map is tiny (the 3×10 bottleneck: 30 positions fill 16-lane vectors
     * poorly), and for 3×3 stride-2 forwards from few input channels (a
     * quarter of the taps per phase, too little work to hide the staging).
     * At stride 2 the backward pass always (the weight gradient's positions
     * stream past 9 taps × 32 channels held in registers), the forward pass for
     * the pose net's 7×7 and 5×5 kernels on maps of ≥ 40 columns and for 3×3
     * kernels from ≥ 32 channels onto ≥ 64 positions.  (The stride-2 rules
     * were timed before stride-2 staging copied whole row spans; re-time the
     * small 3×3 stride-2 forwards before relying on that reason.) */
    int positions = D->oh * D->ow;
    if (D->stride == 2)
        return backward || (D->kh * D->kw >= 25 && D->ow >= 40) ||
               (D->cin >= 32 && positions >= 64);
    return D->cout <= 128 || positions >= 64;
}

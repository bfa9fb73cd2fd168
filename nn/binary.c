/* nn/binary.c — elementwise add, sub, mul, div and minimum with per-dimension
 * broadcasting (a size-1 dimension stretches to the other operand's size).
 *
 * Work is organised in output rows (the W extent of one (n, c, y)): inside a
 * row each operand is either contiguous or a single broadcast value, so the
 * inner loops are plain vectorisable loops.  When both operands are either
 * output-shaped or scalars the whole tensor is treated as one long row cut
 * into chunks.  This covers the common patterns (same shape, per-channel
 * 1×C×1×1, scalar, N×1×H×W against N×C×H×W) without special cases, and any
 * other broadcast falls out of the same row walk.
 *
 * Backward: an operand shaped like the output receives its gradient row by
 * row.  A broadcast operand is reduced without races by giving each thread
 * whole rows *of the operand*: the thread walks every output row that maps to
 * its operand row and accumulates there (a per-thread scratch row collects the
 * sum when W itself is broadcast).  A scalar operand uses an OpenMP reduction.
 */
#include "nn/ops.h"
#include <omp.h>
#include <string.h>

/* Below this many output elements a loop runs on one thread. */
enum { PAR_MIN = 1 << 14 };
/* Chunk length of the flat (whole tensor as one row) path. */
enum { CHUNK = 4096 };

typedef enum { BIN_ADD, BIN_SUB, BIN_MUL, BIN_DIV, BIN_MIN } bin_kind;
/* What a row kernel computes: the output, or d(out)/d(a or b) times the
 * upstream gradient, accumulated. */
typedef enum { MODE_FWD, MODE_GA, MODE_GB } bin_mode;

static const char *const kind_name[] = {"add", "sub", "mul", "div", "minimum"};

/* Runs STMT for i in [0, len) with u = a's value and v = b's value at i;
 * a stride of 0 means the operand is one broadcast value for the whole row. */
#define PAIR_LOOP(STMT) do {                                                   \
    if (sa && sb) {                                                            \
        for (long i = 0; i < len; i++) {                                       \
            const float u = a[i], v = b[i]; (void)u; (void)v; STMT; }          \
    } else if (sa) {                                                           \
        const float v = b[0]; (void)v;                                         \
        for (long i = 0; i < len; i++) { const float u = a[i]; (void)u; STMT; } \
    } else if (sb) {                                                           \
        const float u = a[0]; (void)u;                                         \
        for (long i = 0; i < len; i++) { const float v = b[i]; (void)v; STMT; } \
    } else {                                                                   \
        const float u = a[0], v = b[0]; (void)u; (void)v;                      \
        for (long i = 0; i < len; i++) { STMT; }                               \
    }                                                                          \
} while (0)

static void forward_row(bin_kind k, const float *a, int sa, const float *b, int sb,
                        float *dst, long len)
{
    switch (k) {
    case BIN_ADD: PAIR_LOOP(dst[i] = u + v); break;
    case BIN_SUB: PAIR_LOOP(dst[i] = u - v); break;
    case BIN_MUL: PAIR_LOOP(dst[i] = u * v); break;
    case BIN_DIV: PAIR_LOOP(dst[i] = u / v); break;
    case BIN_MIN: PAIR_LOOP(dst[i] = v < u ? v : u); break;
    }
}

/* dst += gy * d(out)/da. */
static void grad_a_row(bin_kind k, const float *gy, const float *a, int sa,
                       const float *b, int sb, float *dst, long len)
{
    switch (k) {
    case BIN_ADD:
    case BIN_SUB: for (long i = 0; i < len; i++) dst[i] += gy[i]; break;
    case BIN_MUL: PAIR_LOOP(dst[i] += gy[i] * v); break;
    case BIN_DIV: PAIR_LOOP(dst[i] += gy[i] / v); break;
    case BIN_MIN: PAIR_LOOP(dst[i] += u <= v ? gy[i] : 0.0f); break;
    }
}

/* dst += gy * d(out)/db. */
static void grad_b_row(bin_kind k, const float *gy, const float *a, int sa,
                       const float *b, int sb, float *dst, long len)
{
    switch (k) {
    case BIN_ADD: for (long i = 0; i < len; i++) dst[i] += gy[i]; break;
    case BIN_SUB: for (long i = 0; i < len; i++) dst[i] -= gy[i]; break;
    case BIN_MUL: PAIR_LOOP(dst[i] += gy[i] * u); break;
    case BIN_DIV: PAIR_LOOP(dst[i] -= (gy[i] / v) * (u / v)); break;
    case BIN_MIN: PAIR_LOOP(dst[i] += v < u ? gy[i] : 0.0f); break;
    }
}

static void row_kernel(bin_kind k, bin_mode m, const float *gy, const float *a, int sa,
                       const float *b, int sb, float *dst, long len)
{
    if (m == MODE_FWD) forward_row(k, a, sa, b, sb, dst, len);
    else if (m == MODE_GA) grad_a_row(k, gy, a, sa, b, sb, dst, len);
    else grad_b_row(k, gy, a, sa, b, sb, dst, len);
}

/* Offset of t's row feeding output row (n, c, y): broadcast dims index 0. */
static size_t row_offset(const nj_tensor *t, int n, int c, int y)
{
    size_t tn = t->n == 1 ? 0 : (size_t)n, tc = t->c == 1 ? 0 : (size_t)c;
    size_t ty = t->h == 1 ? 0 : (size_t)y;
    return ((tn * (size_t)t->c + tc) * (size_t)t->h + ty) * (size_t)t->w;
}

/* 1 when t's W extent is contiguous in an output row, 0 when broadcast. */
static int w_stride(const nj_tensor *t, const nj_tensor *y)
{
    return t->w == y->w ? 1 : 0;
}

/* Output-shaped or a single value: usable in the flat path. */
static int flat_ok(const nj_tensor *t, const nj_tensor *y)
{
    return nj_same_shape(t, y) || nj_numel(t) == 1;
}

/* Runs the kernel over every output element, writing or accumulating into
 * dst, an output-shaped buffer (y->data or an output-shaped operand's grad). */
static void over_output(bin_kind k, bin_mode m, const nj_tensor *a, const nj_tensor *b,
                        const nj_tensor *y, float *dst)
{
    const long total = (long)nj_numel(y);
    const float *gy = m == MODE_FWD ? NULL : y->grad;
    if (flat_ok(a, y) && flat_ok(b, y)) {
        const int sa = nj_numel(a) == (size_t)total, sb = nj_numel(b) == (size_t)total;
        const long chunks = (total + CHUNK - 1) / CHUNK;
        #pragma omp parallel for schedule(static) if (total > PAR_MIN)
        for (long q = 0; q < chunks; q++) {
            long off = q * CHUNK, len = total - off < CHUNK ? total - off : CHUNK;
            row_kernel(k, m, gy ? gy + off : NULL, a->data + off * sa, sa,
                       b->data + off * sb, sb, dst + off, len);
        }
        return;
    }
    const int C = y->c, H = y->h, W = y->w;
    const int sa = w_stride(a, y), sb = w_stride(b, y);
    const long rows = total / W;
    #pragma omp parallel for schedule(static) if (total > PAR_MIN)
    for (long r = 0; r < rows; r++) {
        int yy = (int)(r % H), c = (int)(r / H % C), n = (int)(r / H / C);
        row_kernel(k, m, gy ? gy + r * W : NULL, a->data + row_offset(a, n, c, yy), sa,
                   b->data + row_offset(b, n, c, yy), sb, dst + r * W, W);
    }
}

/* Gradient of a single-value operand: the sum over all output elements. */
static void reduce_scalar(nj_graph *g, bin_kind k, bin_mode m, const nj_tensor *x,
                          const nj_tensor *a, const nj_tensor *b, const nj_tensor *y)
{
    const int C = y->c, H = y->h, W = y->w;
    const long total = (long)nj_numel(y), rows = total / W;
    const int sa = w_stride(a, y), sb = w_stride(b, y);
    float *scratch = nj_graph_alloc(g, sizeof(float) * (size_t)W * (size_t)omp_get_max_threads());
    if (!scratch) return;
    double s = 0;
    #pragma omp parallel for schedule(static) reduction(+ : s) if (total > PAR_MIN)
    for (long r = 0; r < rows; r++) {
        int yy = (int)(r % H), c = (int)(r / H % C), n = (int)(r / H / C);
        float *tmp = scratch + (size_t)omp_get_thread_num() * (size_t)W;
        memset(tmp, 0, sizeof(float) * (size_t)W);
        row_kernel(k, m, y->grad + r * W, a->data + row_offset(a, n, c, yy), sa,
                   b->data + row_offset(b, n, c, yy), sb, tmp, W);
        for (int i = 0; i < W; i++) s += tmp[i];
    }
    x->grad[0] += (float)s;
}

/* Gradient of a broadcast operand: each thread owns whole rows of x and
 * visits every output row mapping to them, so no two threads write the same
 * element. */
static void reduce_rows(nj_graph *g, bin_kind k, bin_mode m, const nj_tensor *x,
                        const nj_tensor *a, const nj_tensor *b, const nj_tensor *y)
{
    const int N = y->n, C = y->c, H = y->h, W = y->w;
    const int sa = w_stride(a, y), sb = w_stride(b, y), wred = x->w != W;
    const long xrows = (long)x->n * x->c * x->h;
    float *scratch = NULL;
    if (wred && !(scratch = nj_graph_alloc(g, sizeof(float) * (size_t)W *
                                              (size_t)omp_get_max_threads())))
        return;
    #pragma omp parallel for schedule(static) if ((long)nj_numel(y) > PAR_MIN)
    for (long r = 0; r < xrows; r++) {
        int xy = (int)(r % x->h), xc = (int)(r / x->h % x->c), xn = (int)(r / x->h / x->c);
        int n0 = x->n == N ? xn : 0, n1 = x->n == N ? xn + 1 : N;
        int c0 = x->c == C ? xc : 0, c1 = x->c == C ? xc + 1 : C;
        int y0 = x->h == H ? xy : 0, y1 = x->h == H ? xy + 1 : H;
        float *dst = x->grad + r * x->w;
        float *tmp = wred ? scratch + (size_t)omp_get_thread_num() * (size_t)W : dst;
        if (wred) memset(tmp, 0, sizeof(float) * (size_t)W);
        for (int n = n0; n < n1; n++)
            for (int c = c0; c < c1; c++)
                for (int yy = y0; yy < y1; yy++) {
                    long yr = ((long)n * C + c) * H + yy;
                    row_kernel(k, m, y->grad + yr * W, a->data + row_offset(a, n, c, yy), sa,
                               b->data + row_offset(b, n, c, yy), sb, tmp, W);
                }
        if (wred) {
            double s = 0;
            for (int i = 0; i < W; i++) s += tmp[i];
            dst[0] += (float)s;
        }
    }
}

static void grad_operand(nj_graph *g, bin_kind k, bin_mode m, const nj_tensor *x,
                         const nj_tensor *a, const nj_tensor *b, const nj_tensor *y)
{
    if (!x->grad) return;
    if (nj_same_shape(x, y)) over_output(k, m, a, b, y, x->grad);
    else if (nj_numel(x) == 1) reduce_scalar(g, k, m, x, a, b, y);
    else reduce_rows(g, k, m, x, a, b, y);
}

static void binary_backward(nj_graph *g, const nj_op *op)
{
    const bin_kind k = (bin_kind)op->i[0];
    const nj_tensor *a = op->in[0], *b = op->in[1], *y = op->out;
    grad_operand(g, k, MODE_GA, a, a, b, y);
    grad_operand(g, k, MODE_GB, b, a, b, y);
}

/* Broadcast size of one dimension, or 0 when the sizes are incompatible. */
static int broadcast_dim(int p, int q)
{
    if (p == q || q == 1) return p;
    return p == 1 ? q : 0;
}

static nj_tensor *binary(nj_graph *g, bin_kind k, nj_tensor *a, nj_tensor *b)
{
    if (!a || !b || nj_graph_failed(g)) return NULL;
    int n = broadcast_dim(a->n, b->n), c = broadcast_dim(a->c, b->c);
    int h = broadcast_dim(a->h, b->h), w = broadcast_dim(a->w, b->w);
    if (!n || !c || !h || !w)
        return nj_graph_fail(g, "%s: shapes %dx%dx%dx%d and %dx%dx%dx%d do not broadcast",
                             kind_name[k], a->n, a->c, a->h, a->w, b->n, b->c, b->h, b->w);
    nj_tensor *in[2] = {a, b};
    nj_tensor *y = nj_op_output(g, n, c, h, w, in, 2);
    if (!y) return NULL;
    over_output(k, MODE_FWD, a, b, y, y->data);
    nj_op *op = nj_graph_record(g, kind_name[k], binary_backward, y, in, 2);
    if (op) op->i[0] = (int)k;
    return y;
}

nj_tensor *nj_add(nj_graph *g, nj_tensor *a, nj_tensor *b) { return binary(g, BIN_ADD, a, b); }
nj_tensor *nj_sub(nj_graph *g, nj_tensor *a, nj_tensor *b) { return binary(g, BIN_SUB, a, b); }
nj_tensor *nj_mul(nj_graph *g, nj_tensor *a, nj_tensor *b) { return binary(g, BIN_MUL, a, b); }
nj_tensor *nj_div(nj_graph *g, nj_tensor *a, nj_tensor *b) { return binary(g, BIN_DIV, a, b); }
nj_tensor *nj_minimum(nj_graph *g, nj_tensor *a, nj_tensor *b) { return binary(g, BIN_MIN, a, b); }

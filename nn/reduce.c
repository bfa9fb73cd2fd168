/* nn/reduce.c — sum and mean over any subset of the N, C, H, W axes (reduced
 * axes keep size 1).  Sums accumulate in double.  A full reduction uses an
 * OpenMP reduction over the flat tensor; otherwise each thread owns whole
 * output rows and walks the input rows that map to them.  The backward pass
 * broadcasts the (scaled) upstream gradient back over the reduced axes. */
#include "nn/ops.h"
#include <omp.h>
#include <string.h>

/* Below this many input elements a loop runs on one thread. */
enum { PAR_MIN = 1 << 14 };

/* Offset of the output row fed by input row (n, c, y). */
static size_t out_row(const nj_tensor *y, int n, int c, int yy)
{
    size_t on = y->n == 1 ? 0 : (size_t)n, oc = y->c == 1 ? 0 : (size_t)c;
    size_t oy = y->h == 1 ? 0 : (size_t)yy;
    return ((on * (size_t)y->c + oc) * (size_t)y->h + oy) * (size_t)y->w;
}

static void sum_all(const nj_tensor *x, nj_tensor *y, double scale)
{
    const float *xd = x->data;
    const long n = (long)nj_numel(x);
    double s = 0;
    #pragma omp parallel for schedule(static) reduction(+ : s) if (n > PAR_MIN)
    for (long i = 0; i < n; i++) s += xd[i];
    y->data[0] = (float)(s * scale);
}

/* Sums the input rows mapping to output row r into acc (W doubles when W is
 * kept, one double when W is reduced). */
static void accumulate_row(const nj_tensor *x, const nj_tensor *y, long r, double *acc)
{
    const int W = x->w;
    const int oy = (int)(r % y->h), oc = (int)(r / y->h % y->c), on = (int)(r / y->h / y->c);
    const int n0 = y->n == x->n ? on : 0, n1 = y->n == x->n ? on + 1 : x->n;
    const int c0 = y->c == x->c ? oc : 0, c1 = y->c == x->c ? oc + 1 : x->c;
    const int y0 = y->h == x->h ? oy : 0, y1 = y->h == x->h ? oy + 1 : x->h;
    for (int n = n0; n < n1; n++)
        for (int c = c0; c < c1; c++)
            for (int yy = y0; yy < y1; yy++) {
                const float *row = x->data + (((size_t)n * x->c + c) * x->h + yy) * W;
                if (y->w == W) {
                    for (int i = 0; i < W; i++) acc[i] += row[i];
                } else {
                    double s = 0;
                    for (int i = 0; i < W; i++) s += row[i];
                    acc[0] += s;
                }
            }
}

static int sum_rows(nj_graph *g, const nj_tensor *x, nj_tensor *y, double scale)
{
    const int OW = y->w;
    const long rows = (long)y->n * y->c * y->h;
    double *scratch = nj_graph_alloc(g, sizeof(double) * (size_t)OW * (size_t)omp_get_max_threads());
    if (!scratch) return -1;
    #pragma omp parallel for schedule(static) if ((long)nj_numel(x) > PAR_MIN)
    for (long r = 0; r < rows; r++) {
        double *acc = scratch + (size_t)omp_get_thread_num() * (size_t)OW;
        memset(acc, 0, sizeof(double) * (size_t)OW);
        accumulate_row(x, y, r, acc);
        for (int i = 0; i < OW; i++) y->data[r * OW + i] = (float)(acc[i] * scale);
    }
    return 0;
}

/* dx += scale * dy, broadcast over the reduced axes; threads own input rows. */
static void reduce_backward(nj_graph *g, const nj_op *op)
{
    (void)g;
    const nj_tensor *x = op->in[0], *y = op->out;
    if (!x->grad) return;
    const float scale = op->f[0];
    const int C = x->c, H = x->h, W = x->w;
    const long rows = (long)x->n * C * H;
    #pragma omp parallel for schedule(static) if ((long)nj_numel(x) > PAR_MIN)
    for (long r = 0; r < rows; r++) {
        int yy = (int)(r % H), c = (int)(r / H % C), n = (int)(r / H / C);
        const float *gy = y->grad + out_row(y, n, c, yy);
        float *gx = x->grad + r * W;
        if (y->w == W) {
            for (int i = 0; i < W; i++) gx[i] += scale * gy[i];
        } else {
            const float v = scale * gy[0];
            for (int i = 0; i < W; i++) gx[i] += v;
        }
    }
}

static nj_tensor *reduce(nj_graph *g, const char *name, nj_tensor *x, int axes, int mean)
{
    if (!x || nj_graph_failed(g)) return NULL;
    if (axes & ~NJ_AXIS_ALL)
        return nj_graph_fail(g, "%s: invalid axis mask %d for %dx%dx%dx%d",
                             name, axes, x->n, x->c, x->h, x->w);
    nj_tensor *in[1] = {x};
    nj_tensor *y = nj_op_output(g, axes & NJ_AXIS_N ? 1 : x->n, axes & NJ_AXIS_C ? 1 : x->c,
                                axes & NJ_AXIS_H ? 1 : x->h, axes & NJ_AXIS_W ? 1 : x->w, in, 1);
    if (!y) return NULL;
    double scale = mean ? (double)nj_numel(y) / (double)nj_numel(x) : 1.0;
    if (nj_numel(y) == 1) sum_all(x, y, scale);
    else if (sum_rows(g, x, y, scale)) return NULL;
    nj_op *op = nj_graph_record(g, name, reduce_backward, y, in, 1);
    if (op) op->f[0] = (float)scale;
    return y;
}

nj_tensor *nj_sum(nj_graph *g, nj_tensor *x, int axes) { return reduce(g, "sum", x, axes, 0); }
nj_tensor *nj_mean(nj_graph *g, nj_tensor *x, int axes) { return reduce(g, "mean", x, axes, 1); }

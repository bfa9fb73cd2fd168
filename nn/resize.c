/* nn/resize.c — bilinear resize with half-pixel centres, matching PyTorch
 * F.interpolate(mode="bilinear", align_corners=False): source coordinate
 * (dst + 0.5)·in/out − 0.5, clamped at 0, neighbours i0 and min(i0+1, in−1).
 * The backward scatters each output gradient onto its four neighbours. */
#include "nn/ops.h"

#define PAR_ELEMS 32768

/* Per output row (or column): the two source indices and their weights. */
typedef struct axis_map { int *i0, *i1; float *l0, *l1; } axis_map;

static int axis_map_init(nj_graph *g, axis_map *m, int in, int out)
{
    m->i0 = nj_graph_alloc(g, sizeof(int) * (size_t)out);
    m->i1 = nj_graph_alloc(g, sizeof(int) * (size_t)out);
    m->l0 = nj_graph_alloc(g, sizeof(float) * (size_t)out);
    m->l1 = nj_graph_alloc(g, sizeof(float) * (size_t)out);
    if (!m->i0 || !m->i1 || !m->l0 || !m->l1) return 0;
    /* As PyTorch does: the scale in float, the source coordinate in double. */
    float scale = (float)in / (float)out;
    for (int d = 0; d < out; d++) {
        double src = (double)scale * (d + 0.5) - 0.5;
        if (src < 0) src = 0;
        int i0 = (int)src;
        float l1 = (float)(src - i0);
        if (in == out) { i0 = d; l1 = 0; }
        m->i0[d] = i0;
        m->i1[d] = i0 < in - 1 ? i0 + 1 : i0;
        m->l1[d] = l1 < 0 ? 0 : (l1 > 1 ? 1 : l1);
        m->l0[d] = 1.0f - m->l1[d];
    }
    return 1;
}

typedef struct resize_maps { axis_map ym, xm; } resize_maps;

static void resize_backward(nj_graph *g, const nj_op *op)
{
    (void)g;
    const nj_tensor *x = op->in[0], *y = op->out;
    if (!x->grad) return;
    const resize_maps *M = op->aux;
    int planes = x->n * x->c, oh = y->h, ow = y->w, w = x->w;
    #pragma omp parallel for if (nj_numel(y) + nj_numel(x) > PAR_ELEMS)
    for (int p = 0; p < planes; p++) {
        const float *dy = y->grad + (size_t)p * oh * ow;
        float *dx = x->grad + (size_t)p * x->h * w;
        for (int i = 0; i < oh; i++) {
            float *r0 = dx + (size_t)M->ym.i0[i] * w, *r1 = dx + (size_t)M->ym.i1[i] * w;
            float a0 = M->ym.l0[i], a1 = M->ym.l1[i];
            for (int j = 0; j < ow; j++) {
                float d = dy[(size_t)i * ow + j];
                int j0 = M->xm.i0[j], j1 = M->xm.i1[j];
                float b0 = M->xm.l0[j] * d, b1 = M->xm.l1[j] * d;
                r0[j0] += a0 * b0; r0[j1] += a0 * b1;
                r1[j0] += a1 * b0; r1[j1] += a1 * b1;
            }
        }
    }
}

static void resize_forward(const nj_tensor *x, nj_tensor *y, const resize_maps *M)
{
    int planes = x->n * x->c, oh = y->h, ow = y->w, w = x->w;
    #pragma omp parallel for if (nj_numel(y) + nj_numel(x) > PAR_ELEMS)
    for (int p = 0; p < planes; p++) {
        const float *src = x->data + (size_t)p * x->h * w;
        float *dst = y->data + (size_t)p * oh * ow;
        for (int i = 0; i < oh; i++) {
            const float *r0 = src + (size_t)M->ym.i0[i] * w, *r1 = src + (size_t)M->ym.i1[i] * w;
            float a0 = M->ym.l0[i], a1 = M->ym.l1[i];
            for (int j = 0; j < ow; j++) {
                int j0 = M->xm.i0[j], j1 = M->xm.i1[j];
                float b0 = M->xm.l0[j], b1 = M->xm.l1[j];
                dst[(size_t)i * ow + j] = a0 * (b0 * r0[j0] + b1 * r0[j1])
                                        + a1 * (b0 * r1[j0] + b1 * r1[j1]);
            }
        }
    }
}

nj_tensor *nj_resize_bilinear(nj_graph *g, nj_tensor *x, int oh, int ow)
{
    if (!x || nj_graph_failed(g)) return NULL;
    if (oh < 1 || ow < 1)
        return nj_graph_fail(g, "resize_bilinear: target %dx%d invalid for x %dx%dx%dx%d",
                             oh, ow, x->n, x->c, x->h, x->w);
    nj_tensor *in[1] = {x};
    nj_tensor *y = nj_op_output(g, x->n, x->c, oh, ow, in, 1);
    if (!y) return NULL;
    resize_maps *M = nj_graph_alloc(g, sizeof *M);
    if (!M || !axis_map_init(g, &M->ym, x->h, oh) || !axis_map_init(g, &M->xm, x->w, ow))
        return NULL;
    resize_forward(x, y, M);
    nj_op *op = nj_graph_record(g, "resize_bilinear", resize_backward, y, in, 1);
    if (op) op->aux = M;
    return y;
}

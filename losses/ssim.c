/* losses/ssim.c — fused SSIM map (Wang et al. 2004) on 3×3 windows with
 * reflection padding, forward and backward in one kernel each.
 *
 * Window statistics are computed in two passes (mean first, then centred
 * second moments), which avoids the float32 cancellation of E[x²] − μ² in
 * flat image regions.  With A1 = 2μxμy + C1, A2 = 2σxy + C2,
 * B1 = μx² + μy² + C1, B2 = σx² + σy² + C2, S = A1A2/(B1B2):
 *   ∂S/∂μx = (2μy·A2 − 2μx·S·B2)/(B1B2),  ∂S/∂σx² = −S/B2,  ∂S/∂σxy = 2A1/(B1B2)
 * and ∂μx/∂x_q = 1/9, ∂σx²/∂x_q = 2(x_q − μx)/9, ∂σxy/∂x_q = (y_q − μy)/9.
 */
#include "losses/photometric.h"
#include "nn/prof.h"
#include <string.h>

static inline int reflect(int i, int n) { return i < 0 ? -i : (i >= n ? 2 * n - 2 - i : i); }

typedef struct { float mx, my, sx, sy, sxy; int idx[9]; } window;

static window window_stats(const float *a, const float *b, int H, int W, int y, int x)
{
    window w;
    float ma = 0, mb = 0;
    for (int k = 0; k < 9; k++) {
        w.idx[k] = reflect(y + k / 3 - 1, H) * W + reflect(x + k % 3 - 1, W);
        ma += a[w.idx[k]];
        mb += b[w.idx[k]];
    }
    w.mx = ma / 9.0f;
    w.my = mb / 9.0f;
    float sx = 0, sy = 0, sxy = 0;
    for (int k = 0; k < 9; k++) {
        float da = a[w.idx[k]] - w.mx, db = b[w.idx[k]] - w.my;
        sx += da * da; sy += db * db; sxy += da * db;
    }
    w.sx = sx / 9.0f; w.sy = sy / 9.0f; w.sxy = sxy / 9.0f;
    return w;
}

static float ssim_of(const window *w, float *A1, float *A2, float *B1, float *B2)
{
    *A1 = 2 * w->mx * w->my + NJ_SSIM_C1;
    *A2 = 2 * w->sxy + NJ_SSIM_C2;
    *B1 = w->mx * w->mx + w->my * w->my + NJ_SSIM_C1;
    *B2 = w->sx + w->sy + NJ_SSIM_C2;
    return (*A1 * *A2) / (*B1 * *B2);
}

static void plane_forward(const float *a, const float *b, float *s, int H, int W)
{
    for (int y = 0; y < H; y++)
        for (int x = 0; x < W; x++) {
            window w = window_stats(a, b, H, W, y, x);
            float A1, A2, B1, B2;
            s[y * W + x] = ssim_of(&w, &A1, &A2, &B1, &B2);
        }
}

/* Scatter each pixel's window gradient; one plane per thread, so no races. */
static void plane_backward(const float *a, const float *b, const float *gs,
                           float *ga, float *gb, int H, int W)
{
    for (int y = 0; y < H; y++)
        for (int x = 0; x < W; x++) {
            float g = gs[y * W + x];
            if (g == 0) continue;
            window w = window_stats(a, b, H, W, y, x);
            float A1, A2, B1, B2, S = ssim_of(&w, &A1, &A2, &B1, &B2), D = B1 * B2;
            float dmx = (2 * w.my * A2 - 2 * w.mx * S * B2) / D;
            float dmy = (2 * w.mx * A2 - 2 * w.my * S * B2) / D;
            float dvar = -S / B2, dcov = 2 * A1 / D, k = g / 9.0f;
            for (int q = 0; q < 9; q++) {
                float da = a[w.idx[q]] - w.mx, db = b[w.idx[q]] - w.my;
                if (ga) ga[w.idx[q]] += k * (dmx + 2 * dvar * da + dcov * db);
                if (gb) gb[w.idx[q]] += k * (dmy + 2 * dvar * db + dcov * da);
            }
        }
}

static void ssim_backward(nj_graph *g, const nj_op *op)
{
    (void)g;
    nj_tensor *a = op->in[0], *b = op->in[1], *s = op->out;
    int planes = a->n * a->c, H = a->h, W = a->w;
    size_t ps = (size_t)H * W;
    #pragma omp parallel for schedule(static)
    for (int p = 0; p < planes; p++)
        plane_backward(a->data + p * ps, b->data + p * ps, s->grad + p * ps,
                       a->grad ? a->grad + p * ps : NULL, b->grad ? b->grad + p * ps : NULL, H, W);
}

nj_tensor *nj_ssim(nj_graph *g, nj_tensor *a, nj_tensor *b)
{
    if (!a || !b || nj_graph_failed(g)) return NULL;
    if (!nj_same_shape(a, b))
        return nj_graph_fail(g, "ssim: shapes differ (%dx%dx%dx%d vs %dx%dx%dx%d)",
                             a->n, a->c, a->h, a->w, b->n, b->c, b->h, b->w);
    if (a->h < 2 || a->w < 2)
        return nj_graph_fail(g, "ssim: images must be at least 2x2 for reflection padding, got %dx%d",
                             a->h, a->w);
    nj_tensor *in[2] = {a, b};
    nj_tensor *s = nj_op_output(g, a->n, a->c, a->h, a->w, in, 2);
    if (!s) return NULL;
    int planes = a->n * a->c;
    size_t ps = (size_t)a->h * a->w;
    double t0 = nj_prof_start();
    #pragma omp parallel for schedule(static)
    for (int p = 0; p < planes; p++)
        plane_forward(a->data + p * ps, b->data + p * ps, s->data + p * ps, a->h, a->w);
    nj_prof_stop(NJ_PROF_SSIM, t0);
    nj_graph_record(g, "ssim", ssim_backward, s, in, 2);
    return s;
}

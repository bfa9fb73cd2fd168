/* losses/photometric.c — the SSIM+L1 photometric error as one fused op:
 *   pe = (1/C) Σ_c [α·clamp((1 − S_c)/2, 0, 1) + (1 − α)·|a_c − b_c|]
 * (S from ssim_kernel.c).  Only the N×1×H×W result carries a gradient; the
 * SSIM map is kept for the backward pass, nothing else at full size.  The
 * clamp passes its gradient on [0, 1] inclusive and |·| has gradient 0 at 0,
 * as the differentiable ops (nn/unary.c) they replace. */
#include "losses/photometric.h"
#include "losses/ssim_kernel.h"
#include "nn/prof.h"
#include <math.h>
#include <omp.h>

static inline float dssim(float s) { return s * -0.5f + 0.5f; }

static void ssim_planes(nj_graph *g, const nj_tensor *a, const nj_tensor *b, float *S)
{
    int planes = a->n * a->c, H = a->h, W = a->w;
    size_t ps = (size_t)H * W, sf = nj_ssim_scratch_floats(H, W);
    float *scratch = nj_graph_scratch(g, sizeof(float) * sf * (size_t)omp_get_max_threads());
    if (!scratch) return;
    #pragma omp parallel for schedule(static)
    for (int p = 0; p < planes; p++)
        nj_ssim_plane_forward(a->data + p * ps, b->data + p * ps, H, W, S + p * ps,
                              scratch + sf * (size_t)omp_get_thread_num());
}

static void combine(const nj_tensor *a, const nj_tensor *b, const float *S, float alpha, float *pe)
{
    int N = a->n, C = a->c;
    size_t ps = (size_t)a->h * a->w;
    float ka = alpha / (float)C, kl = (1.0f - alpha) / (float)C;
    #pragma omp parallel for schedule(static)
    for (int n = 0; n < N; n++) {
        float *o = pe + n * ps;
        for (size_t i = 0; i < ps; i++) o[i] = 0;
        for (int c = 0; c < C; c++) {
            size_t off = ((size_t)n * C + c) * ps;
            const float *s = S + off, *x = a->data + off, *y = b->data + off;
            for (size_t i = 0; i < ps; i++) {
                float d = dssim(s[i]);
                d = d < 0 ? 0 : (d > 1 ? 1 : d);
                o[i] += ka * d + kl * fabsf(x[i] - y[i]);
            }
        }
    }
}

static void photometric_backward(nj_graph *g, const nj_op *op)
{
    nj_tensor *a = op->in[0], *b = op->in[1], *pe = op->out;
    const float *S = op->aux;
    int N = a->n, C = a->c, H = a->h, W = a->w, T = omp_get_max_threads();
    size_t ps = (size_t)H * W, sf = nj_ssim_scratch_floats(H, W);
    float *scratch = nj_graph_scratch(g, sizeof(float) * (sf + ps) * (size_t)T);
    if (!scratch) return;
    float ka = -0.5f * op->f[0] / (float)C, kl = (1.0f - op->f[0]) / (float)C;
    #pragma omp parallel for schedule(static)
    for (int p = 0; p < N * C; p++) {
        float *gs = scratch + (sf + ps) * (size_t)omp_get_thread_num(), *ks = gs + ps;
        size_t off = (size_t)p * ps;
        const float *go = pe->grad + (size_t)(p / C) * ps, *x = a->data + off, *y = b->data + off;
        float *ga = a->grad ? a->grad + off : NULL, *gb = b->grad ? b->grad + off : NULL;
        for (size_t i = 0; i < ps; i++) {
            float d = dssim(S[off + i]);
            gs[i] = (d >= 0 && d <= 1) ? go[i] * ka : 0.0f;
            float diff = x[i] - y[i], l = diff > 0 ? go[i] * kl : (diff < 0 ? -go[i] * kl : 0.0f);
            if (ga) ga[i] += l;
            if (gb) gb[i] -= l;
        }
        nj_ssim_plane_backward(x, y, gs, H, W, ga, gb, ks);
    }
}

nj_tensor *nj_photometric_error(nj_graph *g, nj_tensor *a, nj_tensor *b, float alpha)
{
    if (!a || !b || nj_graph_failed(g)) return NULL;
    if (!nj_ssim_pair_ok(g, a, b, "photometric_error")) return NULL;
    nj_tensor *in[2] = {a, b};
    nj_tensor *pe = nj_op_output(g, a->n, 1, a->h, a->w, in, 2);
    float *S = pe ? nj_graph_alloc(g, sizeof(float) * nj_numel(a)) : NULL;
    if (!S) return NULL;
    double t0 = nj_prof_start();
    ssim_planes(g, a, b, S);
    nj_prof_stop("ssim", t0);
    combine(a, b, S, alpha, pe->data);
    nj_op *op = nj_graph_record(g, "photometric_error", photometric_backward, pe, in, 2);
    if (op) {
        op->prof = "ssim";
        op->f[0] = alpha;
        op->aux = S;
    }
    return pe;
}

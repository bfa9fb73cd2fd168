/* losses/ssim.c — the SSIM map op (Wang et al. 2004) on 3×3 windows with
 * reflection padding; arithmetic in ssim_kernel.c.
 *
 * With A1 = 2μxμy + C1, A2 = 2σxy + C2, B1 = μx² + μy² + C1,
 * B2 = σx² + σy² + C2, S = A1A2/(B1B2):
 *   ∂S/∂μx = (2μy·A2 − 2μx·S·B2)/(B1B2),  ∂S/∂σx² = −S/B2,  ∂S/∂σxy = 2A1/(B1B2)
 * and ∂μx/∂x_q = 1/9, ∂σx²/∂x_q = 2(x_q − μx)/9, ∂σxy/∂x_q = (y_q − μy)/9.
 */
#include "losses/photometric.h"
#include "losses/ssim_kernel.h"
#include "nn/prof.h"
#include <omp.h>

static void ssim_backward(nj_graph *g, const nj_op *op)
{
    nj_tensor *a = op->in[0], *b = op->in[1], *s = op->out;
    int planes = a->n * a->c, H = a->h, W = a->w;
    size_t ps = (size_t)H * W, sf = nj_ssim_scratch_floats(H, W);
    float *scratch = nj_graph_scratch(g, sizeof(float) * sf * (size_t)omp_get_max_threads());
    if (!scratch) return;
    #pragma omp parallel for schedule(static)
    for (int p = 0; p < planes; p++)
        nj_ssim_plane_backward(a->data + p * ps, b->data + p * ps, s->grad + p * ps, H, W,
                               a->grad ? a->grad + p * ps : NULL, b->grad ? b->grad + p * ps : NULL,
                               scratch + sf * (size_t)omp_get_thread_num());
}

nj_tensor *nj_ssim(nj_graph *g, nj_tensor *a, nj_tensor *b)
{
    if (!a || !b || nj_graph_failed(g)) return NULL;
    if (!nj_ssim_pair_ok(g, a, b, "ssim")) return NULL;
    nj_tensor *in[2] = {a, b};
    nj_tensor *s = nj_op_output(g, a->n, a->c, a->h, a->w, in, 2);
    size_t ps = (size_t)a->h * a->w, sf = nj_ssim_scratch_floats(a->h, a->w);
    float *scratch = s ? nj_graph_scratch(g, sizeof(float) * sf * (size_t)omp_get_max_threads()) : NULL;
    if (!scratch) return NULL;
    int planes = a->n * a->c;
    double t0 = nj_prof_start();
    #pragma omp parallel for schedule(static)
    for (int p = 0; p < planes; p++)
        nj_ssim_plane_forward(a->data + p * ps, b->data + p * ps, a->h, a->w, s->data + p * ps,
                              scratch + sf * (size_t)omp_get_thread_num());
    nj_prof_stop("ssim", t0);
    nj_op *op = nj_graph_record(g, "ssim", ssim_backward, s, in, 2);
    if (op) op->prof = "ssim";
    return s;
}

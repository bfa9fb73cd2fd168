/* losses/photometric.c — the SSIM+L1 photometric error, built from the fused
 * SSIM op (ssim.c) and differentiable ops (nn/ops.h). */
#include "losses/photometric.h"
#include "nn/ops.h"

nj_tensor *nj_photometric_error(nj_graph *g, nj_tensor *a, nj_tensor *b, float alpha)
{
    nj_tensor *dssim = nj_clamp(g, nj_affine(g, nj_ssim(g, a, b), -0.5f, 0.5f), 0.0f, 1.0f);
    nj_tensor *l1 = nj_abs(g, nj_sub(g, a, b));
    nj_tensor *pe = nj_add(g, nj_affine(g, dssim, alpha, 0.0f), nj_affine(g, l1, 1.0f - alpha, 0.0f));
    return nj_mean(g, pe, NJ_AXIS_C);
}

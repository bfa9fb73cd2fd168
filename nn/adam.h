/* nn/adam.h — Adam (Kingma & Ba 2014) with optional decoupled weight decay
 * (Loshchilov & Hutter 2019, "AdamW").  The update is written the way
 * torch.optim.Adam/AdamW compute it so the two agree step by step:
 *   p ← p·(1 − lr·wd)                         (decoupled decay, if wd > 0)
 *   m ← β1·m + (1−β1)·g ;  v ← β2·v + (1−β2)·g²
 *   p ← p − (lr/(1−β1^t)) · m / (sqrt(v)/sqrt(1−β2^t) + ε)
 * Per-group learning-rate multipliers; frozen groups are skipped. */
#ifndef NJ_ADAM_H
#define NJ_ADAM_H
#include "nn/param.h"

typedef struct nj_adam {
    float lr, beta1, beta2, eps, weight_decay;
    float group_lr[NJ_MAX_GROUPS];   /* multipliers, default 1 */
    long step;                       /* updates done so far */
} nj_adam;

/* Defaults: β1 0.9, β2 0.999, ε 1e-8, no weight decay. */
void nj_adam_init(nj_adam *opt, float lr);
/* One update of every non-frozen parameter from its grad.  OpenMP over elements. */
void nj_adam_step(nj_adam *opt, nj_params *ps);
/* The same with every gradient read as grad·grad_scale (gradient clipping
 * folded into the update; the grad buffers are left as they are).  Gives the
 * bits nj_params_scale_grads(ps, grad_scale) then nj_adam_step would. */
void nj_adam_step_scaled(nj_adam *opt, nj_params *ps, float grad_scale);

#endif

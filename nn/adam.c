/* nn/adam.c — Adam / AdamW update (see adam.h for the exact formula). */
#include "nn/adam.h"
#include <math.h>

void nj_adam_init(nj_adam *opt, float lr)
{
    opt->lr = lr;
    opt->beta1 = 0.9f;
    opt->beta2 = 0.999f;
    opt->eps = 1e-8f;
    opt->weight_decay = 0.0f;
    for (int k = 0; k < NJ_MAX_GROUPS; k++) opt->group_lr[k] = 1.0f;
    opt->step = 0;
}

static void update_one(const nj_adam *o, nj_param *p, double lr, double bc1, double bc2)
{
    size_t k = nj_param_numel(p);
    const float b1 = o->beta1, b2 = o->beta2, eps = o->eps;
    /* decay 1 without weight decay: w·1 is w, so one loop serves both */
    const float decay = o->weight_decay > 0 ? (float)(1.0 - lr * o->weight_decay) : 1.0f;
    const float step = (float)(lr / bc1), inv_sqrt_bc2 = (float)(1.0 / sqrt(bc2));
    float *restrict w = p->data, *restrict m = p->m, *restrict v = p->v;
    const float *restrict g = p->grad;
    #pragma omp parallel for simd if (k > 65536) schedule(static)
    for (size_t i = 0; i < k; i++) {
        w[i] *= decay;
        m[i] = b1 * m[i] + (1.0f - b1) * g[i];
        v[i] = b2 * v[i] + (1.0f - b2) * g[i] * g[i];
        w[i] -= step * m[i] / (sqrtf(v[i]) * inv_sqrt_bc2 + eps);
    }
}

void nj_adam_step(nj_adam *opt, nj_params *ps)
{
    opt->step++;
    double bc1 = 1.0 - pow(opt->beta1, (double)opt->step);
    double bc2 = 1.0 - pow(opt->beta2, (double)opt->step);
    for (int i = 0; i < ps->count; i++) {
        nj_param *p = ps->items[i];
        if (ps->frozen[p->group]) continue;
        double lr = (double)opt->lr * opt->group_lr[p->group];
        if (lr == 0) continue;
        update_one(opt, p, lr, bc1, bc2);
    }
}

/* nn/adam.c — Adam / AdamW update (see adam.h for the exact formula). */
#include "nn/adam.h"
#include <math.h>
#include <omp.h>

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

/* Elements [a, b) of p: g is read as grad·gs (gs 1: as is), exactly the
 * value a separate grad *= gs pass would have stored. */
static void update_range(const nj_adam *o, nj_param *p, double lr, double bc1, double bc2, float gs,
                         size_t a, size_t b)
{
    const float b1 = o->beta1, b2 = o->beta2, eps = o->eps;
    /* decay 1 without weight decay: w·1 is w, so one loop serves both */
    const float decay = o->weight_decay > 0 ? (float)(1.0 - lr * o->weight_decay) : 1.0f;
    const float step = (float)(lr / bc1), inv_sqrt_bc2 = (float)(1.0 / sqrt(bc2));
    float *restrict w = p->data, *restrict m = p->m, *restrict v = p->v;
    const float *restrict g = p->grad;
    #pragma omp simd
    for (size_t i = a; i < b; i++) {
        float gi = g[i] * gs;
        w[i] *= decay;
        m[i] = b1 * m[i] + (1.0f - b1) * gi;
        v[i] = b2 * v[i] + (1.0f - b2) * gi * gi;
        w[i] -= step * m[i] / (sqrtf(v[i]) * inv_sqrt_bc2 + eps);
    }
}

/* The learning rate of p, 0 when it is not updated. */
static double param_lr(const nj_adam *opt, const nj_params *ps, const nj_param *p)
{
    if (ps->frozen[p->group]) return 0;
    return (double)opt->lr * opt->group_lr[p->group];
}

void nj_adam_step_scaled(nj_adam *opt, nj_params *ps, float grad_scale)
{
    opt->step++;
    double bc1 = 1.0 - pow(opt->beta1, (double)opt->step);
    double bc2 = 1.0 - pow(opt->beta2, (double)opt->step);
    size_t total = 0;
    for (int i = 0; i < ps->count; i++)
        if (param_lr(opt, ps, ps->items[i]) != 0) total += nj_param_numel(ps->items[i]);
    /* the updated elements of all parameters in a row, one equal share per
     * thread: one fork, no thread idle behind the largest tensor or running
     * the small ones alone */
    #pragma omp parallel if (total > 65536)
    {
        int T = omp_get_num_threads(), t = omp_get_thread_num();
        size_t lo = total / T * t + (total % T < (size_t)t ? total % T : (size_t)t);
        size_t hi = lo + total / T + ((size_t)t < total % T);
        size_t off = 0;
        for (int i = 0; i < ps->count && off < hi; i++) {
            nj_param *p = ps->items[i];
            double lr = param_lr(opt, ps, p);
            if (lr == 0) continue;
            size_t k = nj_param_numel(p), a = lo > off ? lo - off : 0, b = hi - off < k ? hi - off : k;
            if (a < b) update_range(opt, p, lr, bc1, bc2, grad_scale, a, b);
            off += k;
        }
    }
}

void nj_adam_step(nj_adam *opt, nj_params *ps) { nj_adam_step_scaled(opt, ps, 1.0f); }

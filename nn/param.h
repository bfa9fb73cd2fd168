/* nn/param.h — trainable parameters, their registry and initialisation.
 *
 * A parameter owns persistent (malloc'd, not arena) value, gradient and Adam
 * moment buffers.  Each belongs to a group (0..NJ_MAX_GROUPS-1) so a
 * sub-network (e.g. the encoder) can get its own learning-rate multiplier or be
 * frozen.  Frozen parameters get no gradient (nj_param_tensor wraps them with
 * grad = NULL, so ops skip that work) and are not updated.
 */
#ifndef NJ_PARAM_H
#define NJ_PARAM_H
#include "nn/graph.h"
#include "nn/rng.h"

#define NJ_MAX_GROUPS 8

typedef struct nj_param {
    char name[64];
    int n, c, h, w;
    float *data, *grad, *m, *v;
    int group;
} nj_param;

typedef struct nj_params {
    nj_param **items;
    int count, cap;
    int frozen[NJ_MAX_GROUPS];
} nj_params;

void nj_params_init(nj_params *ps);
void nj_params_free(nj_params *ps);
/* Adds a zero-initialised parameter; NULL on out-of-memory or duplicate name. */
nj_param *nj_params_add(nj_params *ps, const char *name, int group,
                        int n, int c, int h, int w);
nj_param *nj_params_find(const nj_params *ps, const char *name);
size_t nj_param_numel(const nj_param *p);
/* Total number of scalars. */
size_t nj_params_numel(const nj_params *ps);
void nj_params_zero_grad(nj_params *ps);
/* √(Σ grad²) over every parameter.  Each tensor is summed by one thread (8
 * double lanes) and the tensors' sums are added in order, so the value does
 * not depend on the thread count. */
double nj_params_grad_norm(const nj_params *ps);
/* The factor that clips a gradient of global norm `norm` to max_norm: max_norm / norm when
 * max_norm > 0 and norm exceeds it, else 1 (for nj_adam_step_scaled). */
float nj_clip_factor(double norm, float max_norm);
/* grad *= f for every parameter. */
void nj_params_scale_grads(nj_params *ps, float f);
void nj_params_freeze_group(nj_params *ps, int group, int frozen);
/* The parameter as a graph tensor (no copy); grad NULL when its group is frozen. */
nj_tensor *nj_param_tensor(nj_graph *g, const nj_params *ps, nj_param *p);

/* Kaiming-uniform initialisation (He et al. 2015): U(-b, b) with
 * b = gain * sqrt(3 / fan_in); gain sqrt(2) suits ReLU/ELU layers. */
void nj_init_kaiming_uniform(nj_param *p, int fan_in, float gain, nj_rng *rng);
/* U(-b, b) with b = 1/sqrt(fan_in): PyTorch's default for conv biases. */
void nj_init_uniform_bias(nj_param *p, int fan_in, nj_rng *rng);
void nj_init_const(nj_param *p, float value);

#endif

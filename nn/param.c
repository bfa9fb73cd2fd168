/* nn/param.c — parameter registry, freezing and initialisation (see param.h). */
#include "nn/param.h"
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

void nj_params_init(nj_params *ps) { memset(ps, 0, sizeof *ps); }

static void param_free(nj_param *p)
{
    free(p->data); free(p->grad); free(p->m); free(p->v);
    free(p);
}

void nj_params_free(nj_params *ps)
{
    for (int i = 0; i < ps->count; i++) param_free(ps->items[i]);
    free(ps->items);
    nj_params_init(ps);
}

size_t nj_param_numel(const nj_param *p) { return (size_t)p->n * p->c * p->h * p->w; }

size_t nj_params_numel(const nj_params *ps)
{
    size_t total = 0;
    for (int i = 0; i < ps->count; i++) total += nj_param_numel(ps->items[i]);
    return total;
}

nj_param *nj_params_find(const nj_params *ps, const char *name)
{
    for (int i = 0; i < ps->count; i++)
        if (strcmp(ps->items[i]->name, name) == 0) return ps->items[i];
    return NULL;
}

nj_param *nj_params_add(nj_params *ps, const char *name, int group,
                        int n, int c, int h, int w)
{
    if (group < 0 || group >= NJ_MAX_GROUPS || n <= 0 || c <= 0 || h <= 0 || w <= 0) return NULL;
    if (strlen(name) >= sizeof ps->items[0]->name || nj_params_find(ps, name)) return NULL;
    if (ps->count == ps->cap) {
        int cap = ps->cap ? ps->cap * 2 : 32;
        nj_param **items = realloc(ps->items, sizeof *items * (size_t)cap);
        if (!items) return NULL;
        ps->items = items;
        ps->cap = cap;
    }
    nj_param *p = calloc(1, sizeof *p);
    if (!p) return NULL;
    snprintf(p->name, sizeof p->name, "%s", name);
    p->n = n; p->c = c; p->h = h; p->w = w;
    p->group = group;
    size_t k = nj_param_numel(p);
    p->data = calloc(k, sizeof(float));
    p->grad = calloc(k, sizeof(float));
    p->m = calloc(k, sizeof(float));
    p->v = calloc(k, sizeof(float));
    if (!p->data || !p->grad || !p->m || !p->v) { param_free(p); return NULL; }
    ps->items[ps->count++] = p;
    return p;
}

void nj_params_zero_grad(nj_params *ps)
{
    #pragma omp parallel for schedule(dynamic, 1) if (ps->count > 1)
    for (int i = 0; i < ps->count; i++)
        memset(ps->items[i]->grad, 0, nj_param_numel(ps->items[i]) * sizeof(float));
}

/* Σ g² in 8 double lanes, then the lanes and the tail in order. */
static double sum_squares(const float *g, size_t k)
{
    double lane[8] = {0}, s = 0;
    size_t j = 0;
    for (; j + 8 <= k; j += 8)
        for (int l = 0; l < 8; l++) lane[l] += (double)g[j + l] * g[j + l];
    for (int l = 0; l < 8; l++) s += lane[l];
    for (; j < k; j++) s += (double)g[j] * g[j];
    return s;
}

double nj_params_grad_norm(const nj_params *ps)
{
    enum { BLOCK = 64 };
    double part[BLOCK], s = 0;
    for (int i0 = 0; i0 < ps->count; i0 += BLOCK) {
        int m = ps->count - i0 < BLOCK ? ps->count - i0 : BLOCK;
        #pragma omp parallel for schedule(dynamic, 1) if (m > 1)
        for (int i = 0; i < m; i++)
            part[i] = sum_squares(ps->items[i0 + i]->grad, nj_param_numel(ps->items[i0 + i]));
        for (int i = 0; i < m; i++) s += part[i];
    }
    return sqrt(s);
}

float nj_clip_factor(double norm, float max_norm)
{
    return max_norm > 0 && norm > max_norm ? (float)(max_norm / norm) : 1.0f;
}

void nj_params_scale_grads(nj_params *ps, float f)
{
    #pragma omp parallel for schedule(dynamic, 1) if (ps->count > 1)
    for (int i = 0; i < ps->count; i++) {
        float *g = ps->items[i]->grad;
        for (size_t j = 0, k = nj_param_numel(ps->items[i]); j < k; j++) g[j] *= f;
    }
}

void nj_params_freeze_group(nj_params *ps, int group, int frozen)
{
    if (group >= 0 && group < NJ_MAX_GROUPS) ps->frozen[group] = frozen != 0;
}

nj_tensor *nj_param_tensor(nj_graph *g, const nj_params *ps, nj_param *p)
{
    return nj_tensor_wrap(g, p->n, p->c, p->h, p->w, p->data,
                          ps->frozen[p->group] ? NULL : p->grad);
}

static void fill_uniform(nj_param *p, float bound, nj_rng *rng)
{
    size_t k = nj_param_numel(p);
    for (size_t i = 0; i < k; i++)
        p->data[i] = (float)((2.0 * nj_rng_uniform(rng) - 1.0) * bound);
}

void nj_init_kaiming_uniform(nj_param *p, int fan_in, float gain, nj_rng *rng)
{
    fill_uniform(p, gain * sqrtf(3.0f / (float)(fan_in > 0 ? fan_in : 1)), rng);
}

void nj_init_uniform_bias(nj_param *p, int fan_in, nj_rng *rng)
{
    fill_uniform(p, 1.0f / sqrtf((float)(fan_in > 0 ? fan_in : 1)), rng);
}

void nj_init_const(nj_param *p, float value)
{
    size_t k = nj_param_numel(p);
    for (size_t i = 0; i < k; i++) p->data[i] = value;
}

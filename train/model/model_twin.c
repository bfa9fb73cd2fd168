/* train/model/model_twin.c — twins of a model for thread replicas, and the
 * learned parameters in unit order (see model.h).  Kept here so code that runs
 * the step on several copies (train/loop/step_replicas.c) never depends on how
 * a unit holds its parameters. */
#include "train/model/model.h"
#include <stdlib.h>
#include <string.h>

/* The parameter slots of a unit: learned ones first, then the BN buffers. */
#define SLOTS 6
#define LEARNED_SLOTS 4
static nj_param **unit_slot(nj_unit *u, int k)
{
    nj_param **slots[SLOTS] = {&u->w, &u->b, &u->gamma, &u->beta, &u->run_mean, &u->run_var};
    return slots[k];
}

int nj_model_learned(nj_model *m, nj_param **out, int cap)
{
    int n = 0;
    for (int i = 0; i < m->nunits; i++)
        for (int k = 0; k < LEARNED_SLOTS; k++) {
            nj_param *p = *unit_slot(&m->units[i], k);
            if (!p) continue;
            if (out && n < cap) out[n] = p;
            n++;
        }
    return n;
}

int nj_model_twin_init(nj_model_twin *t, nj_model *m)
{
    memset(t, 0, sizeof *t);
    t->m = *m;
    size_t floats = 0;
    for (int i = 0; i < m->nunits; i++)
        for (int k = 0; k < SLOTS; k++)
            if (*unit_slot(&m->units[i], k)) floats += nj_param_numel(*unit_slot(&m->units[i], k));
    t->records = calloc((size_t)(m->nunits ? m->nunits : 1) * SLOTS, sizeof *t->records);
    t->store = calloc(floats ? floats : 1, sizeof(float));
    if (!t->records || !t->store) {
        nj_model_twin_free(t);
        return -1;
    }
    float *next = t->store;
    for (int i = 0; i < m->nunits; i++)
        for (int k = 0; k < SLOTS; k++) {
            nj_param *orig = *unit_slot(&m->units[i], k);
            if (!orig) continue;
            nj_param *r = &t->records[i * SLOTS + k];
            *r = *orig;
            size_t n = nj_param_numel(orig);
            if (k < LEARNED_SLOTS) {
                r->grad = next;
            } else {
                r->data = next;
                memcpy(r->data, orig->data, sizeof(float) * n);
            }
            next += n;
            *unit_slot(&t->m.units[i], k) = r;
        }
    return 0;
}

void nj_model_twin_free(nj_model_twin *t)
{
    free(t->records);
    free(t->store);
    t->records = NULL;
    t->store = NULL;
}

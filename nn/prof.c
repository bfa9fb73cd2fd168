/* nn/prof.c — per-category wall-clock totals (see prof.h). */
#include "nn/prof.h"
#include <omp.h>
#include <string.h>

static int prof_on;
static int prof_n;
static const char *prof_name[NJ_PROF_MAX];
static double prof_total[NJ_PROF_MAX];

void nj_prof_enable(int on) { prof_on = on != 0; }

void nj_prof_reset(void)
{
    for (int k = 0; k < NJ_PROF_MAX; k++) prof_total[k] = 0;
}

/* Only thread 0 of the outermost team times: the main thread, or replica 0
 * when a step runs as per-thread replicas (train/loop/step_replicas.h), whose ops
 * then stand for every replica's (they run side by side on equal shares). */
static int timing(void) { return prof_on && omp_get_ancestor_thread_num(1) <= 0; }

double nj_prof_start(void) { return timing() ? omp_get_wtime() : 0.0; }

static int find(const char *category)
{
    for (int k = 0; k < prof_n; k++)
        if (!strcmp(prof_name[k], category)) return k;
    return -1;
}

void nj_prof_stop(const char *category, double t0)
{
    if (!timing() || t0 <= 0 || !category) return;
    double dt = omp_get_wtime() - t0;
    int k = find(category);
    if (k < 0) {
        if (prof_n == NJ_PROF_MAX) return;
        k = prof_n;
        prof_name[k] = category;
        prof_total[k] = 0;
        prof_n++;
    }
    prof_total[k] += dt;
}

int nj_prof_count(void) { return prof_n; }
const char *nj_prof_name(int i) { return i >= 0 && i < prof_n ? prof_name[i] : ""; }
double nj_prof_seconds(int i) { return i >= 0 && i < prof_n ? prof_total[i] : 0.0; }

double nj_prof_seconds_of(const char *category)
{
    int k = find(category);
    return k < 0 ? 0.0 : prof_total[k];
}

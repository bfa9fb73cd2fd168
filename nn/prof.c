/* nn/prof.c — per-op-kind wall-clock totals (see prof.h). */
#include "nn/prof.h"
#include <omp.h>
#include <string.h>

static int prof_on;
static double prof_total[NJ_PROF_KINDS];

void nj_prof_enable(int on) { prof_on = on != 0; }

void nj_prof_reset(void)
{
    for (int k = 0; k < NJ_PROF_KINDS; k++) prof_total[k] = 0;
}

/* Only thread 0 of the outermost team times: the main thread, or replica 0
 * when a step runs as per-thread replicas (train/loop/step_replicas.h), whose ops
 * then stand for every replica's (they run side by side on equal shares). */
static int timing(void) { return prof_on && omp_get_ancestor_thread_num(1) <= 0; }

double nj_prof_start(void) { return timing() ? omp_get_wtime() : 0.0; }

void nj_prof_stop(nj_prof_kind k, double t0)
{
    if (timing() && t0 > 0) prof_total[k] += omp_get_wtime() - t0;
}

double nj_prof_seconds(nj_prof_kind k) { return prof_total[k]; }

int nj_prof_kind_of(const char *name)
{
    if (!strcmp(name, "conv2d")) return NJ_PROF_CONV_BWD;
    if (!strcmp(name, "reproject") || !strcmp(name, "sample_bilinear")) return NJ_PROF_WARP;
    if (!strcmp(name, "ssim") || !strcmp(name, "photometric_error")) return NJ_PROF_SSIM;
    return -1;
}

/* nn/threads.c — one threading level: OpenMP outside, single-threaded BLAS inside. */
#include "nn/ops.h"
#include <cblas.h>
#include <omp.h>

int nj_threads_init(int threads)
{
    /* OpenBLAS runs inside our OpenMP regions; its own pool would oversubscribe. */
    openblas_set_num_threads(1);
    if (threads > 0) omp_set_num_threads(threads);
    return omp_get_max_threads();
}

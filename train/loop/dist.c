/* train/loop/dist.c — processes of a data-parallel run (see dist.h): Open MPI
 * under NJ_MPI (`make MPI=1`), otherwise one process and no-op collectives. */
#include "train/loop/dist.h"
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <unistd.h>
#ifdef NJ_MPI
#include <mpi.h>
#endif

static int g_rank = 0, g_size = 1, g_started = 0;
static char g_host[256];
static nj_dist_stats g_stats;

int nj_dist_built(void)
{
#ifdef NJ_MPI
    return 1;
#else
    return 0;
#endif
}

int nj_dist_rank(void) { return g_rank; }
int nj_dist_size(void) { return g_size; }

const char *nj_dist_host(void)
{
    if (!g_host[0] && gethostname(g_host, sizeof g_host - 1)) snprintf(g_host, sizeof g_host, "unknown host");
    return g_host;
}

void nj_dist_get_stats(nj_dist_stats *s) { *s = g_stats; }

#ifdef NJ_MPI

static double now(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return ts.tv_sec + ts.tv_nsec * 1e-9;
}

int nj_dist_init(int *argc, char ***argv, char *err, size_t errlen)
{
    int provided = 0, len = 0;
    if (g_started) return 0;
    if (MPI_Init_thread(argc, argv, MPI_THREAD_FUNNELED, &provided) != MPI_SUCCESS) {
        snprintf(err, errlen, "MPI_Init_thread failed (is the Open MPI runtime installed?)");
        return -1;
    }
    g_started = 1;
    MPI_Comm_rank(MPI_COMM_WORLD, &g_rank);
    MPI_Comm_size(MPI_COMM_WORLD, &g_size);
    MPI_Get_processor_name(g_host, &len);
    if (provided < MPI_THREAD_FUNNELED) {
        snprintf(err, errlen, "the MPI library offers no thread support (MPI_THREAD_FUNNELED needed)");
        return -1;
    }
    return 0;
}

void nj_dist_finalize(void)
{
    if (g_started) MPI_Finalize();
    g_started = 0;
}

void nj_dist_abort(int code)
{
    fflush(stdout);
    fflush(stderr);
    if (g_started) MPI_Abort(MPI_COMM_WORLD, code);
    exit(code);
}

/* MPI counts are int: big buffers go in chunks. */
enum { CHUNK = 1 << 28 };

int nj_dist_sum_f32(float *buf, size_t n)
{
    if (g_size <= 1) return 0;
    double t0 = now();
    int rc = MPI_SUCCESS;
    for (size_t off = 0; off < n && rc == MPI_SUCCESS; off += CHUNK) {
        int k = (int)(n - off < CHUNK ? n - off : CHUNK);
        rc = MPI_Allreduce(MPI_IN_PLACE, buf + off, k, MPI_FLOAT, MPI_SUM, MPI_COMM_WORLD);
    }
    g_stats.sum_f32_seconds += now() - t0;
    g_stats.sum_f32_calls++;
    g_stats.sum_f32_values += (double)n;
    return rc == MPI_SUCCESS ? 0 : -1;
}

int nj_dist_sum_f64(double *buf, int n)
{
    if (g_size <= 1) return 0;
    double t0 = now();
    int rc = MPI_Allreduce(MPI_IN_PLACE, buf, n, MPI_DOUBLE, MPI_SUM, MPI_COMM_WORLD);
    g_stats.sum_f64_seconds += now() - t0;
    g_stats.sum_f64_calls++;
    return rc == MPI_SUCCESS ? 0 : -1;
}

int nj_dist_max_i64(int64_t *buf, int n)
{
    if (g_size <= 1) return 0;
    return MPI_Allreduce(MPI_IN_PLACE, buf, n, MPI_INT64_T, MPI_MAX, MPI_COMM_WORLD) == MPI_SUCCESS ? 0 : -1;
}

int nj_dist_bcast(void *buf, size_t bytes)
{
    if (g_size <= 1) return 0;
    int rc = MPI_SUCCESS;
    for (size_t off = 0; off < bytes && rc == MPI_SUCCESS; off += CHUNK) {
        int k = (int)(bytes - off < CHUNK ? bytes - off : CHUNK);
        rc = MPI_Bcast((char *)buf + off, k, MPI_BYTE, 0, MPI_COMM_WORLD);
    }
    return rc == MPI_SUCCESS ? 0 : -1;
}

int nj_dist_allgather(const void *mine, void *all, size_t bytes)
{
    if (g_size <= 1) {
        memcpy(all, mine, bytes);
        return 0;
    }
    if (bytes > CHUNK) return -1;     /* only small records are gathered */
    return MPI_Allgather(mine, (int)bytes, MPI_BYTE, all, (int)bytes, MPI_BYTE, MPI_COMM_WORLD) == MPI_SUCCESS ? 0 : -1;
}

#else   /* one process */

int nj_dist_init(int *argc, char ***argv, char *err, size_t errlen)
{
    (void)argc; (void)argv; (void)err; (void)errlen;
    g_started = 1;
    return 0;
}

void nj_dist_finalize(void) { g_started = 0; }

void nj_dist_abort(int code)
{
    fflush(stdout);
    fflush(stderr);
    exit(code);
}

int nj_dist_sum_f32(float *buf, size_t n) { (void)buf; (void)n; return 0; }
int nj_dist_sum_f64(double *buf, int n) { (void)buf; (void)n; return 0; }
int nj_dist_max_i64(int64_t *buf, int n) { (void)buf; (void)n; return 0; }
int nj_dist_bcast(void *buf, size_t bytes) { (void)buf; (void)bytes; return 0; }

int nj_dist_allgather(const void *mine, void *all, size_t bytes)
{
    memcpy(all, mine, bytes);
    return 0;
}

#endif

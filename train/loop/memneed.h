/* train/loop/memneed.h — how much memory a training run will need, and how much
 * the process may still take, so `nightjar train` can refuse a run that would
 * not fit instead of being killed by the kernel's OOM killer hours later.
 *
 * The need is the sum of
 *   base     memory already resident before the model is built (program,
 *            libraries, thread pools, the dataset index);
 *   params   parameters and batch-norm buffers: values, gradients, Adam m, v;
 *   arena    one training step's activations, gradients and scratch (the
 *            graph arena), measured by probe steps at tiny sizes and scaled
 *            to the configured batch and resolution (see memneed.c);
 *   loader   prefetched batches (training and validation loaders) and the
 *            worker's decode buffers at the dataset's image size;
 *   report   the report's gallery: a checkpoint copy and an inference step
 *            on up to 3 frames.
 * What may be taken is the smallest of MemAvailable (/proc/meminfo), the
 * room below RLIMIT_AS (address space: thread stacks and malloc arenas count
 * there too) and the room below the cgroup's memory limit. */
#ifndef NJ_MEMNEED_H
#define NJ_MEMNEED_H
#include <stddef.h>

typedef struct nj_mem_need {
    double base, params, arena, loader, report;   /* bytes */
    double total;            /* their sum */
    double virt_extra;       /* address space beyond the resident need (RLIMIT_AS only) */
    double avail;            /* bytes the process may still take (smallest limit) */
    const char *limit;       /* which limit that is */
    double arena_per_step;   /* the arena estimate alone, for comparison with the measured peak */
    double start_vm;         /* address space at the estimate (VmSize) */
} nj_mem_need;

/* Resident set now (peak = 0: VmRSS) or at its high-water mark (peak = 1:
 * VmHWM), in bytes, from /proc/self/status; 0 when unknown. */
double nj_mem_rss(int peak);
/* Address space now (peak = 0: VmSize) or its peak (VmPeak), in bytes. */
double nj_mem_vm(int peak);
/* Bytes the process may still allocate: the smallest of MemAvailable, the
 * RLIMIT_AS soft limit minus the current address space (minus `virt_extra`
 * the run will reserve beyond its resident need) and the cgroup memory limit
 * minus its usage.  *limit names the one in force.  HUGE_VAL when nothing is
 * known. */
double nj_mem_available(double virt_extra, const char **limit);

#endif

/* nn/arena.h — per-step bump allocator.
 *
 * Activations, gradients, saved state and scratch of one training step come
 * from an arena.  nj_arena_reset() makes all of it reusable without freeing:
 * the chunks obtained in the first step are walked again in the same order,
 * so a step that repeats the same allocations does no system allocation after
 * the first (nj_arena_sysallocs() lets tests prove it).
 */
#ifndef NJ_ARENA_H
#define NJ_ARENA_H
#include <stddef.h>

typedef struct nj_arena nj_arena;

/* chunk_bytes: size of each system allocation (larger requests get their own). */
nj_arena *nj_arena_new(size_t chunk_bytes);
void nj_arena_free(nj_arena *a);
/* 64-byte aligned, uninitialised; NULL only when the system is out of memory. */
void *nj_arena_alloc(nj_arena *a, size_t bytes);
/* Same, zero-filled. */
void *nj_arena_calloc(nj_arena *a, size_t bytes);
void nj_arena_reset(nj_arena *a);
/* Number of system allocations made since creation. */
size_t nj_arena_sysallocs(const nj_arena *a);
/* Bytes handed out since the last reset, and the high-water mark. */
size_t nj_arena_used(const nj_arena *a);
size_t nj_arena_peak(const nj_arena *a);

#endif

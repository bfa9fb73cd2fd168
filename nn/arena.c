/* nn/arena.c — chunked bump allocator reused across steps (see arena.h). */
#include "nn/arena.h"
#include <stdlib.h>
#include <string.h>

#define NJ_ALIGN 64

typedef struct chunk {
    struct chunk *next;
    size_t size, used;
    unsigned char *mem;
} chunk;

struct nj_arena {
    chunk *head, *cur;
    size_t chunk_bytes, sysallocs, used, peak;
};

nj_arena *nj_arena_new(size_t chunk_bytes)
{
    nj_arena *a = calloc(1, sizeof *a);
    if (a) a->chunk_bytes = chunk_bytes ? chunk_bytes : (size_t)64 << 20;
    return a;
}

void nj_arena_free(nj_arena *a)
{
    if (!a) return;
    for (chunk *c = a->head, *n; c; c = n) {
        n = c->next;
        free(c->mem);
        free(c);
    }
    free(a);
}

static chunk *chunk_new(nj_arena *a, size_t min_bytes)
{
    size_t size = min_bytes > a->chunk_bytes ? min_bytes : a->chunk_bytes;
    chunk *c = calloc(1, sizeof *c);
    if (!c) return NULL;
    c->mem = aligned_alloc(NJ_ALIGN, (size + NJ_ALIGN - 1) / NJ_ALIGN * NJ_ALIGN);
    if (!c->mem) { free(c); return NULL; }
    c->size = size;
    a->sysallocs++;
    return c;
}

void *nj_arena_alloc(nj_arena *a, size_t bytes)
{
    size_t need = (bytes + NJ_ALIGN - 1) / NJ_ALIGN * NJ_ALIGN;
    if (need == 0) need = NJ_ALIGN;
    if (!a->cur) {
        if (!a->head && !(a->head = chunk_new(a, need))) return NULL;
        a->cur = a->head;
    }
    /* Walk forward to a chunk with room; retained chunks are reused in order. */
    while (a->cur->used + need > a->cur->size) {
        if (!a->cur->next) {
            chunk *c = chunk_new(a, need);
            if (!c) return NULL;
            a->cur->next = c;
        }
        a->cur = a->cur->next;
    }
    void *p = a->cur->mem + a->cur->used;
    a->cur->used += need;
    a->used += need;
    if (a->used > a->peak) a->peak = a->used;
    return p;
}

void *nj_arena_calloc(nj_arena *a, size_t bytes)
{
    void *p = nj_arena_alloc(a, bytes);
    if (p) memset(p, 0, bytes);
    return p;
}

void nj_arena_reset(nj_arena *a)
{
    for (chunk *c = a->head; c; c = c->next) c->used = 0;
    a->cur = a->head;
    a->used = 0;
}

size_t nj_arena_sysallocs(const nj_arena *a) { return a->sysallocs; }
size_t nj_arena_used(const nj_arena *a) { return a->used; }
size_t nj_arena_peak(const nj_arena *a) { return a->peak; }

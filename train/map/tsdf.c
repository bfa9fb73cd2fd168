/* train/map/tsdf.c — the truncated signed distance volume (Curless & Levoy
 * 1996) in sparse blocks of 8³ voxels found through an open-addressing hash
 * of block coordinates (the block layout of Nießner et al. 2013).
 *
 * Fusing a depth map: (1) every block within the truncation band around a
 * pixel's surface point is allocated (the ray is sampled every half block
 * from depth − band to depth + band); (2) every voxel of those blocks is
 * projected into the image (nearest pixel) and gets the projective signed
 * distance sdf = depth(pixel) − z(voxel), skipped when sdf < −band (hidden
 * behind the surface), else truncated to min(1, sdf/band) and averaged in:
 * D ← (W·D + d)/(W + 1), W ← W + 1.  The weight rule is constant (1 per
 * observation): D is the plain mean of the truncated distances, which is
 * Curless & Levoy's cumulative weighted average with unit weights.  Colour
 * is averaged the same way, only where |sdf| < band (near the surface).
 * Memory: blocks come in chunks of 1024 from the budget; fusing past the
 * budget fails with a message instead of growing. */
#include "train/map/map.h"
#include "train/map/tsdf_parts.h"
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define B NJ_MAP_BLOCK
#define BV (B * B * B)
#define CHUNK 1024
#define MAX_COORD (1 << 19)      /* voxel indices stay within ±2^19 (mesh edge keys) */

typedef struct voxel {
    float d, w;
    unsigned char rgb[4];
} voxel;

typedef struct block {
    int key[3];
    int stamp;                   /* last frame that touched it */
    voxel v[BV];
} block;

struct nj_tsdf {
    nj_tsdf_params p;
    block **chunk;               /* chunks of CHUNK blocks */
    long nblocks, nchunks;
    int *table;                  /* block index + 1, 0 = empty; size mask + 1 (power of two) */
    size_t mask;
    int frame;
    long *touched;               /* blocks touched by the current frame */
    long ntouched;
};

size_t nj_tsdf_block_bytes(void)
{
    return sizeof(block) + 2 * sizeof(int) + sizeof(long);   /* + hash slots + touched entry */
}

static block *block_at(const nj_tsdf *t, long i)
{
    return &t->chunk[i / CHUNK][i % CHUNK];
}

static size_t hash3(int a, int b, int c)
{
    uint64_t h = (uint64_t)(uint32_t)a * 0x9E3779B97F4A7C15ull ^ (uint64_t)(uint32_t)b * 0xC2B2AE3D27D4EB4Full ^
                 (uint64_t)(uint32_t)c * 0x165667B19E3779F9ull;
    return (size_t)(h ^ (h >> 29));
}

/* Index of block (a, b, c), or -1. */
static long find(const nj_tsdf *t, int a, int b, int c)
{
    for (size_t s = hash3(a, b, c) & t->mask;; s = (s + 1) & t->mask) {
        int e = t->table[s];
        if (!e) return -1;
        const block *k = block_at(t, e - 1);
        if (k->key[0] == a && k->key[1] == b && k->key[2] == c) return e - 1;
    }
}

/* Index of block (a, b, c), allocated when missing; -1 over budget or out of memory. */
static long insert(nj_tsdf *t, int a, int b, int c)
{
    size_t s = hash3(a, b, c) & t->mask;
    for (;; s = (s + 1) & t->mask) {
        int e = t->table[s];
        if (!e) break;
        const block *k = block_at(t, e - 1);
        if (k->key[0] == a && k->key[1] == b && k->key[2] == c) return e - 1;
    }
    if (t->nblocks >= t->p.max_blocks) return -1;
    long i = t->nblocks;
    if (i / CHUNK >= t->nchunks) {
        block *ch = calloc(CHUNK, sizeof *ch);
        if (!ch) return -1;
        t->chunk[t->nchunks++] = ch;
    }
    block *k = block_at(t, i);
    k->key[0] = a;
    k->key[1] = b;
    k->key[2] = c;
    k->stamp = -1;
    t->table[s] = (int)(i + 1);
    t->nblocks++;
    return i;
}

int nj_tsdf_create(nj_tsdf **out, const nj_tsdf_params *p, char *err, size_t errlen)
{
    *out = NULL;
    if (!(p->voxel > 0) || !(p->band > p->voxel) || !(p->max_depth >= 0) || p->max_blocks < 1 ||
        p->max_blocks > (1L << 28)) {
        snprintf(err, errlen, "volume: need voxel > 0, band > voxel, max depth >= 0, 1..2^28 blocks");
        return -1;
    }
    for (int a = 0; a < 3; a++)
        if (!(p->lo[a] < p->hi[a]) || fabsf(p->lo[a]) / p->voxel >= MAX_COORD - 2 * B ||
            fabsf(p->hi[a]) / p->voxel >= MAX_COORD - 2 * B) {
            snprintf(err, errlen, "volume: the extent must lie within +-%d voxels of the origin (%g each)",
                     MAX_COORD - 2 * B, p->voxel);
            return -1;
        }
    nj_tsdf *t = calloc(1, sizeof *t);
    size_t slots = 1024;
    while (slots < 2 * (size_t)p->max_blocks) slots *= 2;
    if (t) {
        t->p = *p;
        t->mask = slots - 1;
        t->table = calloc(slots, sizeof *t->table);
        t->chunk = calloc((size_t)(p->max_blocks / CHUNK + 1), sizeof *t->chunk);
        t->touched = malloc(sizeof *t->touched * (size_t)p->max_blocks);
    }
    if (!t || !t->table || !t->chunk || !t->touched) {
        nj_tsdf_free(t);
        snprintf(err, errlen, "volume: out of memory for a budget of %ld blocks", p->max_blocks);
        return -1;
    }
    *out = t;
    return 0;
}

void nj_tsdf_free(nj_tsdf *t)
{
    if (!t) return;
    for (long i = 0; i < t->nchunks; i++) free(t->chunk[i]);
    free(t->chunk);
    free(t->table);
    free(t->touched);
    free(t);
}

long nj_tsdf_blocks(const nj_tsdf *t)
{
    return t->nblocks;
}

static int floordiv(int a, int b)
{
    return a >= 0 ? a / b : -((-a + b - 1) / b);
}

static int inside_extent(const nj_tsdf *t, const double p[3])
{
    for (int a = 0; a < 3; a++)
        if (!(p[a] >= t->p.lo[a] && p[a] <= t->p.hi[a])) return 0;
    return 1;
}

/* Allocates (and lists) the block holding world point p; 0, or -1 over budget. */
static int touch(nj_tsdf *t, const double p[3], long *last)
{
    if (!inside_extent(t, p)) return 0;
    int a = floordiv((int)lround(p[0] / t->p.voxel), B), b = floordiv((int)lround(p[1] / t->p.voxel), B),
        c = floordiv((int)lround(p[2] / t->p.voxel), B);
    if (*last >= 0) {
        const block *k = block_at(t, *last);
        if (k->key[0] == a && k->key[1] == b && k->key[2] == c) return 0;
    }
    long i = insert(t, a, b, c);
    if (i < 0) return -1;
    *last = i;
    block *k = block_at(t, i);
    if (k->stamp != t->frame) {
        k->stamp = t->frame;
        t->touched[t->ntouched++] = i;
    }
    return 0;
}

static int valid_depth(const nj_tsdf *t, float d)
{
    return isfinite(d) && d > 0 && (t->p.max_depth == 0 || d <= t->p.max_depth);
}

/* Step 1: the blocks within the band of every pixel's surface point. */
static int allocate(nj_tsdf *t, const float *depth, int w, int h, nj_camera cam, const double *T)
{
    double step = 0.5 * B * t->p.voxel, band = t->p.band;
    long last = -1;
    for (int y = 0; y < h; y++)
        for (int x = 0; x < w; x++) {
            float d = depth[(size_t)y * w + x];
            if (!valid_depth(t, d)) continue;
            double rx = (x - cam.cx) / cam.fx, ry = (y - cam.cy) / cam.fy;
            for (double z = fmax(d - band, 1e-6);; z += step) {
                if (z > d + band) z = d + band;
                double p[3];
                for (int a = 0; a < 3; a++)
                    p[a] = T[4 * a] * rx * z + T[4 * a + 1] * ry * z + T[4 * a + 2] * z + T[4 * a + 3];
                if (touch(t, p, &last)) return -1;
                if (z >= d + band) break;
            }
        }
    return 0;
}

/* Depth at sub-pixel (fu, fv): bilinear between the four pixels around it
 * when all are valid and within 5% of each other (one surface), else the
 * nearest pixel's `near`.  On ground seen at a grazing angle the nearest
 * pixel's depth is off by up to half a pixel's depth step, which puts
 * spurious zero crossings under the ground; interpolation removes most. */
static float depth_at(const nj_tsdf *t, const float *depth, int w, int h, double fu, double fv, float near)
{
    int u0 = (int)floor(fu), v0 = (int)floor(fv);
    if (u0 < 0 || v0 < 0 || u0 + 1 >= w || v0 + 1 >= h) return near;
    const float *p = depth + (size_t)v0 * w + u0;
    float a = p[0], b = p[1], c = p[w], d = p[w + 1];
    if (!valid_depth(t, a) || !valid_depth(t, b) || !valid_depth(t, c) || !valid_depth(t, d)) return near;
    float lo = fminf(fminf(a, b), fminf(c, d)), hi = fmaxf(fmaxf(a, b), fmaxf(c, d));
    if (hi > 1.05f * lo) return near;
    float x = (float)(fu - u0), y = (float)(fv - v0);
    return (1 - y) * ((1 - x) * a + x * b) + y * ((1 - x) * c + x * d);
}

/* Step 2 for one block. */
static void integrate_block(nj_tsdf *t, block *k, const float *depth, int w, int h, const nj_image *colour,
                            nj_camera cam, const double *T)
{
    double vs = t->p.voxel, band = t->p.band;
    size_t plane = (size_t)w * h;
    for (int n = 0; n < BV; n++) {
        int i = k->key[0] * B + n % B, j = k->key[1] * B + (n / B) % B, l = k->key[2] * B + n / (B * B);
        double p[3] = {i * vs - T[3], j * vs - T[7], l * vs - T[11]}, q[3];
        for (int a = 0; a < 3; a++) q[a] = T[a] * p[0] + T[4 + a] * p[1] + T[8 + a] * p[2];   /* Rᵀ(p − c) */
        if (q[2] <= 1e-6) continue;
        double fu = cam.fx * q[0] / q[2] + cam.cx, fv = cam.fy * q[1] / q[2] + cam.cy;
        long u = lround(fu), v = lround(fv);
        if (u < 0 || v < 0 || u >= w || v >= h) continue;
        size_t px = (size_t)v * w + u;
        float d = depth_at(t, depth, w, h, fu, fv, depth[px]);
        if (!valid_depth(t, d)) continue;
        double sdf = d - q[2];
        if (sdf < -band) continue;
        voxel *e = &k->v[n];
        float tsdf = (float)fmin(1.0, sdf / band), wn = e->w + 1.0f;
        e->d = (e->d * e->w + tsdf) / wn;
        if (colour && fabs(sdf) < band)
            for (int c = 0; c < 3; c++) {
                float val = colour->data[c * plane + px] * 255.0f;
                e->rgb[c] = (unsigned char)lroundf((e->rgb[c] * e->w + val) / wn);
            }
        e->w = wn;
    }
}

int nj_tsdf_fuse(nj_tsdf *t, const float *depth, int w, int h, const nj_image *colour, nj_camera cam,
                 const double c2w[12], char *err, size_t errlen)
{
    t->frame++;
    t->ntouched = 0;
    if (allocate(t, depth, w, h, cam, c2w)) {
        snprintf(err, errlen,
                 "the map needs more than its budget of %ld blocks (%.0f MiB at %g per voxel): "
                 "raise the memory cap, coarsen the voxels or shorten the depth reach",
                 t->p.max_blocks, (double)t->p.max_blocks * nj_tsdf_block_bytes() / 1048576.0, t->p.voxel);
        return -1;
    }
    if (colour && (colour->w != w || colour->h != h)) colour = NULL;
    long n = t->ntouched;
#pragma omp parallel for schedule(dynamic, 16)
    for (long b = 0; b < n; b++) integrate_block(t, block_at(t, t->touched[b]), depth, w, h, colour, cam, c2w);
    return 0;
}

static void split(int i, int *blk, int *off)
{
    *blk = floordiv(i, B);
    *off = i - *blk * B;
}

int nj_tsdf_set(nj_tsdf *t, int i, int j, int k, float value, float weight)
{
    double p[3] = {i * (double)t->p.voxel, j * (double)t->p.voxel, k * (double)t->p.voxel};
    if (!inside_extent(t, p)) return -1;
    int a, b, c, x, y, z;
    split(i, &a, &x);
    split(j, &b, &y);
    split(k, &c, &z);
    long n = insert(t, a, b, c);
    if (n < 0) return -1;
    voxel *e = &block_at(t, n)->v[x + B * (y + B * z)];
    e->d = value;
    e->w = weight;
    return 0;
}

void nj_tsdf_get(const nj_tsdf *t, int i, int j, int k, float *value, float *weight)
{
    int a, b, c, x, y, z;
    split(i, &a, &x);
    split(j, &b, &y);
    split(k, &c, &z);
    long n = find(t, a, b, c);
    const voxel *e = n < 0 ? NULL : &block_at(t, n)->v[x + B * (y + B * z)];
    *value = e ? e->d : 0.0f;
    *weight = e ? e->w : 0.0f;
}

/* ---- for the mesh (mcubes.c) ---------------------------------------------------- */

void nj_tsdf_block_key(const nj_tsdf *t, long b, int key[3])
{
    memcpy(key, block_at(t, b)->key, sizeof(int) * 3);
}

long nj_tsdf_find(const nj_tsdf *t, int a, int b, int c)
{
    return find(t, a, b, c);
}

void nj_tsdf_voxel(const nj_tsdf *t, long b, int n, float *d, float *w, unsigned char rgb[3])
{
    const voxel *e = &block_at(t, b)->v[n];
    *d = e->d;
    *w = e->w;
    memcpy(rgb, e->rgb, 3);
}

float nj_tsdf_voxel_size(const nj_tsdf *t)
{
    return t->p.voxel;
}

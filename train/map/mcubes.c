/* train/map/mcubes.c — triangle mesh of the volume's zero level set by
 * marching cubes (Lorensen & Cline 1987).
 *
 * The case table is built here, not typed in: for each of the 256 sign
 * patterns of a cell's corners, the crossed edges are joined face by face
 * (two crossed edges on a face: one segment; four: the face is ambiguous and
 * the segments cut off its two non-negative corners, a rule both cells
 * sharing the face apply alike, so the surface has no cracks), the segments
 * are chained into closed loops, each loop is oriented so that its normal
 * points from the negative corners to the positive ones (towards the free
 * side) and fanned into triangles.  Corner c of a cell is at offset
 * (c & 1, c >> 1 & 1, c >> 2 & 1); "negative" is value < 0.  A vertex sits on
 * a crossed edge at the linear zero crossing of its two values and is shared
 * by the (up to four) cells around that edge. */
#include "train/map/map.h"
#include "train/map/tsdf_parts.h"
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define B NJ_MAP_BLOCK
#define MAXTRI 12

typedef struct mc_table {
    int ntri[256];
    signed char tri[256][MAXTRI * 3];   /* edge indices */
    int edge[12][2];                    /* corners of each edge (lower corner first) */
} mc_table;

/* The faces of a cell: their corners in cyclic order. */
static const int FACE[6][4] = {{0, 2, 6, 4}, {1, 3, 7, 5}, {0, 1, 5, 4}, {2, 3, 7, 6}, {0, 1, 3, 2}, {4, 5, 7, 6}};

static int edge_of(const mc_table *t, int a, int b)
{
    for (int e = 0; e < 12; e++)
        if ((t->edge[e][0] == a && t->edge[e][1] == b) || (t->edge[e][0] == b && t->edge[e][1] == a)) return e;
    return -1;
}

static void corner_pos(int c, double p[3])
{
    p[0] = c & 1;
    p[1] = c >> 1 & 1;
    p[2] = c >> 2 & 1;
}

/* Orients a loop of edges (n of them) towards the positive corners and fans it. */
static void emit_loop(mc_table *t, int cs, int *loop, int n)
{
    double nrm[3] = {0, 0, 0}, g[3] = {0, 0, 0}, p[12][3];
    for (int i = 0; i < n; i++) {
        double a[3], b[3];
        corner_pos(t->edge[loop[i]][0], a);
        corner_pos(t->edge[loop[i]][1], b);
        int a_neg = cs >> t->edge[loop[i]][0] & 1;
        for (int k = 0; k < 3; k++) {
            p[i][k] = 0.5 * (a[k] + b[k]);
            g[k] += a_neg ? b[k] - a[k] : a[k] - b[k];
        }
    }
    for (int i = 0; i < n; i++) {   /* Newell's polygon normal */
        const double *u = p[i], *v = p[(i + 1) % n];
        nrm[0] += (u[1] - v[1]) * (u[2] + v[2]);
        nrm[1] += (u[2] - v[2]) * (u[0] + v[0]);
        nrm[2] += (u[0] - v[0]) * (u[1] + v[1]);
    }
    int flip = nrm[0] * g[0] + nrm[1] * g[1] + nrm[2] * g[2] < 0;
    for (int i = 1; i + 1 < n; i++) {
        int k = t->ntri[cs]++;
        t->tri[cs][3 * k] = (signed char)loop[0];
        t->tri[cs][3 * k + 1] = (signed char)loop[flip ? i + 1 : i];
        t->tri[cs][3 * k + 2] = (signed char)loop[flip ? i : i + 1];
    }
}

static void build_case(mc_table *t, int cs)
{
    int nb[12][2], deg[12] = {0};
    for (int f = 0; f < 6; f++) {
        int c[4], e[4], s[4], cut[4], n = 0;
        for (int i = 0; i < 4; i++) {
            c[i] = FACE[f][i];
            s[i] = cs >> c[i] & 1;
        }
        for (int i = 0; i < 4; i++) {
            e[i] = edge_of(t, c[i], c[(i + 1) % 4]);
            if (s[i] != s[(i + 1) % 4]) cut[n++] = i;
        }
        int pairs[2][2], np = 0;
        if (n == 2) {
            pairs[np][0] = e[cut[0]];
            pairs[np++][1] = e[cut[1]];
        } else if (n == 4) {
            /* cut off the non-negative corners: corner i lies between edges i-1 and i */
            int first = s[0] ? 1 : 0;
            for (int k = 0; k < 2; k++) {
                int ci = first + 2 * k;
                pairs[np][0] = e[(ci + 3) % 4];
                pairs[np++][1] = e[ci];
            }
        }
        for (int k = 0; k < np; k++) {
            int a = pairs[k][0], b = pairs[k][1];
            nb[a][deg[a]++] = b;
            nb[b][deg[b]++] = a;
        }
    }
    int used[12] = {0};
    for (int start = 0; start < 12; start++) {
        if (!deg[start] || used[start]) continue;
        int loop[12], n = 0, prev = -1, cur = start;
        while (!used[cur]) {
            used[cur] = 1;
            loop[n++] = cur;
            int next = nb[cur][0] == prev ? nb[cur][1] : nb[cur][0];
            prev = cur;
            cur = next;
        }
        emit_loop(t, cs, loop, n);
    }
}

static void build_table(mc_table *t)
{
    int e = 0;
    for (int axis = 0; axis < 3; axis++)
        for (int c = 0; c < 8; c++)
            if (!(c >> axis & 1)) {
                t->edge[e][0] = c;
                t->edge[e][1] = c | 1 << axis;
                e++;
            }
    for (int cs = 0; cs < 256; cs++) {
        t->ntri[cs] = 0;
        build_case(t, cs);
    }
}

/* ---- vertices shared along grid edges ------------------------------------------- */

typedef struct edge_map {
    uint64_t *key;
    long *val;
    size_t mask, used;
} edge_map;

static uint64_t edge_key(int i, int j, int k, int axis)
{
    const int off = 1 << 19;
    return ((uint64_t)(i + off) << 42 | (uint64_t)(j + off) << 22 | (uint64_t)(k + off) << 2 | (uint64_t)axis) + 1;
}

static int map_grow(edge_map *m)
{
    size_t cap = m->mask ? 2 * (m->mask + 1) : 1 << 16;
    uint64_t *key = calloc(cap, sizeof *key);
    long *val = malloc(cap * sizeof *val);
    if (!key || !val) {
        free(key);
        free(val);
        return -1;
    }
    for (size_t s = 0; m->mask && s <= m->mask; s++) {
        if (!m->key[s]) continue;
        size_t q = (size_t)(m->key[s] * 0x9E3779B97F4A7C15ull >> 20) & (cap - 1);
        while (key[q]) q = (q + 1) & (cap - 1);
        key[q] = m->key[s];
        val[q] = m->val[s];
    }
    free(m->key);
    free(m->val);
    m->key = key;
    m->val = val;
    m->mask = cap - 1;
    return 0;
}

/* Slot of key: its value when present (*found = 1), else where it goes. */
static size_t map_slot(const edge_map *m, uint64_t key, int *found)
{
    size_t q = (size_t)(key * 0x9E3779B97F4A7C15ull >> 20) & m->mask;
    while (m->key[q] && m->key[q] != key) q = (q + 1) & m->mask;
    *found = m->key[q] == key;
    return q;
}

/* ---- extraction -------------------------------------------------------------------- */

typedef struct corner {
    float d, w;
    unsigned char rgb[3];
} corner;

typedef struct extract {
    const nj_tsdf *t;
    const mc_table *tab;
    nj_mesh *m;
    long vcap, tcap;
    edge_map edges;
    float vs;
} extract;

static int push_vertex(extract *x, const double p[3], const float rgb[3])
{
    nj_mesh *m = x->m;
    if (m->nv == x->vcap) {
        long cap = x->vcap ? 2 * x->vcap : 4096;
        float *xyz = realloc(m->xyz, sizeof(float) * 3 * cap);
        if (xyz) m->xyz = xyz;
        unsigned char *c = realloc(m->rgb, 3 * cap);
        if (c) m->rgb = c;
        if (!xyz || !c) return -1;
        x->vcap = cap;
    }
    for (int k = 0; k < 3; k++) {
        m->xyz[3 * m->nv + k] = (float)p[k];
        m->rgb[3 * m->nv + k] = (unsigned char)(rgb[k] + 0.5f);
    }
    m->nv++;
    return 0;
}

/* The vertex on edge e of the cell with lower corner (i, j, k); -1 out of memory. */
static long vertex(extract *x, int i, int j, int k, const corner *c, int e)
{
    int a = x->tab->edge[e][0], b = x->tab->edge[e][1], axis = (b - a) == 1 ? 0 : (b - a) == 2 ? 1 : 2;
    uint64_t key = edge_key(i + (a & 1), j + (a >> 1 & 1), k + (a >> 2 & 1), axis);
    if (4 * (x->edges.used + 1) > 3 * (x->edges.mask + 1) && map_grow(&x->edges)) return -1;
    int found;
    size_t s = map_slot(&x->edges, key, &found);
    if (found) return x->edges.val[s];
    double t = c[a].d / (double)(c[a].d - c[b].d), p[3];
    int ga[3] = {i + (a & 1), j + (a >> 1 & 1), k + (a >> 2 & 1)};
    for (int q = 0; q < 3; q++) p[q] = (ga[q] + (q == axis ? t : 0.0)) * x->vs;
    float rgb[3];
    for (int q = 0; q < 3; q++) rgb[q] = (float)((1 - t) * c[a].rgb[q] + t * c[b].rgb[q]);
    if (push_vertex(x, p, rgb)) return -1;
    x->edges.key[s] = key;
    x->edges.val[s] = x->m->nv - 1;
    x->edges.used++;
    return x->m->nv - 1;
}

static int push_triangle(extract *x, const long v[3])
{
    nj_mesh *m = x->m;
    if (m->nt == x->tcap) {
        long cap = x->tcap ? 2 * x->tcap : 4096;
        int *tri = realloc(m->tri, sizeof(int) * 3 * cap);
        if (!tri) return -1;
        m->tri = tri;
        x->tcap = cap;
    }
    for (int k = 0; k < 3; k++) m->tri[3 * m->nt + k] = (int)v[k];
    m->nt++;
    return 0;
}

/* One cell: corners from the block and its +x/+y/+z neighbours (nb[dx + 2dy + 4dz]). */
static int cell(extract *x, const long nb[8], const int key[3], int cx, int cy, int cz)
{
    corner c[8];
    int cs = 0;
    for (int q = 0; q < 8; q++) {
        int lx = cx + (q & 1), ly = cy + (q >> 1 & 1), lz = cz + (q >> 2 & 1);
        int o = (lx >= B) + 2 * (ly >= B) + 4 * (lz >= B);
        if (nb[o] < 0) return 0;
        nj_tsdf_voxel(x->t, nb[o], lx % B + B * (ly % B + B * (lz % B)), &c[q].d, &c[q].w, c[q].rgb);
        if (!(c[q].w > 0)) return 0;
        cs |= (c[q].d < 0) << q;
    }
    const mc_table *tab = x->tab;
    int i = key[0] * B + cx, j = key[1] * B + cy, k = key[2] * B + cz;
    for (int n = 0; n < tab->ntri[cs]; n++) {
        long v[3];
        for (int q = 0; q < 3; q++)
            if ((v[q] = vertex(x, i, j, k, c, tab->tri[cs][3 * n + q])) < 0) return -1;
        if (push_triangle(x, v)) return -1;
    }
    return 0;
}

static int block_cells(extract *x, long b)
{
    int key[3];
    long nb[8];
    nj_tsdf_block_key(x->t, b, key);
    for (int o = 0; o < 8; o++)
        nb[o] = o ? nj_tsdf_find(x->t, key[0] + (o & 1), key[1] + (o >> 1 & 1), key[2] + (o >> 2 & 1)) : b;
    for (int cz = 0; cz < B; cz++)
        for (int cy = 0; cy < B; cy++)
            for (int cx = 0; cx < B; cx++)
                if (cell(x, nb, key, cx, cy, cz)) return -1;
    return 0;
}

int nj_tsdf_mesh(const nj_tsdf *t, nj_mesh *m, char *err, size_t errlen)
{
    memset(m, 0, sizeof *m);
    mc_table *tab = malloc(sizeof *tab);
    extract x = {t, tab, m, 0, 0, {NULL, NULL, 0, 0}, nj_tsdf_voxel_size(t)};
    int rc = tab && !map_grow(&x.edges) ? 0 : -1;
    if (!rc) build_table(tab);
    for (long b = 0; !rc && b < nj_tsdf_blocks(t); b++) rc = block_cells(&x, b);
    free(tab);
    free(x.edges.key);
    free(x.edges.val);
    if (rc) {
        nj_mesh_free(m);
        snprintf(err, errlen, "mesh: out of memory");
    }
    return rc;
}

void nj_mesh_free(nj_mesh *m)
{
    free(m->xyz);
    free(m->rgb);
    free(m->tri);
    memset(m, 0, sizeof *m);
}

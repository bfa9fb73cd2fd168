/* data/render.c — the yard ray-caster (see render.h). */
#include "data/render.h"
#include "data/texture.h"
#include <math.h>
#include <stdlib.h>
#include <string.h>

#define TILE 16
#define NEAR 0.05f

typedef struct bins {
    int tw, th, cap;
    int *count;              /* per tile */
    int *idx;                /* per tile: cap object indices */
} bins;

/* Pixel rectangle [u0,u1]×[v0,v1] that can see the sphere; 0 if none. */
static int sphere_rect(const nj_view *v, const float c[3], float r, int rect[4])
{
    double d[3] = {c[0] - v->c[0], c[1] - v->c[1], c[2] - v->c[2]}, p[3];
    for (int i = 0; i < 3; i++) p[i] = v->R[i] * d[0] + v->R[3 + i] * d[1] + v->R[6 + i] * d[2];
    if (p[2] + r <= NEAR) return 0;
    if (p[2] - r <= NEAR) {                     /* straddles the camera plane: anywhere */
        rect[0] = 0; rect[1] = v->w - 1; rect[2] = 0; rect[3] = v->h - 1;
        return 1;
    }
    double umin = 1e30, umax = -1e30, vmin = 1e30, vmax = -1e30;
    for (int sx = -1; sx <= 1; sx += 2)
        for (int sz = -1; sz <= 1; sz += 2) {   /* extremes over the sphere's bounding box */
            double z = p[2] + sz * r, u = v->fx * (p[0] + sx * r) / z + v->cx, w = v->fy * (p[1] + sx * r) / z + v->cy;
            umin = fmin(umin, u); umax = fmax(umax, u);
            vmin = fmin(vmin, w); vmax = fmax(vmax, w);
        }
    rect[0] = umin < 0 ? 0 : (int)floor(umin);
    rect[1] = umax > v->w - 1 ? v->w - 1 : (int)ceil(umax);
    rect[2] = vmin < 0 ? 0 : (int)floor(vmin);
    rect[3] = vmax > v->h - 1 ? v->h - 1 : (int)ceil(vmax);
    return rect[0] <= rect[1] && rect[2] <= rect[3];
}

static int bin_objects(const nj_view *v, const nj_object *obj, int n, bins *b)
{
    b->tw = (v->w + TILE - 1) / TILE;
    b->th = (v->h + TILE - 1) / TILE;
    b->cap = n ? n : 1;
    b->count = calloc((size_t)b->tw * b->th, sizeof(int));
    b->idx = malloc((size_t)b->tw * b->th * b->cap * sizeof(int));
    if (!b->count || !b->idx) { free(b->count); free(b->idx); return -1; }
    for (int i = 0; i < n; i++) {
        float c[3], r;
        int rect[4];
        nj_object_sphere(&obj[i], c, &r);
        if (!sphere_rect(v, c, r, rect)) continue;
        for (int ty = rect[2] / TILE; ty <= rect[3] / TILE; ty++)
            for (int tx = rect[0] / TILE; tx <= rect[1] / TILE; tx++) {
                int t = ty * b->tw + tx;
                b->idx[t * b->cap + b->count[t]++] = i;
            }
    }
    return 0;
}

/* Colour and depth of one pixel; returns the material hit. */
static int trace(const nj_scene *s, const nj_object *obj, const bins *b, const nj_view *v,
                 int u, int y, float *rgb, float *depth)
{
    float dc[3] = {(u - v->cx) / v->fx, (y - v->cy) / v->fy, 1.0f}, org[3], dir[3];
    for (int i = 0; i < 3; i++) {
        org[i] = (float)v->c[i];
        dir[i] = (float)(v->R[3 * i] * dc[0] + v->R[3 * i + 1] * dc[1] + v->R[3 * i + 2] * dc[2]);
    }
    nj_hit h;
    memset(&h, 0, sizeof h);
    h.t = INFINITY;
    nj_ground_intersect(org, dir, &h);
    nj_wall_intersect(s, org, dir, &h);
    int t = (y / TILE) * b->tw + u / TILE;
    for (int k = 0; k < b->count[t]; k++) nj_object_intersect(&obj[b->idx[t * b->cap + k]], org, dir, &h);
    float len = sqrtf(dir[0] * dir[0] + dir[1] * dir[1] + dir[2] * dir[2]), unit[3];
    for (int i = 0; i < 3; i++) unit[i] = dir[i] / len;
    if (!isfinite(h.t)) {
        nj_sky(s, unit, rgb);
        *depth = 0;
        return NJ_MAT_SKY;
    }
    for (int i = 0; i < 3; i++) h.p[i] = org[i] + h.t * dir[i];
    float cosn = fabsf(h.n[0] * unit[0] + h.n[1] * unit[1] + h.n[2] * unit[2]);
    float fw = h.t * len / v->fx / (cosn > 0.1f ? cosn : 0.1f);
    nj_shade(s, &h, fw, rgb);
    *depth = h.t;
    return h.material;
}

int nj_render(const nj_scene *s, const nj_view *v, float time, float *rgb, float *depth)
{
    return nj_render_with(s, v, time, NULL, 0, rgb, depth, NULL);
}

int nj_render_with(const nj_scene *s, const nj_view *v, float time, const nj_object *extra, int nextra,
                   float *rgb, float *depth, unsigned char *lead_mask)
{
    int nm = s->nobj + (s->has_mover ? 1 : 0), n = nm + nextra;
    nj_object *obj = malloc((size_t)(n ? n : 1) * sizeof(nj_object));
    if (!obj) return -1;
    memcpy(obj, s->obj, (size_t)s->nobj * sizeof(nj_object));
    if (s->has_mover) obj[s->nobj] = nj_scene_mover_at(s, time);
    if (nextra) memcpy(obj + nm, extra, (size_t)nextra * sizeof(nj_object));
    bins b;
    if (bin_objects(v, obj, n, &b)) { free(obj); return -1; }
    size_t plane = (size_t)v->w * v->h;
#pragma omp parallel for schedule(dynamic, 4)
    for (int y = 0; y < v->h; y++)
        for (int u = 0; u < v->w; u++) {
            float c[3];
            size_t i = (size_t)y * v->w + u;
            int mat = trace(s, obj, &b, v, u, y, c, &depth[i]);
            if (lead_mask) lead_mask[i] = mat == NJ_MAT_CART ? 255 : 0;
            rgb[i] = c[0];
            rgb[plane + i] = c[1];
            rgb[2 * plane + i] = c[2];
        }
    free(b.count);
    free(b.idx);
    free(obj);
    return 0;
}

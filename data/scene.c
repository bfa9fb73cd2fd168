/* data/scene.c — ray intersection with the yard's primitives: oriented boxes
 * (slab method, Kay & Kajiya 1986), vertical cylinders, the ground plane and
 * the inside of the perimeter wall. */
#include "data/scene.h"
#include <math.h>
#include <stddef.h>

static void to_local(const nj_object *o, float wx, float wz, float *lx, float *lz)
{
    *lx = o->cs * wx - o->sn * wz;
    *lz = o->sn * wx + o->cs * wz;
}

static void to_world(const nj_object *o, float lx, float lz, float *wx, float *wz)
{
    *wx = o->cs * lx + o->sn * lz;
    *wz = -o->sn * lx + o->cs * lz;
}

/* Entry into the slab lo ≤ org + t·dir ≤ hi: updates [t0, t1] and the entry axis. */
static int slab(float org, float dir, float lo, float hi, float *t0, float *t1, int axis, int *enter, float *sign)
{
    if (fabsf(dir) < 1e-12f) return org >= lo && org <= hi;
    float a = (lo - org) / dir, b = (hi - org) / dir, s = -1.0f;
    if (a > b) { float t = a; a = b; b = t; s = 1.0f; }
    if (a > *t0) { *t0 = a; *enter = axis; *sign = s; }
    if (b < *t1) *t1 = b;
    return *t0 <= *t1;
}

static void face_coords(int axis, float lx, float y, float lz, nj_hit *h)
{
    if (axis == 0) { h->u = lz; h->v = -y; }
    else if (axis == 2) { h->u = lx; h->v = -y; }
    else { h->u = lx; h->v = lz; }
}

static int box_hit(const nj_object *o, const float org[3], const float dir[3], nj_hit *h)
{
    float ox, oz, dx, dz;
    to_local(o, org[0] - o->x, org[2] - o->z, &ox, &oz);
    to_local(o, dir[0], dir[2], &dx, &dz);
    float t0 = 1e-6f, t1 = h->t, sign = 0;
    int axis = -1;
    if (!slab(ox, dx, -o->hx, o->hx, &t0, &t1, 0, &axis, &sign)) return 0;
    if (!slab(org[1], dir[1], o->y0, o->y1, &t0, &t1, 1, &axis, &sign)) return 0;
    if (!slab(oz, dz, -o->hz, o->hz, &t0, &t1, 2, &axis, &sign)) return 0;
    if (axis < 0 || t0 >= h->t) return 0;   /* starts inside, or farther than the current hit */
    float ln[3] = {0, 0, 0};
    ln[axis] = sign;
    h->t = t0;
    to_world(o, ln[0], ln[2], &h->n[0], &h->n[2]);
    h->n[1] = ln[1];
    face_coords(axis, ox + t0 * dx, org[1] + t0 * dir[1], oz + t0 * dz, h);
    return 1;
}

static int cylinder_hit(const nj_object *o, const float org[3], const float dir[3], nj_hit *h)
{
    float ox = org[0] - o->x, oz = org[2] - o->z, r = o->hx;
    float a = dir[0] * dir[0] + dir[2] * dir[2], b = 2 * (ox * dir[0] + oz * dir[2]), c = ox * ox + oz * oz - r * r;
    float disc = b * b - 4 * a * c;
    if (a < 1e-12f || disc < 0 || c < 0) return 0;
    float t = (-b - sqrtf(disc)) / (2 * a);
    if (t <= 1e-6f || t >= h->t) return 0;
    float y = org[1] + t * dir[1];
    if (y < o->y0 || y > o->y1) return 0;
    float px = ox + t * dir[0], pz = oz + t * dir[2];
    h->t = t;
    h->n[0] = px / r;
    h->n[1] = 0;
    h->n[2] = pz / r;
    h->u = r * atan2f(pz, px);
    h->v = -y;
    return 1;
}

int nj_object_intersect(const nj_object *o, const float org[3], const float dir[3], nj_hit *h)
{
    int hit = o->shape == NJ_SHAPE_BOX ? box_hit(o, org, dir, h) : cylinder_hit(o, org, dir, h);
    if (hit) {
        h->material = o->material;
        h->obj = o;
    }
    return hit;
}

int nj_ground_intersect(const float org[3], const float dir[3], nj_hit *h)
{
    if (dir[1] <= 0 || org[1] >= 0) return 0;
    float t = -org[1] / dir[1];
    if (t >= h->t) return 0;
    h->t = t;
    h->n[0] = 0;
    h->n[1] = -1;
    h->n[2] = 0;
    h->u = org[0] + t * dir[0];
    h->v = org[2] + t * dir[2];
    h->material = NJ_MAT_GROUND;
    h->obj = NULL;
    return 1;
}

/* Exit distance from [lo, hi] along one axis (the ray starts inside). */
static float exit_t(float o, float d, float lo, float hi)
{
    if (d > 1e-12f) return (hi - o) / d;
    if (d < -1e-12f) return (lo - o) / d;
    return INFINITY;
}

int nj_wall_intersect(const nj_scene *s, const float org[3], const float dir[3], nj_hit *h)
{
    float tx = exit_t(org[0], dir[0], s->xmin, s->xmax), tz = exit_t(org[2], dir[2], s->zmin, s->zmax);
    float t = tx < tz ? tx : tz;
    if (!(t < h->t)) return 0;
    float y = org[1] + t * dir[1];
    if (y < -s->wall_height || y > 0) return 0;
    h->t = t;
    h->n[1] = 0;
    if (tx < tz) { h->n[0] = dir[0] > 0 ? -1.0f : 1.0f; h->n[2] = 0; h->u = org[2] + t * dir[2]; }
    else { h->n[0] = 0; h->n[2] = dir[2] > 0 ? -1.0f : 1.0f; h->u = org[0] + t * dir[0]; }
    h->v = -y;
    h->material = NJ_MAT_WALL;
    h->obj = NULL;
    return 1;
}

void nj_object_sphere(const nj_object *o, float c[3], float *r)
{
    float hy = 0.5f * (o->y1 - o->y0);
    c[0] = o->x;
    c[1] = 0.5f * (o->y0 + o->y1);
    c[2] = o->z;
    *r = o->shape == NJ_SHAPE_BOX ? sqrtf(o->hx * o->hx + o->hz * o->hz + hy * hy) : sqrtf(o->hx * o->hx + hy * hy);
}

float nj_object_footprint_distance(const nj_object *o, float x, float z)
{
    if (o->shape == NJ_SHAPE_CYLINDER) {
        float d = hypotf(x - o->x, z - o->z) - o->hx;
        return d > 0 ? d : 0;
    }
    float lx, lz;
    to_local(o, x - o->x, z - o->z, &lx, &lz);
    float dx = fabsf(lx) - o->hx, dz = fabsf(lz) - o->hz;
    dx = dx > 0 ? dx : 0;
    dz = dz > 0 ? dz : 0;
    return hypotf(dx, dz);
}

nj_object nj_scene_mover_at(const nj_scene *s, float t)
{
    nj_object m = s->mover;
    m.x = s->mover_p0[0] + s->mover_v[0] * t;
    m.z = s->mover_p0[1] + s->mover_v[1] * t;
    return m;
}

/* Distance from a to the interval [lo, hi] (0 inside). */
static float outside(float a, float lo, float hi)
{
    return a < lo ? lo - a : a > hi ? a - hi : 0.0f;
}

/* Distance to the surface of a box given in its local frame: outside, the
 * Euclidean distance to the solid; inside, the distance to the nearest face. */
static float box_surface(float lx, float y, float lz, const nj_object *o)
{
    float ox = outside(lx, -o->hx, o->hx), oy = outside(y, o->y0, o->y1), oz = outside(lz, -o->hz, o->hz);
    if (ox > 0 || oy > 0 || oz > 0) return sqrtf(ox * ox + oy * oy + oz * oz);
    float d = fminf(o->hx - fabsf(lx), o->hz - fabsf(lz));
    return fminf(d, fminf(y - o->y0, o->y1 - y));
}

static float object_surface(const nj_object *o, const float p[3])
{
    if (o->shape == NJ_SHAPE_BOX) {
        float lx, lz;
        to_local(o, p[0] - o->x, p[2] - o->z, &lx, &lz);
        return box_surface(lx, p[1], lz, o);
    }
    float r = hypotf(p[0] - o->x, p[2] - o->z), dr = r - o->hx, oy = outside(p[1], o->y0, o->y1);
    if (dr > 0 || oy > 0) {
        dr = dr > 0 ? dr : 0;
        return sqrtf(dr * dr + oy * oy);
    }
    return fminf(-dr, fminf(p[1] - o->y0, o->y1 - p[1]));
}

/* One inner face of the perimeter: the vertical rectangle at coordinate `at`
 * of axis a (0 = x, 2 = z), spanning [lo, hi] along the other horizontal axis. */
static float wall_face(const nj_scene *s, const float p[3], int a, float at, float lo, float hi)
{
    float d = p[a] - at, e = outside(p[2 - a], lo, hi), f = outside(p[1], -s->wall_height, 0.0f);
    return sqrtf(d * d + e * e + f * f);
}

float nj_scene_distance(const nj_scene *s, const float p[3])
{
    float ex = outside(p[0], s->xmin, s->xmax), ez = outside(p[2], s->zmin, s->zmax);
    float d = sqrtf(p[1] * p[1] + ex * ex + ez * ez);   /* the ground inside the perimeter */
    d = fminf(d, wall_face(s, p, 0, s->xmin, s->zmin, s->zmax));
    d = fminf(d, wall_face(s, p, 0, s->xmax, s->zmin, s->zmax));
    d = fminf(d, wall_face(s, p, 2, s->zmin, s->xmin, s->xmax));
    d = fminf(d, wall_face(s, p, 2, s->zmax, s->xmin, s->xmax));
    for (int i = 0; i < s->nobj; i++) d = fminf(d, object_surface(&s->obj[i], p));
    return d;
}

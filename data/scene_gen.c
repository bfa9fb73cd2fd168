/* data/scene_gen.c — laying out a robot yard around a vehicle path:
 * shipping containers (some stacked) lining the route, wooden crates (some
 * stacked), poles, a perimeter wall, and optionally a robot that crosses the
 * route, and a lead cart riding ahead of the vehicle.  Everything keeps a
 * clearance from the path, so the camera never enters an object, and from
 * every placement of the lead cart. */
#include "data/scene_gen.h"
#include <math.h>
#include <stdlib.h>
#include <string.h>

#define PI 3.14159265358979323846f
#define CLEARANCE 2.0f          /* metres between the path and any static object */
#define MARGIN 14.0f            /* yard extends this far beyond the path */
#define MAX_OBJECTS 512

static float uni(nj_rng *r, float a, float b) { return a + (b - a) * (float)nj_rng_uniform(r); }

static const float CONTAINER_PAINT[7][3] = {
    {0.55f, 0.18f, 0.12f}, {0.12f, 0.28f, 0.55f}, {0.15f, 0.42f, 0.25f}, {0.80f, 0.45f, 0.10f},
    {0.55f, 0.55f, 0.52f}, {0.85f, 0.80f, 0.70f}, {0.45f, 0.10f, 0.12f}};

static void set_yaw(nj_object *o, float yaw)
{
    o->cs = cosf(yaw);
    o->sn = sinf(yaw);
}

static float footprint_radius(const nj_object *o)
{
    return o->shape == NJ_SHAPE_CYLINDER ? o->hx : hypotf(o->hx, o->hz);
}

/* Separated when one footprint misses the other's circle widened by `gap`. */
static int apart(const nj_object *a, const nj_object *b, float gap)
{
    return nj_object_footprint_distance(a, b->x, b->z) >= footprint_radius(b) + gap ||
           nj_object_footprint_distance(b, a->x, a->z) >= footprint_radius(a) + gap;
}

nj_object nj_scene_lead_at(const nj_scene *s, const nj_trajectory *tr, int i)
{
    nj_object o = s->lead;
    float psi = tr->heading[i];
    o.x = tr->px[i] + s->lead_ahead * sinf(psi);
    o.z = tr->pz[i] + s->lead_ahead * cosf(psi);
    set_yaw(&o, psi);
    return o;
}

/* Clear of every placement of the lead cart (when there is one). */
static int clear_of_lead(const nj_scene *s, const nj_object *o, const nj_trajectory *tr, float gap)
{
    for (int i = 0; s->has_lead && i < tr->n; i++) {
        nj_object l = nj_scene_lead_at(s, tr, i);
        if (!apart(o, &l, gap)) return 0;
    }
    return 1;
}

/* Clear of the path, inside the yard, not overlapping placed objects. */
static int fits(const nj_scene *s, const nj_object *o, const nj_trajectory *tr)
{
    float rad = footprint_radius(o);
    if (o->x - rad < s->xmin + 0.5f || o->x + rad > s->xmax - 0.5f) return 0;
    if (o->z - rad < s->zmin + 0.5f || o->z + rad > s->zmax - 0.5f) return 0;
    for (int i = 0; i < tr->n; i++)
        if (nj_object_footprint_distance(o, tr->px[i], tr->pz[i]) < CLEARANCE) return 0;
    for (int i = 0; i < s->nobj; i++) {   /* separated when one footprint misses the other's circle */
        const nj_object *p = &s->obj[i];
        if (nj_object_footprint_distance(p, o->x, o->z) < rad + 0.2f &&
            nj_object_footprint_distance(o, p->x, p->z) < footprint_radius(p) + 0.2f)
            return 0;
    }
    return clear_of_lead(s, o, tr, 0.3f);
}

static void add(nj_scene *s, const nj_object *o)
{
    if (s->nobj < MAX_OBJECTS) s->obj[s->nobj++] = *o;
}

/* A point beside the path: frame i, on a random side, `off` metres out. */
static void beside(nj_rng *r, const nj_trajectory *tr, float off, float *x, float *z, float *heading)
{
    int i = (int)nj_rng_below(r, (uint32_t)tr->n);
    float psi = tr->heading[i], side = nj_rng_uniform(r) < 0.5 ? -1.0f : 1.0f;
    *x = tr->px[i] + side * off * cosf(psi);
    *z = tr->pz[i] - side * off * sinf(psi);
    *heading = psi;
}

static void tint(nj_rng *r, const float base[3], float amount, float out[3])
{
    for (int c = 0; c < 3; c++) {
        float v = base[c] + uni(r, -amount, amount);
        out[c] = v < 0.02f ? 0.02f : v > 0.98f ? 0.98f : v;
    }
}

static void place_containers(nj_rng *r, nj_scene *s, const nj_trajectory *tr, int count, int along_path)
{
    for (int placed = 0, tries = 0; placed < count && tries < 40 * count; tries++) {
        nj_object o;
        memset(&o, 0, sizeof o);
        o.shape = NJ_SHAPE_BOX;
        o.material = NJ_MAT_CONTAINER;
        o.hx = nj_rng_uniform(r) < 0.3f ? 6.096f : 3.029f;
        o.hz = 1.22f;
        o.y0 = -2.59f;
        o.y1 = 0;
        float heading = uni(r, 0, 2 * PI);
        if (along_path) beside(r, tr, CLEARANCE + o.hz + uni(r, 0.5f, 8.0f), &o.x, &o.z, &heading);
        else { o.x = uni(r, s->xmin, s->xmax); o.z = uni(r, s->zmin, s->zmax); }
        float yaw = heading - 0.5f * PI + uni(r, -0.15f, 0.15f);
        if (nj_rng_uniform(r) < 0.25f) yaw += 0.5f * PI;
        set_yaw(&o, yaw);
        tint(r, CONTAINER_PAINT[nj_rng_below(r, 7)], 0.05f, o.colour);
        o.seed = (uint32_t)nj_rng_next(r);
        if (!fits(s, &o, tr)) continue;
        add(s, &o);
        placed++;
        if (nj_rng_uniform(r) < 0.3f) {     /* a second container on top */
            o.y0 = -5.18f;
            o.y1 = -2.59f;
            tint(r, CONTAINER_PAINT[nj_rng_below(r, 7)], 0.05f, o.colour);
            o.seed = (uint32_t)nj_rng_next(r);
            add(s, &o);
        }
    }
}

static void place_crates(nj_rng *r, nj_scene *s, const nj_trajectory *tr, int count)
{
    static const float WOOD[3] = {0.62f, 0.45f, 0.26f};
    for (int placed = 0, tries = 0; placed < count && tries < 40 * count; tries++) {
        nj_object o;
        memset(&o, 0, sizeof o);
        o.shape = NJ_SHAPE_BOX;
        o.material = NJ_MAT_CRATE;
        float size = uni(r, 0.5f, 1.2f), heading;
        o.hx = 0.5f * size * uni(r, 0.8f, 1.3f);
        o.hz = 0.5f * size;
        o.y0 = -size * uni(r, 0.7f, 1.1f);
        o.y1 = 0;
        beside(r, tr, CLEARANCE + 0.8f + uni(r, 0, 7.0f), &o.x, &o.z, &heading);
        set_yaw(&o, uni(r, 0, 2 * PI));
        tint(r, WOOD, 0.08f, o.colour);
        o.seed = (uint32_t)nj_rng_next(r);
        if (!fits(s, &o, tr)) continue;
        add(s, &o);
        placed++;
        if (nj_rng_uniform(r) < 0.3f) {     /* a smaller crate on top, turned a little */
            float top = o.y0, h = -o.y0 * uni(r, 0.6f, 0.9f);
            o.hx *= 0.8f;
            o.hz *= 0.8f;
            o.y1 = top;
            o.y0 = top - h;
            set_yaw(&o, atan2f(o.sn, o.cs) + uni(r, -0.3f, 0.3f));
            tint(r, WOOD, 0.08f, o.colour);
            o.seed = (uint32_t)nj_rng_next(r);
            add(s, &o);
        }
    }
}

static void place_poles(nj_rng *r, nj_scene *s, const nj_trajectory *tr, int count)
{
    static const float METAL[3] = {0.60f, 0.60f, 0.62f}, YELLOW[3] = {0.90f, 0.75f, 0.10f};
    for (int placed = 0, tries = 0; placed < count && tries < 40 * count; tries++) {
        nj_object o;
        memset(&o, 0, sizeof o);
        o.shape = NJ_SHAPE_CYLINDER;
        o.material = NJ_MAT_POLE;
        o.hx = uni(r, 0.06f, 0.14f);
        o.y0 = -uni(r, 3.0f, 6.0f);
        o.y1 = 0;
        float heading;
        beside(r, tr, CLEARANCE + uni(r, 0.2f, 10.0f), &o.x, &o.z, &heading);
        set_yaw(&o, 0);
        tint(r, nj_rng_uniform(r) < 0.3f ? YELLOW : METAL, 0.05f, o.colour);
        o.seed = (uint32_t)nj_rng_next(r);
        if (!fits(s, &o, tr)) continue;
        add(s, &o);
        placed++;
    }
}

/* The mover's footprint stays clear of the camera, the objects and the wall. */
static int mover_fits(const nj_scene *s, const nj_trajectory *tr)
{
    for (int i = 0; i < tr->n; i++) {
        nj_object m = nj_scene_mover_at(s, (float)(i * tr->dt));
        if (nj_object_footprint_distance(&m, tr->px[i], tr->pz[i]) < 1.0f) return 0;
        float rad = footprint_radius(&m);
        if (m.x - rad < s->xmin + 0.3f || m.x + rad > s->xmax - 0.3f) return 0;
        if (m.z - rad < s->zmin + 0.3f || m.z + rad > s->zmax - 0.3f) return 0;
        for (int k = 0; k < s->nobj; k++)
            if (s->obj[k].y1 == 0 && hypotf(s->obj[k].x - m.x, s->obj[k].z - m.z) < rad + footprint_radius(&s->obj[k]))
                return 0;
        if (s->has_lead) {
            nj_object l = nj_scene_lead_at(s, tr, i);
            if (!apart(&m, &l, 0.3f)) return 0;
        }
    }
    return 1;
}

/* The lead cart: paint from a small palette, rear face 6–7 m ahead. */
static void make_lead(nj_rng *r, nj_scene *s)
{
    static const float PAINT[4][3] = {{0.10f, 0.35f, 0.75f}, {0.15f, 0.55f, 0.30f}, {0.75f, 0.12f, 0.10f},
                                      {0.85f, 0.85f, 0.82f}};
    nj_object *o = &s->lead;
    memset(o, 0, sizeof *o);
    o->shape = NJ_SHAPE_BOX;
    o->material = NJ_MAT_CART;
    o->hx = 0.5f * uni(r, 0.95f, 1.05f);
    o->hz = 0.5f * uni(r, 1.4f, 1.6f);
    o->y0 = -uni(r, 1.15f, 1.25f);
    o->y1 = 0;
    tint(r, PAINT[nj_rng_below(r, 4)], 0.05f, o->colour);
    o->seed = (uint32_t)nj_rng_next(r);
    s->lead_ahead = uni(r, 6.0f, 7.0f) + o->hz;
    set_yaw(o, 0);
    s->has_lead = 1;
}

/* A small robot crossing the route ahead of the vehicle around mid-sequence;
 * with a lead cart, 3.5 m ahead up to 1.5 m short of the cart, or 1.5–3.5 m
 * beyond it (the same draw mapped onto those two ranges). */
static void place_mover(nj_rng *r, nj_scene *s, const nj_trajectory *tr)
{
    nj_object *m = &s->mover;
    memset(m, 0, sizeof *m);
    m->shape = NJ_SHAPE_BOX;
    m->material = NJ_MAT_ROBOT;
    m->hx = 0.4f;
    m->hz = 0.5f;
    m->y0 = -0.9f;
    m->y1 = 0;
    m->colour[0] = 0.95f; m->colour[1] = 0.60f; m->colour[2] = 0.05f;
    m->seed = (uint32_t)nj_rng_next(r);
    for (int tries = 0; tries < 200 && !s->has_mover; tries++) {
        int i = tr->n / 4 + (int)nj_rng_below(r, (uint32_t)(tr->n / 2 + 1));
        float psi = tr->heading[i], ahead = uni(r, 4.0f, 8.0f), speed = uni(r, 0.5f, 1.0f);
        if (s->has_lead)      /* between the camera and the lead cart, or beyond it */
            ahead = ahead < 6.0f ? 3.5f + (ahead - 4.0f) * 0.5f * (s->lead_ahead - s->lead.hz - 5.0f)
                                 : s->lead_ahead + s->lead.hz + 1.5f + (ahead - 6.0f);
        float side = nj_rng_uniform(r) < 0.5f ? -1.0f : 1.0f, t = (float)(i * tr->dt);
        float x = tr->px[i] + ahead * sinf(psi), z = tr->pz[i] + ahead * cosf(psi);
        s->mover_v[0] = side * speed * cosf(psi);
        s->mover_v[1] = -side * speed * sinf(psi);
        s->mover_p0[0] = x - s->mover_v[0] * t;
        s->mover_p0[1] = z - s->mover_v[1] * t;
        set_yaw(m, psi);
        s->has_mover = mover_fits(s, tr);
    }
}

static void yard_bounds(nj_scene *s, const nj_trajectory *tr)
{
    s->xmin = s->xmax = tr->px[0];
    s->zmin = s->zmax = tr->pz[0];
    for (int i = 1; i < tr->n; i++) {
        s->xmin = fminf(s->xmin, tr->px[i]);
        s->xmax = fmaxf(s->xmax, tr->px[i]);
        s->zmin = fminf(s->zmin, tr->pz[i]);
        s->zmax = fmaxf(s->zmax, tr->pz[i]);
    }
    s->xmin -= MARGIN;
    s->xmax += MARGIN;
    s->zmin -= MARGIN;
    s->zmax += MARGIN;
}

int nj_scene_make(nj_rng *r, const nj_trajectory *tr, int moving, nj_scene *s)
{
    return nj_scene_make_fleet(r, NULL, tr, moving, 0, s);
}

int nj_scene_make_fleet(nj_rng *r, nj_rng *fleet, const nj_trajectory *tr, int moving, int lead, nj_scene *s)
{
    memset(s, 0, sizeof *s);
    s->obj = malloc(MAX_OBJECTS * sizeof(nj_object));
    if (!s->obj) return -1;
    if (fleet && lead) make_lead(fleet, s);
    s->seed = (uint32_t)nj_rng_next(r);
    yard_bounds(s, tr);
    s->wall_height = uni(r, 3.5f, 4.5f);
    float elev = uni(r, 0.6f, 1.05f), az = uni(r, 0, 2 * PI);
    s->sun[0] = cosf(elev) * sinf(az);
    s->sun[1] = -sinf(elev);
    s->sun[2] = cosf(elev) * cosf(az);
    float path_len = 0;
    for (int i = 1; i < tr->n; i++) path_len += hypotf(tr->px[i] - tr->px[i - 1], tr->pz[i] - tr->pz[i - 1]);
    int scale = 1 + (int)(path_len / 25.0f);
    place_containers(r, s, tr, scale * (6 + (int)nj_rng_below(r, 5)), 1);
    place_containers(r, s, tr, scale * 4, 0);
    place_crates(r, s, tr, scale * (14 + (int)nj_rng_below(r, 10)));
    place_poles(r, s, tr, scale * (6 + (int)nj_rng_below(r, 6)));
    if (moving) place_mover(r, s, tr);
    return 0;
}

void nj_scene_free(nj_scene *s)
{
    free(s->obj);
    memset(s, 0, sizeof *s);
}

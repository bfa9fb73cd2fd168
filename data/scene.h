/* data/scene.h — the synthetic robot yard: geometry and ray intersection.
 *
 * World frame: x and z horizontal, y down; the ground is the plane y = 0 and
 * objects stand on it (their tops at negative y).  A yaw φ rotates local
 * (lx, lz) into world (cos φ·lx + sin φ·lz, −sin φ·lx + cos φ·lz) — the
 * rotation R_y(φ) about the down axis.  The yard is closed by a perimeter
 * brick wall; rays that leave over it see the sky (no depth).  With a lead
 * cart, a box-shaped vehicle rides rigidly ahead of the camera's vehicle
 * (data/scene_gen.h places it per frame).
 */
#ifndef NJ_SCENE_H
#define NJ_SCENE_H
#include <stdint.h>

enum { NJ_SHAPE_BOX, NJ_SHAPE_CYLINDER };
enum { NJ_MAT_GROUND, NJ_MAT_CONTAINER, NJ_MAT_CRATE, NJ_MAT_POLE, NJ_MAT_WALL, NJ_MAT_ROBOT, NJ_MAT_SKY, NJ_MAT_CART };

typedef struct nj_object {
    int shape, material;
    float x, z;              /* footprint centre */
    float cs, sn;            /* cos and sin of the yaw */
    float hx, hz;            /* box half extents; cylinder radius in hx */
    float y0, y1;            /* vertical extent, y0 < y1 ≤ 0 */
    float colour[3];         /* base colour */
    uint32_t seed;           /* texture variation */
} nj_object;

typedef struct nj_scene {
    nj_object *obj;
    int nobj;
    float xmin, xmax, zmin, zmax, wall_height;   /* perimeter wall */
    float sun[3];            /* unit vector towards the sun */
    uint32_t seed;
    int has_mover;           /* an independently moving robot */
    nj_object mover;         /* its shape; its position at time t is p0 + v·t */
    float mover_p0[2], mover_v[2];
    int has_lead;            /* a cart driven ahead at the camera's speed */
    nj_object lead;          /* its shape; placed per frame by nj_scene_lead_at */
    float lead_ahead;        /* metres from the camera centre to its centre, along the heading */
} nj_scene;

typedef struct nj_hit {
    float t;                 /* ray parameter of the hit */
    float n[3];              /* unit world normal, facing the ray */
    float p[3];              /* world point */
    float u, v;              /* surface coordinates in metres */
    int material;
    const nj_object *obj;    /* NULL for ground, wall and sky */
} nj_hit;

/* Closest hit of the ray org + t·dir with 0 < t < h->t against one object;
 * updates *h and returns 1 when closer. */
int nj_object_intersect(const nj_object *o, const float org[3], const float dir[3], nj_hit *h);
/* The ground plane and the perimeter wall (the ray starts inside the yard). */
int nj_ground_intersect(const float org[3], const float dir[3], nj_hit *h);
int nj_wall_intersect(const nj_scene *s, const float org[3], const float dir[3], nj_hit *h);
/* Bounding sphere of an object (centre and radius). */
void nj_object_sphere(const nj_object *o, float c[3], float *r);
/* Horizontal distance from (x, z) to an object's footprint (0 inside). */
float nj_object_footprint_distance(const nj_object *o, float x, float z);
/* Distance (metres) from world point p to the nearest static surface of the
 * yard: the ground plane inside the perimeter, the perimeter wall's inner
 * faces up to its height, and every object's surface (box faces, the
 * cylinder's mantle and caps).  The mover and the lead cart are not
 * included (they move).  For checking reconstructions against the truth. */
float nj_scene_distance(const nj_scene *s, const float p[3]);
/* The mover placed at time t (seconds). */
nj_object nj_scene_mover_at(const nj_scene *s, float t);

#endif

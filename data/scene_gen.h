/* data/scene_gen.h — random robot-yard layouts around a vehicle path. */
#ifndef NJ_SCENE_GEN_H
#define NJ_SCENE_GEN_H
#include "data/scene.h"
#include "data/trajectory.h"

/* Lays out a yard around tr (objects keep 2 m from the path); with `moving`,
 * also a robot crossing the route (s->has_mover says whether one fitted).
 * Returns 0 or -1 (out of memory). */
int nj_scene_make(nj_rng *r, const nj_trajectory *tr, int moving, nj_scene *s);
void nj_scene_free(nj_scene *s);

#endif

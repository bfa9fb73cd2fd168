/* data/scene_gen.h — random robot-yard layouts around a vehicle path. */
#ifndef NJ_SCENE_GEN_H
#define NJ_SCENE_GEN_H
#include "data/scene.h"
#include "data/trajectory.h"

/* Lays out a yard around tr (objects keep 2 m from the path); with `moving`,
 * also a robot crossing the route (s->has_mover says whether one fitted).
 * Returns 0 or -1 (out of memory). */
int nj_scene_make(nj_rng *r, const nj_trajectory *tr, int moving, nj_scene *s);
/* The same with a lead cart (`lead`): a box 1.0 m wide, 1.2 m tall, 1.5 m long
 * whose rear face is 6–7 m ahead of the camera centre along the vehicle's
 * heading in every frame (rigid in the vehicle frame, so static in the image
 * up to the camera's shake); its size, distance and paint come from `fleet`,
 * and no object or mover overlaps any of its placements.  lead = 0 gives
 * nj_scene_make's yard exactly. */
int nj_scene_make_fleet(nj_rng *r, nj_rng *fleet, const nj_trajectory *tr, int moving, int lead, nj_scene *s);
/* The lead cart placed at frame i of tr (s->has_lead). */
nj_object nj_scene_lead_at(const nj_scene *s, const nj_trajectory *tr, int i);
void nj_scene_free(nj_scene *s);

#endif

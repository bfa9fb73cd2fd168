/* train/loop/free_space.h — where the free-space hinge's bounds come from
 * (loss.free_space; the hinge itself is losses/free_space.h). */
#ifndef NJ_LOOP_FREE_SPACE_H
#define NJ_LOOP_FREE_SPACE_H
#include "nn/graph.h"
#include "nn/geom/camera.h"
#include "losses/depth.h"

/* Per item of disp (N×1×H×W sigmoid outputs read in range r): the ground
 * plane of its own depth — a robust fit to the lower image region,
 * train/measure/groundplane.h, no gradient through it — gives the bounds of
 * nj_ground_bound (margin and reach as there) in bound (N·H·W floats).  An item without
 * an acceptable plane is left unbounded (0): the uniform far start has none
 * (its lower region faces the camera, beyond the fit's tilt limit), nor has
 * an inverted prediction.  scratch: 3·H·W floats.  Returns the number of
 * items with a plane, or -1 when out of memory. */
int nj_free_space_bounds(const nj_tensor *disp, nj_depth_range r, const nj_camera *cams, float margin,
                         float reach, float *scratch, float *bound);

#endif

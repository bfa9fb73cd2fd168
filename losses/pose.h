/* losses/pose.h — rigid camera motion as differentiable graph ops.
 *
 * A pose tensor is N×1×3×4: per sample the row-major 3×4 matrix [R | t] that
 * maps a point X in one camera's frame to R·X + t in the other's.  Poses come
 * from 6 numbers per sample (N×6×1×1): an axis-angle rotation vector (radians,
 * Rodrigues' formula) followed by a translation (metres or scene units).
 */
#ifndef NJ_POSE_H
#define NJ_POSE_H
#include "nn/graph.h"

/* N×6×1×1 (rx, ry, rz, tx, ty, tz) → N×1×3×4.  Exact at and near zero angle
 * (series expansions below 1e-2 rad), valid up to and including π. */
nj_tensor *nj_pose_from_vec(nj_graph *g, nj_tensor *vec);
/* [R|t]⁻¹ = [Rᵀ | −Rᵀt]. */
nj_tensor *nj_pose_invert(nj_graph *g, nj_tensor *T);
/* a ∘ b: first b, then a — [Ra·Rb | Ra·tb + ta]. */
nj_tensor *nj_pose_compose(nj_graph *g, nj_tensor *a, nj_tensor *b);
/* Constant N×1×3×4 pose of a rectified stereo pair: identity rotation and
 * translation (tx, 0, 0).  For a left target and right source, tx = −baseline. */
nj_tensor *nj_pose_stereo(nj_graph *g, int n, const float *tx);

/* Lateral slip of a motion vector (N×6×1×1, as for nj_pose_from_vec) against
 * the planar circular-arc motion of a wheeled vehicle whose camera sits over
 * its turning centre line (Scaramuzza, Fraundorfer & Siegwart 2009): moving
 * along an arc, the sideways displacement is half the heading change times
 * the forward one, tx = tz·ry/2, to first order in either direction of the
 * pair.  Returns N×1×1×1 ((tx − tz·ry/2) / sqrt(|t|² + eps²))²: scale-free,
 * so monocular scene units do not matter, and near 0 when the vehicle stands
 * still (eps).  A camera mounted ahead of the axle adds a sideways swing in
 * turns that this model does not have.
 * heading_given 1: the heading change ry enters as a constant (no gradient
 * through it), so the penalty moves the translation only — a spurious
 * sideways translation is pulled to the yaw, never the yaw to it. */
nj_tensor *nj_arc_slip(nj_graph *g, nj_tensor *vec, float eps, int heading_given);

/* Plain Rodrigues' formula in double, for code outside the graph. */
void nj_rotvec_to_matrix(const double v[3], double R[9]);

#endif

/* losses/free_space.h — nothing seen below the horizon lies beyond the ground.
 *
 * A camera above flat ground sees, along a ray that meets the ground, either
 * the ground or something standing on it in front — never a point farther
 * than the ground along that ray (it would be underground).  The photometric
 * loss cannot place a vehicle driven ahead at the camera's speed (it is static
 * in the image, and auto-masked), and such pixels were measured to creep
 * outward during long runs (DEVELOPERS.md, "Training recipe").  Given per
 * pixel a lower bound b on the inverse depth — the ground's inverse depth
 * along the ray, from a plane the training step fits to the prediction
 * itself, divided by (1 + a margin) — the loss is
 *
 *   L = (1/K) Σ_{p : b_p > 0} max(0, 1 − q_p / b_p),
 *
 * q the predicted inverse depth of the sigmoid output (losses/depth.h), K the
 * number of bounded pixels (L = 0 when K = 0).  Relative, so it does not
 * depend on the prediction's unknown scale; one-sided, so the ground itself
 * (q ≈ (1 + margin)·b) and everything in front of it cost nothing.
 */
#ifndef NJ_FREE_SPACE_H
#define NJ_FREE_SPACE_H
#include "nn/graph.h"
#include "losses/depth.h"
#include "nn/geom/camera.h"

/* disp: N×1×H×W sigmoid outputs; bound: N·H·W inverse-depth bounds in 1/units
 * of the depth range (0 = none; the array must outlive the backward pass).
 * *violating (may be NULL) gets the share of bounded pixels beyond the bound.
 * Returns a 1×1×1×1 loss. */
nj_tensor *nj_free_space_loss(nj_graph *g, nj_tensor *disp, nj_depth_range r, const float *bound,
                              float *violating);

/* The bounds of one w×h image from a ground plane {X : n·X = dist} (|n| = 1,
 * n pointing from the camera to the plane, dist > 0, in the prediction's
 * units): a pixel whose ray d = K⁻¹[u v 1]ᵀ meets the plane in front of the
 * camera within `reach` plane distances (0 < dist/(n·d) ≤ reach·dist, the
 * ground's z-depth along the ray) gets the bound (n·d)/(dist·(1 + margin));
 * others get 0.  Towards the horizon the ground's depth changes fast from
 * row to row, so a plane fitted a little tilted would bound far structure
 * wrongly there (measured: the 6–20 m bands pulled in); `reach` keeps the
 * bound to the near field.  rays: scratch of 2·w·h floats. */
void nj_ground_bound(const double n[3], double dist, nj_camera cam, int w, int h, float margin, float reach,
                     float *rays, float *bound);

#endif

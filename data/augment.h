/* data/augment.h — per-sample augmentation.
 *
 * Colour jitter (brightness, contrast, saturation, hue) with one set of
 * parameters per sample, applied identically to every frame of the sample —
 * the same affine colour map, with the contrast pivot taken from the target —
 * and only to the copies fed to the network; the loss compares the clean
 * images.  Order: brightness (x·b), contrast ((x − m)·c + m, m the target's
 * mean grey after brightness), saturation (grey + s·(x − grey), grey =
 * 0.299R + 0.587G + 0.114B), hue (rotation of the YIQ chroma plane by 2π·h);
 * values are clamped to [0, 1] after every step.
 *
 * Horizontal flip mirrors x ↦ W − 1 − x (pixel centres at integers), so a
 * camera's cx becomes W − 1 − cx (nj_camera_flip); the mirrored views are
 * those of a mirrored world, so a stereo partner that was to the right of the
 * target is to its left afterwards.
 *
 * Turn: the view of a camera turned about its own centre by a rotation R — a
 * yaw about the image's vertical axis, a roll about the optical axis — the
 * pixels the recorded view already holds re-sampled by the rotation
 * homography K·R·K⁻¹ (Hartley & Zisserman 2004, sec. 8.4.2).  A point X in
 * the recorded camera's frame is R·X in the turned one, so a source frame
 * turned by R is explained by the pose R·T where the recorded one needed T:
 * the pose net is given turns no place on a route predicts (DEVELOPERS.md,
 * "Training recipe").  Only the network-input copy is turned; the loss warps
 * the recorded frame with Rᵀ·P (train/loop/step.c).
 *
 * Rotated copy: the target's network-input copy turned the same way by a
 * rotation with every component (pitch, yaw, roll) drawn in ±max_deg, then
 * scaled by a gain and given sensor noise — the frame a camera that only
 * turned by R would record.  The pair (frame, copy) has no translation and a
 * known rotation: a lesson for the pose net with an answer
 * (loss.rotation_pairs, train/loop/step.c).
 */
#ifndef NJ_AUGMENT_H
#define NJ_AUGMENT_H
#include "nn/rng.h"
#include "nn/geom/camera.h"

typedef struct nj_jitter {
    float brightness, contrast, saturation, hue;   /* factors b, c, s and the hue turn h */
} nj_jitter;

/* Draws b ∈ [1−B, 1+B], c ∈ [1−C, 1+C], s ∈ [1−S, 1+S], h ∈ [−H, H]. */
nj_jitter nj_jitter_draw(nj_rng *r, float B, float C, float S, float H);
/* The contrast pivot: mean grey of the planar RGB image after brightness. */
float nj_jitter_pivot(const nj_jitter *j, const float *rgb, int w, int h);
/* out = jitter(in) for one planar RGB image (out may equal in). */
void nj_jitter_apply(const nj_jitter *j, float pivot, const float *in, float *out, int w, int h);
/* Mirrors `planes` planar w×h planes left-right in place. */
void nj_flip_planes(float *data, int planes, int w, int h);
/* out = `planes` planar w×h planes of `in` as seen by camera `cam` turned by
 * the rotation R whose rotation vector is rot (radians; camera axes x right,
 * y down, z forward: rot = (0, yaw, 0) with yaw > 0 turns the view toward +x,
 * so the scene moves toward −x; (0, 0, roll) turns it about the optical
 * axis): out(p) = in(K·Rᵀ·K⁻¹·p), bilinear, edge pixels repeated outside the
 * frame.  out must not overlap in. */
#define NJ_TURN_MAX_DEG 10.0f   /* largest turn a config may ask for: far beyond any
                                   frame-to-frame yaw of a ground vehicle at 10 fps */
void nj_turn_planes(const float *in, float *out, int planes, int w, int h, nj_camera cam, const float rot[3]);
/* An angle drawn uniformly in ±max_deg degrees, in radians (0, with nothing
 * drawn, for a range of 0): the turn's and the rotated copy's draws. */
float nj_draw_angle(nj_rng *r, float max_deg);
/* The rotated copy's gain is drawn in 1 ± NJ_ROTATED_GAIN and its noise's σ in
 * [0, NJ_ROTATED_NOISE]: the exposure flicker and sensor noise of a stopped
 * fleet camera (the nuisance set's: σ 0.01, issue 18). */
#define NJ_ROTATED_GAIN 0.05f
#define NJ_ROTATED_NOISE 0.01f
/* out = the rotated copy of the planar RGB image `in` (3 planes, w×h), values
 * clamped to [0, 1]; rot gets the rotation vector drawn (radians).  Draws
 * the rotation (x, y, z), the gain, the σ, then one normal per value. */
void nj_rotated_copy(nj_rng *r, const float *in, float *out, int w, int h, nj_camera cam, float max_deg,
                     float rot[3]);

#endif

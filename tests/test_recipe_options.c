/* tests/test_recipe_options.c — the training recipe's fleet options.
 *
 *  - model.rotation_scale: the pose net's three rotation outputs are scaled by
 *    it and the three translation outputs by pose_scale.  Two models with the
 *    same seed (same weights) and different scales must give outputs in the
 *    exact ratio of the scales, channel by channel, and the rotation rows of
 *    the output layer's gradient must scale the same way (chain rule).
 *  - loss.gain_match: a source that is the target times a global gain (an
 *    exposure change; the gain-only case of the affine brightness model of
 *    Yang et al. 2020) must give the photometric error of the target against
 *    itself, i.e. 0, under the identity motion; without it the error is the
 *    one of the brightness change.  A gain beyond the limit (x2) is not fully
 *    undone (the limit holds).
 *  - loss.automask_widest (nj_vs_input.mask_skip): with one source equal to
 *    the target (a static scene at a short offset) every pixel's un-warped
 *    error is 0 and the auto-mask drops nearly all of them; leaving that
 *    source out of the un-warped minimum keeps the pixels the other source
 *    explains better warped than un-warped.
 *  - several frame offsets: a step whose batch lists its two sources twice
 *    (as offsets k and k' would: t−k, t+k, t−k', t+k') must give the same
 *    photometric loss as the two alone — the loss takes the per-pixel
 *    minimum over sources, so duplicates change nothing *if* each copy is
 *    paired and oriented like the original (even j earlier: pose net on
 *    (source, target), inverted).  Pose outputs are scaled up so that a
 *    wrongly oriented pair would move the warp by pixels.
 *  - model.pose_rays: the pose net's first layer takes 8 channels (two frames
 *    and the two ray-direction channels; the rays themselves are checked
 *    against OpenCV in test_losses_ref), its output changes with the
 *    principal point (it does not without pose_rays), and the net refuses to
 *    run without intrinsics — in the graph and through nj_infer_motion —
 *    with a message naming the option.
 *  - model.pose_norm false: the pose net's layers have no normalisation (the
 *    depth net keeps its own), so in training mode one pair's motion does not
 *    depend on the other pairs of the batch; with batch norm it does (the
 *    check that the test can tell the two apart).
 *  - data.augment.turn_deg: a static scene whose source was turned by 2° is
 *    explained by the pose R_y(2°) through the loss's own warp (the warped
 *    error is far below the un-warped one).  The training step gives the loss
 *    the recorded frame with Rᵀ·P, R the turn of the pose net's input: with
 *    a pose net held at the identity motion and a recorded source that needs
 *    the motion R (a yaw and a roll), an input turned by Rᵀ makes the loss's
 *    warp exact; turned by R it is worse than no turn (the direction is
 *    checked).
 *  - loss.rotation_pairs: a step whose rotated copies are turned by ρ pulls
 *    the pose net's output-layer rotation bias toward ρ (the gradient points
 *    to −ρ) when the two items' rotations are ρ and −ρ — item 1's pair is
 *    given the other way round, so both answers are ρ — and not at all when
 *    both are ρ (the answers ρ and −ρ cancel): the pairing and the sign of
 *    the answer.  That a frame turned by ρ is explained by the pose with
 *    rotation vector ρ is the turn check above.  The translation outputs get
 *    no gradient from the lesson (a step with it minus one without).
 *  - loss.free_space: a predicted scene of flat ground seen by a camera 1.2
 *    units up and pitched 5° down, a box standing on it (nearer than the
 *    ground behind it) and a patch placed at twice the ground's depth (beyond
 *    it): the bounds from the prediction's own ground plane
 *    (nj_free_space_bounds) match the true ground's inverse depth / 1.1 on
 *    the ground within 8 camera heights and are 0 beyond (loss.free_space_reach),
 *    the patch's pixels and only they are beyond the ground, and the
 *    hinge's gradient pulls them nearer (larger disparity); a uniform far
 *    prediction (the network's start) gets no plane and no bound.
 */
#include "data/augment.h"
#include "losses/free_space.h"
#include "losses/pose.h"
#include "losses/view_synthesis.h"
#include "nn/graph.h"
#include "tests/check.h"
#include "train/loop/config.h"
#include "train/loop/step.h"
#include "train/loop/free_space.h"
#include "train/model/model.h"
#include "train/model/infer.h"
#include <math.h>
#include <stdio.h>
#include <string.h>

#define W 64
#define H 32

static void fill_image(nj_tensor *t, unsigned seed, float hi)
{
    nj_rng r;
    nj_rng_seed(&r, seed);
    size_t k = nj_numel(t);
    /* smooth-ish texture in [0.1, hi]: SSIM needs structure */
    for (size_t i = 0; i < k; i++) t->data[i] = 0.1f + (hi - 0.1f) * (float)nj_rng_uniform(&r);
}

static int pose_run(float rot, float trans, float out[12], float grow[2])
{
    nj_model_config mc;
    nj_model_config_default(&mc);
    mc.stages = 3;
    mc.scales = 3;
    mc.pose_stages = 3;
    mc.width = 0.5f;
    mc.pose_width = 0.5f;
    mc.pose_scale = trans;
    mc.rotation_scale = rot;
    mc.seed = 5;
    nj_model m;
    char err[256];
    if (nj_model_init(&m, &mc, err, sizeof err)) { check(0, "rotation_scale: model", "%s", err); return -1; }
    nj_graph *g = nj_graph_new(1 << 22);
    nj_tensor *a = nj_tensor_new(g, 2, 3, H, W, 0), *b = nj_tensor_new(g, 2, 3, H, W, 0);
    fill_image(a, 1, 0.9f);
    fill_image(b, 2, 0.9f);
    nj_tensor *v = nj_pose_forward(g, &m, a, b, NULL);
    int rc = -1;
    if (v && !nj_graph_failed(g)) {
        memcpy(out, v->data, 12 * sizeof(float));
        /* loss = sum of all outputs: d/d(out-layer bias) is the channel's scale */
        nj_params_zero_grad(&m.params);
        if (!nj_backward(g, nj_sum(g, v, NJ_AXIS_ALL))) {
            const nj_param *pb = nj_params_find(&m.params, "pose.out.b");
            grow[0] = pb ? pb->grad[0] : NAN;   /* a rotation channel */
            grow[1] = pb ? pb->grad[3] : NAN;   /* a translation channel */
            rc = 0;
        }
    }
    if (rc) check(0, "rotation_scale: forward/backward", "%s", nj_graph_error(g));
    nj_graph_free(g);
    nj_model_free(&m);
    return rc;
}

static void test_rotation_scale(void)
{
    float same[12], split[12], follow[12], equal[12], gs[2], gp[2], g3[2];
    if (pose_run(0.5f, 0.5f, same, gs) || pose_run(0.01f, 0.5f, split, gp) || pose_run(0.0f, 0.3f, follow, g3) ||
        pose_run(0.3f, 0.3f, equal, g3))
        return;
    check(!memcmp(follow, equal, sizeof equal), "rotation_scale: 0 follows pose_scale (same bits at pose_scale 0.3)",
          "first outputs %.9g vs %.9g", follow[0], equal[0]);
    double worst = 0;
    for (int n = 0; n < 2; n++)
        for (int c = 0; c < 6; c++) {
            double want = c < 3 ? same[6 * n + c] * (0.01 / 0.5) : same[6 * n + c];
            double e = fabs(split[6 * n + c] - want) / fmax(fabs(want), 1e-12);
            if (e > worst) worst = e;
        }
    check(worst < 1e-5, "rotation_scale: rotation outputs x0.02, translation unchanged (same weights)",
          "worst relative deviation %.2e", worst);
    /* d(sum)/d(bias_c) = N * scale_c exactly */
    check(fabsf(gp[0] - 2 * 0.01f) < 1e-6f && fabsf(gp[1] - 2 * 0.5f) < 1e-6f && fabsf(gs[0] - 1.0f) < 1e-6f,
          "rotation_scale: output-layer bias gradient is batch x scale per channel",
          "rotation %.6g (want 0.02), translation %.6g (want 1), equal scales %.6g (want 1)", gp[0], gp[1], gs[0]);
}

/* One-scale loss of tgt against `n` sources with `poses` (NULL: the identity
 * motion for each), constant disparity 0.3, the test camera; the loss's own
 * defaults changed by `automask` (tie-break off with it), `gain_match`, no
 * smoothness.  out gets the result; returns 0 or -1. */
static int small_loss(nj_graph *g, nj_tensor *tgt, nj_tensor *const *src, nj_tensor *const *poses, int n,
                      unsigned skip, int automask, int gain_match, nj_vs_output *out)
{
    nj_tensor *disp = nj_tensor_new(g, 1, 1, H, W, 1);
    for (size_t i = 0; i < nj_numel(disp); i++) disp->data[i] = 0.3f;
    static const nj_camera cam = {50.0f, 50.0f, 31.5f, 15.5f};
    float tx = 0.0f;
    nj_vs_input in = {.target = tgt, .nsources = n, .mask_skip = skip, .cams = &cam, .disp = {disp}, .nscales = 1,
                      .depth_range = {0.1f, 100.0f}, .rng = NULL};
    for (int s = 0; s < n; s++) {
        in.sources[s] = src[s];
        in.poses[s] = poses ? poses[s] : nj_pose_stereo(g, 1, &tx);
    }
    nj_vs_config cfg;
    nj_vs_config_default(&cfg);
    cfg.automask = automask;
    cfg.tie_break = 0;
    cfg.smooth_weight = 0;
    cfg.gain_match = gain_match;
    return nj_view_synthesis_loss(g, &cfg, &in, out);
}

/* Photometric loss of `target` against `source` under the identity motion. */
static float identity_loss(float gain, int match)
{
    nj_graph *g = nj_graph_new(1 << 22);
    nj_tensor *tgt = nj_tensor_new(g, 1, 3, H, W, 0), *src = nj_tensor_new(g, 1, 3, H, W, 0);
    fill_image(tgt, 3, 0.45f);
    for (size_t i = 0; i < nj_numel(src); i++) src->data[i] = tgt->data[i] * gain;
    nj_vs_output out;
    float l = small_loss(g, tgt, &src, NULL, 1, 0, 0, match, &out) ? NAN : out.photometric;
    nj_graph_free(g);
    return l;
}

/* Share of pixels the auto-mask keeps, sources {target itself, a random
 * frame}, the first left out of the un-warped minimum when `skip`. */
static float widest_mask_share(int skip)
{
    nj_graph *g = nj_graph_new(1 << 22);
    nj_tensor *tgt = nj_tensor_new(g, 1, 3, H, W, 0), *other = nj_tensor_new(g, 1, 3, H, W, 0);
    fill_image(tgt, 21, 0.9f);
    fill_image(other, 22, 0.9f);
    nj_tensor *src[2] = {tgt, other};
    nj_vs_output out;
    float f = small_loss(g, tgt, src, NULL, 2, skip ? 1u : 0u, 1, 0, &out) ? NAN : out.mask_fraction;
    nj_graph_free(g);
    return f;
}

/* A smooth texture in [0.25, 0.65]: SSIM needs structure, and the turn's
 * resampling costs little on it. */
static void smooth_image(float *p, float phase)
{
    for (int c = 0; c < 3; c++)
        for (int y = 0; y < H; y++)
            for (int x = 0; x < W; x++)
                p[(c * H + y) * W + x] = 0.45f + 0.2f * sinf(0.35f * x + 0.9f * c + phase) * cosf(0.27f * y - 0.4f * c);
}

/* Photometric loss of a static scene whose one source was turned by 2°,
 * warped with the pose R_y(k·2°) (k = 1: the turn itself; 0: no motion). */
static float turned_source_loss(float k)
{
    nj_graph *g = nj_graph_new(1 << 22);
    nj_tensor *tgt = nj_tensor_new(g, 1, 3, H, W, 0), *src = nj_tensor_new(g, 1, 3, H, W, 0);
    nj_tensor *vec = nj_tensor_new(g, 1, 6, 1, 1, 0);
    smooth_image(tgt->data, 0);
    float yaw = 2.0f * (float)M_PI / 180;
    const float rot[3] = {0, yaw, 0};
    nj_turn_planes(tgt->data, src->data, 3, W, H, (nj_camera){50.0f, 50.0f, 31.5f, 15.5f}, rot);
    memset(vec->data, 0, 6 * sizeof(float));   /* arena memory is not zeroed */
    vec->data[1] = k * yaw;
    nj_tensor *pose = nj_pose_from_vec(g, vec);
    nj_vs_output out;
    float l = small_loss(g, tgt, &src, &pose, 1, 0, 0, 0, &out) ? NAN : out.photometric;
    nj_graph_free(g);
    return l;
}

static void test_turned_source(void)
{
    float right = turned_source_loss(1.0f), none = turned_source_loss(0.0f), wrong = turned_source_loss(-1.0f);
    checkv(right < 0.1f * none && wrong > none, "turn: a source turned by 2 deg is explained by the pose R_y(2 deg)",
           "photometric error with R_y(2 deg) %.4f, with no motion %.4f, with R_y(-2 deg) %.4f", right, none, wrong);
}

static void test_automask_widest(void)
{
    float all = widest_mask_share(0), widest = widest_mask_share(1);
    /* all sources: the identity error of the copy (0) ties its warped error
     * (0, identity motion) and the strict comparison masks the pixel;
     * without the copy the un-warped error is the random frame's (large),
     * the warped minimum is still the copy's 0: every pixel kept */
    check(all < 0.01f && widest > 0.99f, "automask_widest: a source left out of the un-warped minimum",
          "mask keeps %.3f of the pixels with every source, %.3f with the copy left out (want < 0.01 and > 0.99)",
          all, widest);
}

static void test_gain_match(void)
{
    float off = identity_loss(1.25f, 0), on = identity_loss(1.25f, 1), same = identity_loss(1.0f, 0);
    check(same < 1e-6f && on < 1e-5f && off > 0.02f,
          "gain_match: a source 1.25x brighter costs what the target itself costs (0)",
          "with gain_match %.3g, without %.3g, target against itself %.3g", on, off, same);
    float beyond = identity_loss(2.0f, 1), beyond_off = identity_loss(2.0f, 0);
    check(beyond > 0.02f && beyond < beyond_off,
          "gain_match: a 2x change is corrected only up to the 1.5x limit",
          "with gain_match %.3g, without %.3g", beyond, beyond_off);
}

/* Motion vector (points of camera 0 into camera 1) when camera 1 sits at c1
 * with heading yaw (camera-to-world R_y(yaw)): R = R_y(yaw)ᵀ, t = −R_y(yaw)ᵀ c1. */
static void motion_vec(double yaw, const double c1[3], float v[6])
{
    double cy = cos(yaw), sy = sin(yaw);
    /* R_y(yaw)ᵀ rows: (cy, 0, −sy), (0, 1, 0), (sy, 0, cy) */
    v[0] = 0; v[1] = (float)-yaw; v[2] = 0;
    v[3] = (float)-(cy * c1[0] - sy * c1[2]);
    v[4] = (float)-c1[1];
    v[5] = (float)-(sy * c1[0] + cy * c1[2]);
}

/* The planar arc of Scaramuzza et al. 2009, built here from the circle itself:
 * radius rho, heading change th, camera at (rho (1 − cos th), 0, rho sin th). */
static void test_arc_slip(void)
{
    nj_graph *g = nj_graph_new(1 << 20);
    nj_tensor *v = nj_tensor_new(g, 3, 6, 1, 1, 0);
    double rho = 6.0, th = 0.035;   /* ~2 degrees over 0.21 m */
    double arc[3] = {rho * (1 - cos(th)), 0, rho * sin(th)}, side[3] = {0.1, 0, 0}, back[3] = {0, 0, -0.2};
    motion_vec(th, arc, v->data);
    motion_vec(0, side, v->data + 6);
    motion_vec(-th, back, v->data + 12);   /* reversing while turning: not an arc of this camera */
    nj_tensor *s = nj_arc_slip(g, v, 1e-3f, 0);
    if (!s) { check(0, "arc_slip", "%s", nj_graph_error(g)); nj_graph_free(g); return; }
    check(s->data[0] < 1e-6f && fabs(s->data[1] - 0.01 / (0.01 + 1e-6)) < 1e-6 && s->data[2] > 1e-4f,
          "arc_slip: ~0 on a true circular arc, ~1 for a pure sideways move",
          "arc %.3g (want < 1e-6), sideways %.6g (want 0.01 / (0.01 + eps^2) = 0.9999), reversing with a heading change %.3g (want > 1e-4)",
          s->data[0], s->data[1], s->data[2]);
    nj_graph_free(g);
}

/* heading_given: the same penalty, no gradient into the yaw (channel 1), the
 * same gradient into the translation as the full penalty. */
static void test_arc_slip_heading_given(void)
{
    float g_full[12], g_given[12], val[2][2];
    for (int given = 0; given < 2; given++) {
        nj_graph *g = nj_graph_new(1 << 20);
        nj_tensor *v = nj_tensor_new(g, 2, 6, 1, 1, 1);
        const float m[12] = {0.001f, 0.004f, -0.002f, 0.03f, 0.01f, -0.3f,
                             -0.002f, -0.006f, 0.001f, -0.01f, 0.02f, 0.25f};
        memcpy(v->data, m, sizeof m);
        nj_tensor *s = nj_arc_slip(g, v, 1e-3f, given);
        if (!s || nj_backward(g, nj_sum(g, s, NJ_AXIS_ALL))) {
            check(0, "arc_slip heading_given: forward/backward", "%s", nj_graph_error(g));
            nj_graph_free(g);
            return;
        }
        val[given][0] = s->data[0];
        val[given][1] = s->data[1];
        memcpy(given ? g_given : g_full, v->grad, sizeof g_full);
        nj_graph_free(g);
    }
    double dt = 0;
    for (int n = 0; n < 2; n++)
        for (int c = 3; c < 6; c++) dt = fmax(dt, fabs(g_full[6 * n + c] - g_given[6 * n + c]));
    check(val[0][0] == val[1][0] && val[0][1] == val[1][1] && g_given[1] == 0.0f && g_given[7] == 0.0f &&
              g_full[1] != 0.0f && g_full[7] != 0.0f && dt == 0.0,
          "arc_slip heading_given: same value, no gradient into the yaw, the translation's gradient unchanged",
          "values %.6g/%.6g vs %.6g/%.6g; yaw gradient given %.3g/%.3g (want 0), full %.3g/%.3g (want != 0); "
          "translation gradient differs by %.3g (want 0)",
          val[0][0], val[0][1], val[1][0], val[1][1], g_given[1], g_given[7], g_full[1], g_full[7], dt);
}

/* nj_step_config: each loss term that waits is off before its step, on from it. */
static void test_step_config(void)
{
    nj_train_config c, tmp;
    nj_train_config_default(&c);
    c.loss.automask = 1;
    c.automask_from = 300;
    c.loss.arc_motion = 1.0f;
    c.arc_motion_from = 500;
    const nj_train_config *a = nj_step_config(&c, 299, &tmp);
    int before = a->loss.automask == 0 && a->loss.arc_motion == 0.0f;
    a = nj_step_config(&c, 300, &tmp);
    int between = a->loss.automask == 1 && a->loss.arc_motion == 0.0f;
    a = nj_step_config(&c, 500, &tmp);
    int after = a == &c;
    c.loss.arc_motion = 0.0f;
    a = nj_step_config(&c, 400, &tmp);
    int off = a == &c;
    check(before && between && after && off && c.loss.arc_motion == 0.0f && c.loss.automask == 1,
          "step config: auto-mask from automask_from_step, arc penalty from arc_motion_from_step, the config itself untouched",
          "before %d, between %d, after %d, arc off %d", before, between, after, off);
    c.rotation_pairs = 0.025f;
    c.rotation_pairs_until = 800;
    int on = nj_step_config(&c, 799, &tmp) == &c;
    a = nj_step_config(&c, 800, &tmp);
    int over = a->rotation_pairs == 0.0f && a->loss.automask == 1 && c.rotation_pairs == 0.025f;
    c.rotation_pairs_until = 0;
    int endless = nj_step_config(&c, 100000, &tmp) == &c;
    check(on && over && endless, "step config: the rotation lesson until rotation_pairs_until_step (0: to the end)",
          "on at step 799 %d, off from step 800 (the rest kept, the config untouched) %d, never off with 0 %d", on, over,
          endless);
    c.rotation_pairs = 0.0f;
    c.free_space = 1.0f;
    c.free_space_from = 500;
    a = nj_step_config(&c, 499, &tmp);
    int waits = a->free_space == 0.0f && a->loss.automask == 1 && c.free_space == 1.0f;
    int starts = nj_step_config(&c, 500, &tmp) == &c;
    check(waits && starts, "step config: the free-space hinge from free_space_from_step",
          "off at step 499 (the rest kept, the config untouched) %d, on from step 500 %d", waits, starts);
}

/* A small model (3 stages and scales, width 0.5, seed 9) of cfg's kind with
 * the pose outputs scaled by pose_scale / rotation_scale; 0 or -1 (a FAIL
 * line named `what`). */
static int step_model(nj_model *m, const nj_train_config *cfg, float pose_scale, float rotation_scale, const char *what)
{
    nj_model_config mc = cfg->model;
    mc.stages = mc.scales = mc.pose_stages = 3;
    mc.width = mc.pose_width = 0.5f;
    mc.pose_scale = pose_scale;
    mc.rotation_scale = rotation_scale;
    mc.seed = 9;
    char err[256];
    if (!nj_model_init(m, &mc, err, sizeof err)) return 0;
    check(0, what, "%s", err);
    return -1;
}

/* Photometric loss of one forward step on a fixed batch whose two sources
 * appear `copies` times; far_k > 0: the offsets are {1, far_k} (the two
 * copies are offset 1's and far_k's sources).  res: the step's figures, or NULL. */
static float offsets_step(int copies, int widest, int far_k, float *mask_share, nj_step_result *res)
{
    nj_train_config cfg;
    nj_train_config_default(&cfg);
    cfg.video = 1;
    cfg.stereo = 0;
    cfg.loss.arc_motion = 0;
    if (far_k > 0) {
        cfg.offsets[0] = 1;
        cfg.offsets[1] = far_k;
        cfg.noffsets = 2;
    }
    if (widest >= 0) {   /* offsets {1, 2}: sources 0, 1 (offset 1) are copies of the target */
        cfg.offsets[0] = 1;
        cfg.offsets[1] = 2;
        cfg.noffsets = 2;
        cfg.loss.automask = 1;
        cfg.loss.tie_break = 0;
        cfg.loss.automask_widest = widest;
    }
    nj_model m;
    /* pose_scale 2: untrained outputs would otherwise be ~identity motions */
    if (step_model(&m, &cfg, 2.0f, 0.2f, "offsets: model")) return NAN;
    nj_batch b;
    nj_graph *g = nj_graph_new(1 << 22);
    if (nj_batch_alloc(&b, 2, H, W, 2 * copies, 0, 0, 0, 0)) { nj_model_free(&m); nj_graph_free(g); return NAN; }
    nj_tensor *t = nj_tensor_new(g, 2, 3, H, W, 0), *s0 = nj_tensor_new(g, 2, 3, H, W, 0),
              *s1 = nj_tensor_new(g, 2, 3, H, W, 0);
    fill_image(t, 11, 0.9f);
    fill_image(s0, 12, 0.9f);
    fill_image(s1, 13, 0.9f);
    size_t img = (size_t)3 * H * W;
    for (int i = 0; i < 2; i++) {
        memcpy(b.target + i * img, t->data + i * img, img * sizeof(float));
        for (int c = 0; c < copies; c++) {
            const float *a = widest >= 0 && c == 0 ? t->data : s0->data, *z = widest >= 0 && c == 0 ? t->data : s1->data;
            memcpy(b.sources + ((size_t)i * 2 * copies + 2 * c) * img, a + i * img, img * sizeof(float));
            memcpy(b.sources + ((size_t)i * 2 * copies + 2 * c + 1) * img, z + i * img, img * sizeof(float));
        }
        b.camera[i] = (nj_camera){50.0f, 50.0f, 31.5f, 15.5f};
    }
    nj_graph_reset(g);
    nj_step_result r;
    float l = nj_train_step(g, &m, &cfg, &b, NULL, 0, &r) ? NAN : r.photometric;
    if (mask_share) *mask_share = r.mask_fraction;
    if (res) *res = r;
    if (isnan(l)) check(0, "offsets: step", "%s", nj_graph_error(g));
    nj_batch_free(&b);
    nj_graph_free(g);
    nj_model_free(&m);
    return l;
}

/* Photometric loss of one training step whose recorded sources need the
 * motion R with rotation vector (0, 1.5°, 1°), with the pose net held at the
 * identity motion and the batch saying its input was turned by k·that. */
/* The configuration of the one-step checks below: video, no stereo, no
 * auto-mask, no smoothness — the photometric error of the warp alone. */
static void warp_only_config(nj_train_config *cfg)
{
    nj_train_config_default(cfg);
    cfg->video = 1;
    cfg->stereo = 0;
    cfg->loss.automask = 0;
    cfg->loss.smooth_weight = 0;
}

static float turned_step_loss(float k)
{
    nj_train_config cfg;
    warp_only_config(&cfg);
    nj_model m;
    if (step_model(&m, &cfg, 1e-6f, 1e-6f, "turned step: model")) return NAN;   /* motions ~1e-6: the identity */
    nj_batch b;
    nj_graph *g = nj_graph_new(1 << 22);
    if (nj_batch_alloc(&b, 2, H, W, 2, 0, 0, 1, 0)) { nj_model_free(&m); nj_graph_free(g); return NAN; }
    size_t img = (size_t)3 * H * W;
    const float psi[3] = {0, 1.5f * (float)M_PI / 180, 1.0f * (float)M_PI / 180};
    for (int i = 0; i < 2; i++) {
        smooth_image(b.target + i * img, (float)i);
        b.camera[i] = (nj_camera){50.0f, 50.0f, 31.5f, 15.5f};
        for (int j = 0; j < 2; j++) {
            nj_turn_planes(b.target + i * img, b.sources + (2 * i + j) * img, 3, W, H, b.camera[i], psi);
            memcpy(b.sources_in + (2 * i + j) * img, b.sources + (2 * i + j) * img, img * sizeof(float));
            for (int a = 0; a < 3; a++) b.turn[(2 * i + j) * 3 + a] = k * psi[a];
        }
    }
    nj_step_result r;
    float l = nj_train_step(g, &m, &cfg, &b, NULL, 0, &r) ? NAN : r.photometric;
    if (isnan(l)) check(0, "turned step: step", "%s", nj_graph_error(g));
    nj_batch_free(&b);
    nj_graph_free(g);
    nj_model_free(&m);
    return l;
}

static void test_turned_step(void)
{
    float undone = turned_step_loss(-1), none = turned_step_loss(0), wrong = turned_step_loss(1);
    checkv(undone < 0.1f * none && wrong > none, "turned step: the loss warps the recorded frame with R^T * P",
           "photometric error with the input turned by -(yaw 1.5, roll 1 deg) %.4f, not turned %.4f, turned by "
           "+(1.5, 1) %.4f", undone, none, wrong);
}

/* One training step with rotated copies turned by `rho` (item 0) and
 * `sign1`·rho (item 1), static sources, the lesson's weight `weight`: the
 * gradient of the pose net's output-layer bias (6 values) and the lesson's
 * figure. */
static int rotation_step(const float rho[3], float sign1, float weight, float grad[6], float *lesson)
{
    nj_train_config cfg;
    warp_only_config(&cfg);
    cfg.rotation_pairs = weight;
    nj_model m;
    if (step_model(&m, &cfg, 1.0f, 1e-3f, "rotation lesson: model")) return -1;
    nj_batch b;
    nj_graph *g = nj_graph_new(1 << 22);
    int rc = -1;
    if (!nj_batch_alloc(&b, 2, H, W, 2, 0, 0, 0, 1)) {
        size_t img = (size_t)3 * H * W;
        for (int i = 0; i < 2; i++) {
            smooth_image(b.target + i * img, 0.7f * (float)i);
            b.camera[i] = (nj_camera){50.0f, 50.0f, 31.5f, 15.5f};
            for (int j = 0; j < 2; j++) memcpy(b.sources + (2 * i + j) * img, b.target + i * img, img * sizeof(float));
            for (int a = 0; a < 3; a++) b.rotated_by[3 * i + a] = (i ? sign1 : 1.0f) * rho[a];
            nj_turn_planes(b.target + i * img, b.rotated + i * img, 3, W, H, b.camera[i], b.rotated_by + 3 * i);
        }
        nj_params_zero_grad(&m.params);
        nj_step_result r;
        const nj_param *pb = nj_params_find(&m.params, "pose.out.b");
        if (pb && !nj_train_step(g, &m, &cfg, &b, NULL, 1, &r)) {
            memcpy(grad, pb->grad, 6 * sizeof(float));
            *lesson = r.rotation_lesson;
            rc = 0;
        } else check(0, "rotation lesson: step", "%s", pb ? nj_graph_error(g) : "no pose.out.b");
        nj_batch_free(&b);
    }
    nj_graph_free(g);
    nj_model_free(&m);
    return rc;
}

static void test_rotation_step(void)
{
    const float rho[3] = {0.02f, -0.03f, 0.025f};
    float opp[6], same[6], off[6], l_opp, l_same, l_off;
    if (rotation_step(rho, -1, 1, opp, &l_opp) || rotation_step(rho, 1, 1, same, &l_same) ||
        rotation_step(rho, -1, 0, off, &l_off))
        return;
    double dot = 0, ng = 0, nr = 0, ns = 0, dt = 0;
    for (int a = 0; a < 3; a++) {
        dot += ((double)opp[a] - off[a]) * rho[a];
        ng += ((double)opp[a] - off[a]) * (opp[a] - off[a]);
        nr += (double)rho[a] * rho[a];
        ns += ((double)same[a] - off[a]) * (same[a] - off[a]);
        dt = fmax(dt, fabs((double)opp[3 + a] - off[3 + a]));
    }
    double cosine = dot / sqrt(ng * nr + 1e-30);
    checkv(cosine < -0.99 && sqrt(ns) < 0.02 * sqrt(ng) && l_opp > 0 && l_off == 0,
           "rotation lesson: the step pulls the rotation answer to the copy's turn",
           "rotations rho and -rho (answers rho, rho): cosine of the bias gradient with rho %.4f (want -1); rho and "
           "rho (answers rho, -rho): gradient %.3g against %.3g; lesson %.4g (off: %g)", cosine, sqrt(ns), sqrt(ng),
           l_opp, l_off);
    checkv(dt <= 1e-6 * sqrt(ng), "rotation lesson: the translation is left free",
           "largest change of a translation bias gradient %.3g (rotation's %.3g)", dt, sqrt(ng));
}

static void test_offsets_step(void)
{
    float one = offsets_step(1, -1, 0, NULL, NULL), two = offsets_step(2, -1, 0, NULL, NULL), all = NAN, widest = NAN;
    check(fabsf(one - two) <= 1e-6f * fabsf(one) && one > 0, "offsets: sources listed twice give the same loss",
          "one offset %.9g, the same two sources listed as two offsets %.9g", one, two);
    /* the step wires loss.automask_widest to the offset-1 sources: the static
     * copies at offset 1 mask (nearly) everything unless left out */
    offsets_step(2, 0, 0, &all, NULL);
    offsets_step(2, 1, 0, &widest, NULL);
    check(all < 0.05f && widest > 0.9f, "automask_widest: the step leaves the shorter offset's sources out",
          "mask keeps %.3f with every source, %.3f against offset 2 only (want < 0.05 and > 0.9)", all, widest);
    /* The log's "gap" (step.h: pace_far / pace_near).  Offsets 1 and 3 get the
     * same frame pairs, so the pose net gives both the same motion — a net
     * that does not see the gap — and the motion per frame of gap at offset 3
     * is exactly a third of offset 1's; with one offset there is no figure. */
    nj_step_result r1, r13;
    offsets_step(1, -1, 0, NULL, &r1);
    offsets_step(2, -1, 3, NULL, &r13);
    check(r13.pace_near > 0 && fabsf(r13.pace_far * 3.0f - r13.pace_near) <= 1e-6f * r13.pace_near &&
              fabsf(r13.pace_near - r1.translation) <= 1e-6f * r1.translation && r1.pace_near == 0 && r1.pace_far == 0,
          "gap figure: the same motion at offsets 1 and 3 reads 1/3 (per frame of gap); none with one offset",
          "offset 1 %.6g, offset 3 %.6g per frame (ratio %.6g, want 1/3); |t| of the one-offset step %.6g; "
          "one offset's figures %g %g (want 0)", r13.pace_near, r13.pace_far, r13.pace_far / r13.pace_near,
          r1.translation, r1.pace_near, r1.pace_far);
}

/* The small model of the pose_rays and pose_norm checks. */
static void small_model(nj_model_config *mc)
{
    nj_model_config_default(mc);
    mc->stages = mc->scales = mc->pose_stages = 3;
    mc->width = mc->pose_width = 0.5f;
    mc->seed = 5;
}

/* Pose output of a small model (with or without rays) for cameras `cams`;
 * returns -1 (and the graph's message in msg) when the forward fails. */
static int rays_run(int rays, const nj_camera *cams, float out[12], char *msg, size_t len, int *cin)
{
    nj_model_config mc;
    small_model(&mc);
    mc.pose_rays = rays;
    nj_model m;
    if (nj_model_init(&m, &mc, msg, len)) return -1;
    *cin = m.units[m.pose_units[0]].cin;
    uint64_t np = 0, nb = 0;
    nj_model_count(&mc, &np, &nb);
    check(np == nj_params_numel(&m.params), "pose_rays: nj_model_count agrees with the built model",
          "count %llu, built %zu", (unsigned long long)np, nj_params_numel(&m.params));
    nj_graph *g = nj_graph_new(1 << 22);
    nj_tensor *a = nj_tensor_new(g, 2, 3, H, W, 0), *b = nj_tensor_new(g, 2, 3, H, W, 0);
    fill_image(a, 1, 0.9f);
    fill_image(b, 2, 0.9f);
    nj_tensor *v = nj_pose_forward(g, &m, a, b, cams);
    int rc = v && !nj_graph_failed(g) ? 0 : -1;
    if (rc) snprintf(msg, len, "%s", nj_graph_error(g));
    else memcpy(out, v->data, 12 * sizeof(float));
    if (rays && cams) {   /* through inference: no camera is an error, a camera works */
        nj_infer in;
        char err[256];
        if (nj_infer_init(&in, &m, W, H, err, sizeof err) == 0) {
            nj_image f1 = {W, H, a->data}, f2 = {W, H, b->data};
            double T[12];
            int bad = nj_infer_motion(&in, &f1, &f2, NULL, T, err, sizeof err);
            check(bad && strstr(err, "pose_rays"), "pose_rays: nj_infer_motion without intrinsics is refused",
                  "rc %d, message \"%s\"", bad, bad ? err : "");
            int ok = nj_infer_motion(&in, &f1, &f2, &cams[0], T, err, sizeof err) == 0;
            check(ok, "pose_rays: nj_infer_motion with intrinsics", "%s", ok ? "" : err);
            nj_infer_free(&in);
        } else check(0, "pose_rays: inference setup", "%s", err);
    }
    nj_graph_free(g);
    nj_model_free(&m);
    return rc;
}

static void test_pose_rays(void)
{
    nj_camera c1[2] = {{40, 40, 31.5f, 15.5f}, {40, 40, 31.5f, 15.5f}};
    nj_camera c2[2] = {{40, 40, 20.0f, 22.0f}, {40, 40, 20.0f, 22.0f}};
    float o1[12], o2[12], p1[12], p2[12];
    char msg[256];
    int cin = 0, cin0 = 0;
    if (rays_run(1, c1, o1, msg, sizeof msg, &cin) || rays_run(1, c2, o2, msg, sizeof msg, &cin)) {
        check(0, "pose_rays: forward", "%s", msg);
        return;
    }
    check(cin == 8, "pose_rays: the pose net's first layer takes 8 channels", "%d", cin);
    double d = 0;
    for (int i = 0; i < 12; i++) d = fmax(d, fabs(o1[i] - o2[i]));
    check(d > 1e-7, "pose_rays: the pose output depends on the principal point", "largest change %.3g", d);
    int bad = rays_run(1, NULL, o1, msg, sizeof msg, &cin);
    check(bad && strstr(msg, "pose_rays"), "pose_rays: the pose net without intrinsics fails, naming the option",
          "rc %d, message \"%s\"", bad, bad ? msg : "");
    if (rays_run(0, c1, p1, msg, sizeof msg, &cin0) || rays_run(0, c2, p2, msg, sizeof msg, &cin0)) {
        check(0, "pose_rays off: forward", "%s", msg);
        return;
    }
    check(cin0 == 6 && !memcmp(p1, p2, sizeof p1), "pose_rays off: 6 channels, the intrinsics are not used",
          "first layer %d channels, outputs %s", cin0, memcmp(p1, p2, sizeof p1) ? "differ" : "equal");
}

/* Item 0's pose output when item 1 is `seed1`'s random frames. */
static int pose_item0(int pose_norm, unsigned seed1, float out[6], int *units_plain, int *depth_plain)
{
    nj_model_config mc;
    small_model(&mc);
    mc.pose_norm = pose_norm;
    nj_model m;
    char err[256];
    if (nj_model_init(&m, &mc, err, sizeof err)) { check(0, "pose_norm: model", "%s", err); return -1; }
    *units_plain = 1;
    for (int i = 0; i < m.npose; i++) *units_plain &= m.units[m.pose_units[i]].norm == NJ_NORM_NONE;
    *depth_plain = m.units[m.enc[0][0]].norm == NJ_NORM_NONE;
    nj_graph *g = nj_graph_new(1 << 22);
    nj_tensor *a = nj_tensor_new(g, 2, 3, H, W, 0), *b = nj_tensor_new(g, 2, 3, H, W, 0);
    fill_image(a, 1, 0.9f);
    fill_image(b, 2, 0.9f);
    nj_tensor *a1 = nj_tensor_new(g, 1, 3, H, W, 0);
    fill_image(a1, seed1, 0.6f);
    memcpy(a->data + 3 * H * W, a1->data, sizeof(float) * 3 * H * W);
    nj_tensor *v = nj_pose_forward(g, &m, a, b, NULL);
    int rc = v && !nj_graph_failed(g) ? 0 : -1;
    if (!rc) memcpy(out, v->data, 6 * sizeof(float));
    else check(0, "pose_norm: forward", "%s", nj_graph_error(g));
    nj_graph_free(g);
    nj_model_free(&m);
    return rc;
}

static void test_pose_norm(void)
{
    float p1[6], p2[6], b1[6], b2[6];
    int plain, depth_plain, bplain, bdepth;
    if (pose_item0(0, 7, p1, &plain, &depth_plain) || pose_item0(0, 8, p2, &plain, &depth_plain) ||
        pose_item0(1, 7, b1, &bplain, &bdepth) || pose_item0(1, 8, b2, &bplain, &bdepth))
        return;
    check(plain && !depth_plain && !bplain, "pose_norm false: no normalisation in the pose net, the depth net keeps it",
          "pose plain %d, depth plain %d, default pose plain %d", plain, depth_plain, bplain);
    check(!memcmp(p1, p2, sizeof p1), "pose_norm false: a pair's motion does not depend on the batch's other pairs",
          "item 0 rotation x %.9g vs %.9g", p1[0], p2[0]);
    check(memcmp(b1, b2, sizeof b1) != 0, "pose_norm true (batch norm): it does (the check can tell)",
          "item 0 rotation x %.9g vs %.9g", b1[0], b2[0]);
}

static void test_free_space(void)
{
    const nj_depth_range r = {0.1f, 100.0f};
    const nj_camera cam = {40.0f, 40.0f, 31.5f, 15.5f};
    const double th = 5.0 * M_PI / 180, h = 1.2, n[3] = {0, cos(th), sin(th)};
    nj_graph *g = nj_graph_new(1 << 20);
    nj_tensor *d = nj_tensor_new(g, 2, 1, H, W, 1);
    float zg[H * W], bound[2 * H * W], scratch[3 * H * W];
    int hole = 0;
    for (int v = 0; v < H; v++)
        for (int u = 0; u < W; u++) {
            int p = v * W + u;
            double nd = n[1] * (v - cam.cy) / cam.fy + n[2];
            zg[p] = nd > 0 ? (float)(h / nd) : 0.0f;
            float z = nd > 0 && zg[p] < 60 ? zg[p] : 60.0f;                     /* ground, far wall */
            if (v >= 18 && u >= 40 && u < 50) z = 0.6f * z;                        /* the box */
            if (v >= 24 && v < 28 && u >= 10 && u < 20) z = 2.0f * zg[p], hole++;  /* beyond the ground */
            d->data[p] = nj_disparity_from_depth_value(z, r);
            d->data[H * W + p] = nj_disparity_from_depth_value(9.0f, r);      /* the uniform start */
        }
    nj_camera cams[2] = {cam, cam};
    int planes = nj_free_space_bounds(d, r, cams, 0.1f, 8.0f, scratch, bound);
    double worst = 0, unbounded = 0, beyond_reach = 0;
    int near = 0, far = 0;
    for (int p = 0; p < H * W; p++) {
        int v = p / W, u = p % W;
        int on_ground = zg[p] > 0 && zg[p] < 60 && !(v >= 18 && u >= 40 && u < 50) && !(v >= 24 && v < 28 && u >= 10 && u < 20);
        if (on_ground && zg[p] < 0.95 * 8 * h) worst = fmax(worst, fabs(bound[p] * zg[p] * 1.1 - 1.0)), near++;
        if (on_ground && zg[p] > 1.05 * 8 * h) beyond_reach = fmax(beyond_reach, bound[p]), far++;
        unbounded = fmax(unbounded, bound[H * W + p]);
    }
    check(planes == 1 && worst < 0.01 && near > 100 && far > 100 && beyond_reach == 0 && unbounded == 0,
          "free space: bounds from the prediction's own ground plane, within the reach",
          "%d of 2 items with a plane (want 1: the uniform one has none), largest relative error of a ground bound "
          "%.4f (%d ground pixels within 8 heights), largest bound beyond the reach %g (%d pixels), of the uniform "
          "item %g", planes, worst, near, beyond_reach, far, unbounded);
    float share = -1;
    nj_tensor *l = nj_free_space_loss(g, d, r, bound, &share);
    int bounded = 0, pulled = 1, others = 1;
    for (int p = 0; p < H * W; p++) bounded += bound[p] > 0;
    if (l && !nj_backward(g, l))
        for (int p = 0; p < H * W; p++) {
            int v = p / W, u = p % W, in_hole = v >= 24 && v < 28 && u >= 10 && u < 20;
            if (in_hole) pulled &= d->grad[p] < 0;   /* descent raises the disparity: nearer */
            else others &= d->grad[p] == 0;
        }
    else check(0, "free space: hinge", "%s", nj_graph_error(g));
    checkv(fabsf(share - (float)hole / (float)bounded) < 1e-6f && pulled && others,
           "free space: the patch beyond the ground and only it is pulled nearer",
           "share beyond %.4f (patch %d of %d bounded pixels), every patch gradient negative %d, all others 0 %d",
           share, hole, bounded, pulled, others);
    nj_graph_free(g);
}

int main(void)
{
    test_pose_norm();
    test_pose_rays();
    test_offsets_step();
    test_automask_widest();
    test_turned_source();
    test_turned_step();
    test_rotation_step();
    test_arc_slip();
    test_arc_slip_heading_given();
    test_step_config();
    test_rotation_scale();
    test_gain_match();
    test_free_space();
    return test_exit();
}

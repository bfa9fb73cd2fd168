/* tests/test_grad_losses.c — finite-difference gradient checks of every
 * losses/ op and of the composed warp, plus the auto-mask behaviour on a
 * constructed pair where a textured patch moves with the camera. */
#include "losses/depth.h"
#include "losses/photometric.h"
#include "losses/pose.h"
#include "losses/reproject.h"
#include "losses/sample.h"
#include "losses/smooth.h"
#include "losses/free_space.h"
#include "losses/view_synthesis.h"
#include "nn/ops.h"
#include "tests/check.h"
#include "tests/gradcheck.h"
#include <math.h>
#include <string.h>

static const nj_camera CAMS[2] = {{9.0f, 8.5f, 4.2f, 3.1f}, {8.0f, 9.5f, 3.6f, 2.8f}};

static nj_tensor *b_pose_vec(nj_graph *g, nj_tensor *const *in, void *ctx)
{
    (void)ctx;
    return nj_pose_from_vec(g, in[0]);
}

/* Scales the rotation part so the check runs in the small-angle series. */
static nj_tensor *b_pose_small(nj_graph *g, nj_tensor *const *in, void *ctx)
{
    (void)ctx;
    nj_tensor *s = nj_tensor_new(g, 1, 6, 1, 1, 0);
    const float k[6] = {1e-3f, 1e-3f, 1e-3f, 1, 1, 1};
    memcpy(s->data, k, sizeof k);
    return nj_pose_from_vec(g, nj_mul(g, in[0], s));
}

static nj_tensor *b_invert(nj_graph *g, nj_tensor *const *in, void *ctx)
{
    (void)ctx;
    return nj_pose_invert(g, nj_pose_from_vec(g, in[0]));
}

static nj_tensor *b_compose(nj_graph *g, nj_tensor *const *in, void *ctx)
{
    (void)ctx;
    return nj_pose_compose(g, nj_pose_from_vec(g, in[0]), nj_pose_from_vec(g, in[1]));
}

/* depth in [2, 4] (affine of the [-1, 1] input), pose from 6 numbers. */
static nj_tensor *b_reproject(nj_graph *g, nj_tensor *const *in, void *ctx)
{
    (void)ctx;
    nj_tensor *pose = nj_pose_from_vec(g, nj_affine(g, in[1], 0.1f, 0.0f));
    return nj_reproject(g, nj_affine(g, in[0], 1.0f, 3.0f), pose, CAMS, NULL);
}

/* Coordinates = integers from −2 to size+1 plus a fraction in [0.2, 0.8]:
 * inside, on the border cells and beyond the 7×9 image, but never within a
 * finite-difference step of an integer, where bilinear interpolation has a kink. */
static nj_tensor *b_sample(nj_graph *g, nj_tensor *const *in, void *ctx)
{
    (void)ctx;
    nj_tensor *c = in[1];
    nj_tensor *base = nj_tensor_new(g, c->n, c->c, c->h, c->w, 0);
    size_t k = nj_numel(base);
    for (size_t i = 0; i < k; i++) {
        int axis = (int)(i / ((size_t)c->h * c->w)) % 2, size = axis ? 7 : 9;
        base->data[i] = (float)((int)((i * 7) % (size + 4)) - 2);
    }
    return nj_sample_bilinear(g, in[0], nj_add(g, base, nj_affine(g, c, 0.3f, 0.5f)));
}

/* The whole warp: depth and 6-number pose → warped source image. */
static nj_tensor *b_warp(nj_graph *g, nj_tensor *const *in, void *ctx)
{
    nj_tensor *img = ctx;
    nj_tensor *src = nj_tensor_from(g, img->n, img->c, img->h, img->w, img->data, 0);
    nj_tensor *pose = nj_pose_from_vec(g, nj_affine(g, in[1], 0.05f, 0.0f));
    nj_tensor *co = nj_reproject(g, nj_affine(g, in[0], 0.5f, 3.0f), pose, CAMS, NULL);
    return nj_sample_bilinear(g, src, co);
}

static nj_tensor *b_ssim(nj_graph *g, nj_tensor *const *in, void *ctx)
{
    (void)ctx;
    return nj_ssim(g, in[0], in[1]);
}

/* a in [0, 0.4], b in [0.6, 1]: |a − b| stays away from its kink at 0. */
static nj_tensor *b_photo(nj_graph *g, nj_tensor *const *in, void *ctx)
{
    (void)ctx;
    /* α = 0.85: Godard et al. 2017's common choice; any α in [0, 1] exercises both terms */
    return nj_photometric_error(g, nj_affine(g, in[0], 0.2f, 0.2f), nj_affine(g, in[1], 0.2f, 0.8f), 0.85f);
}

/* Disparity = checkerboard 1 / 1.3 plus 0.05·input: neighbour differences
 * are ±0.3 ± 0.1, never near the kink of |·|, and of both signs. */
static nj_tensor *b_smooth(nj_graph *g, nj_tensor *const *in, void *ctx)
{
    (void)ctx;
    nj_tensor *x = in[0];
    nj_tensor *base = nj_tensor_new(g, x->n, 1, x->h, x->w, 0);
    for (int n = 0; n < x->n; n++)
        for (int y = 0; y < x->h; y++)
            for (int u = 0; u < x->w; u++)
                base->data[((size_t)n * x->h + y) * x->w + u] = 1.0f + 0.3f * (float)((u + y) % 2);
    return nj_edge_smoothness(g, nj_add(g, base, nj_affine(g, x, 0.05f, 0.0f)), in[1]);
}

static nj_tensor *b_depth(nj_graph *g, nj_tensor *const *in, void *ctx)
{
    (void)ctx;
    return nj_depth_from_disparity(g, nj_affine(g, in[0], 0.45f, 0.5f), (nj_depth_range){0.5f, 20.0f});
}

/* Disparity 0.1 + 0.02·input in a 0.5–20 m range: inverse depth 0.206–0.284.
 * Bounds by pixel: none, 0.15 (never reached) or 0.4 (always beyond): no pixel
 * near the hinge's kink (nor at ±eps), both sides and unbounded pixels present. */
static nj_tensor *b_free_space(nj_graph *g, nj_tensor *const *in, void *ctx)
{
    (void)ctx;
    nj_tensor *x = in[0];
    size_t k = nj_numel(x);
    float *bound = nj_graph_alloc(g, sizeof(float) * k);
    if (!bound) return NULL;
    for (size_t i = 0; i < k; i++) bound[i] = i % 3 == 0 ? 0.0f : (i % 3 == 1 ? 0.15f : 0.4f);
    /* ×100: the per-pixel gradients (~span/(bound·K)·0.02) would sit near the default atol */
    return nj_affine(g, nj_free_space_loss(g, nj_affine(g, x, 0.02f, 0.1f), (nj_depth_range){0.5f, 20.0f}, bound, NULL),
                     100.0f, 0.0f);
}

static nj_tensor *b_arc_slip(nj_graph *g, nj_tensor *const *in, void *ctx)
{
    (void)ctx;
    return nj_arc_slip(g, in[0], 1e-3f, 0);
}

static void grad_checks(void)
{
    gc_spec s = {.nin = 1, .shape = {{3, 6, 1, 1}}, .lo = -2, .hi = 2, .seed = 1};
    gradcheck("grad pose_from_vec (angles up to ~3.4 rad)", b_pose_vec, NULL, &s);
    s.lo = -1; s.hi = 1; s.eps = 1e-2f; s.seed = 2;
    gradcheck("grad pose_from_vec (angles ~1e-3; its a, b coefficients: test_pose_series)", b_pose_small, NULL, &s);
    s.eps = 0; s.seed = 3;
    gradcheck("grad pose_invert", b_invert, NULL, &s);
    s.seed = 9;
    gradcheck("grad arc_slip (planar-arc motion penalty)", b_arc_slip, NULL, &s);
    gc_spec c = {.nin = 2, .shape = {{2, 6, 1, 1}, {2, 6, 1, 1}}, .seed = 4};
    gradcheck("grad pose_compose", b_compose, NULL, &c);
    gc_spec r = {.nin = 2, .shape = {{2, 1, 6, 8}, {2, 6, 1, 1}}, .seed = 5};
    gradcheck("grad reproject (depth and pose)", b_reproject, NULL, &r);
    gc_spec sm = {.nin = 2, .shape = {{2, 3, 7, 9}, {2, 2, 5, 6}}, .seed = 6};
    gradcheck("grad sample_bilinear (image and coordinates, border clamp)", b_sample, NULL, &sm);
    gc_spec ss = {.nin = 2, .shape = {{2, 3, 6, 7}, {2, 3, 6, 7}}, .lo = 0, .hi = 1, .seed = 7};
    gradcheck("grad ssim (fused)", b_ssim, NULL, &ss);
    ss.seed = 8;
    gradcheck("grad photometric error (SSIM + L1)", b_photo, NULL, &ss);
    gc_spec sh = {.nin = 2, .shape = {{2, 1, 6, 7}, {2, 3, 6, 7}}, .seed = 9, .no_grad = {0, 1}};
    gradcheck("grad edge-aware smoothness", b_smooth, NULL, &sh);
    gc_spec dd = {.nin = 1, .shape = {{2, 1, 5, 4}}, .seed = 10};
    gradcheck("grad disparity to depth", b_depth, NULL, &dd);
    gc_spec fs = {.nin = 1, .shape = {{2, 1, 5, 6}}, .eps = 1e-2f, .seed = 11};
    gradcheck("grad free-space hinge", b_free_space, NULL, &fs);
}

static void warp_check(void)
{
    nj_graph *g = nj_graph_new(1 << 20);
    nj_tensor *img = nj_tensor_new(g, 2, 3, 6, 8, 0);
    test_fill_uniform(img->data, nj_numel(img), 0, 1, 99);
    gc_spec w = {.nin = 2, .shape = {{2, 1, 6, 8}, {2, 6, 1, 1}}, .seed = 11};
    gradcheck("grad whole warp w.r.t. depth and pose", b_warp, img, &w);
    nj_graph_free(g);
}

/* A textured patch fixed in the image (moving with the camera) while the
 * background shifts by 4 px between the frames: auto-masking must drop the
 * patch and keep the background. */
static void automask_check(void)
{
    enum { H = 32, W = 48, SHIFT = 4, PY0 = 8, PY1 = 24, PX0 = 16, PX1 = 32 };
    nj_graph *g = nj_graph_new(8 << 20);
    nj_tensor *tgt = nj_tensor_new(g, 1, 3, H, W, 0), *src = nj_tensor_new(g, 1, 3, H, W, 0);
    float world[3 * H * (W + SHIFT)], patch[3 * H * W];
    test_fill_uniform(world, sizeof world / sizeof *world, 0, 1, 21);
    test_fill_uniform(patch, sizeof patch / sizeof *patch, 0, 1, 22);
    for (int c = 0; c < 3; c++)
        for (int y = 0; y < H; y++)
            for (int x = 0; x < W; x++) {
                int in_patch = y >= PY0 && y < PY1 && x >= PX0 && x < PX1;
                size_t i = ((size_t)c * H + y) * W + x;
                /* target(x) = world(x); source(x) = world(x + SHIFT) */
                tgt->data[i] = in_patch ? patch[i] : world[((size_t)c * H + y) * (W + SHIFT) + x];
                src->data[i] = in_patch ? patch[i] : world[((size_t)c * H + y) * (W + SHIFT) + x + SHIFT];
            }
    /* depth Z with fx·B/Z = SHIFT and translation −B: the warp samples the
     * source at x − SHIFT, where it holds world(x) */
    nj_camera cam = {20.0f, 20.0f, (W - 1) / 2.0f, (H - 1) / 2.0f};
    float tx = -1.0f, depth = 20.0f / SHIFT;
    const nj_depth_range range = {0.1f, 100.0f};
    float s = nj_disparity_from_depth_value(depth, range);
    nj_tensor *disp = nj_tensor_new(g, 1, 1, H, W, 1);
    for (size_t i = 0; i < (size_t)H * W; i++) disp->data[i] = s;
    nj_vs_config cfg;
    nj_vs_config_default(&cfg);
    nj_rng rng;
    nj_rng_seed(&rng, 5);
    nj_vs_input in = {.target = tgt, .sources = {src}, .poses = {nj_pose_stereo(g, 1, &tx)},
                      .nsources = 1, .cams = &cam, .disp = {disp}, .nscales = 1, .depth_range = range,
                      .rng = &rng};
    nj_vs_output out;
    if (nj_view_synthesis_loss(g, &cfg, &in, &out)) {
        check(0, "auto-mask drops a patch moving with the camera", "%s", nj_graph_error(g));
        nj_graph_free(g);
        return;
    }
    double on_patch = 0, on_bg = 0; int np = 0, nb = 0;
    for (int y = 2; y < H - 2; y++)
        for (int x = SHIFT + 2; x < W - 2; x++) {
            float m = out.automask->data[y * W + x];
            if (y >= PY0 + 1 && y < PY1 - 1 && x >= PX0 + 1 && x < PX1 - 1) { on_patch += m; np++; }
            else if (y < PY0 - 2 || y >= PY1 + 2 || x < PX0 - 2 - SHIFT || x >= PX1 + 2) { on_bg += m; nb++; }
        }
    check(on_patch / np < 0.05 && on_bg / nb > 0.9, "auto-mask drops a patch moving with the camera",
          "kept %.1f%% of patch pixels and %.1f%% of background", 100 * on_patch / np, 100 * on_bg / nb);
    nj_graph_free(g);
}

int main(void)
{
    nj_threads_init(0);
    grad_checks();
    warp_check();
    automask_check();
    return test_exit();
}

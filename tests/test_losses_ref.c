/* tests/test_losses_ref.c — losses/ against outside references
 * (tests/ref/losses_ref.py): scikit-image SSIM, PyTorch grid_sample and OpenCV
 * remap, SciPy rotations, an independent PyTorch view-synthesis loss, and the
 * Middlebury 2014 motorcycle stereo pair (Scharstein et al. 2014).  The
 * PyTorch loss follows the publications named in losses_ref.py (Wang et al.
 * 2004, Zhou et al. 2017, Godard et al. 2017 and 2019); where it repeats a
 * choice of nightjar's own (off-view penalty, saturation guard, normaliser),
 * losses_ref.py says so: those parts check the code against its specification,
 * not against a publication. */
#include "nn/geom/camera.h"
#include "losses/free_space.h"
#include "losses/photometric.h"
#include "losses/pose.h"
#include "losses/reproject.h"
#include "losses/sample.h"
#include "losses/view_synthesis.h"
#include "nn/ops.h"
#include "tests/check.h"
#include "tests/losses_support.h"
#include "tests/torch_ref.h"
#include <math.h>
#include <stdio.h>
#include <string.h>

/* Max |a − b| over pixels at least one away from the border. */
static double interior_max_abs(const nj_tensor *a, const nj_tensor *b)
{
    double m = 0;
    for (int y = 1; y < a->h - 1; y++)
        for (int x = 1; x < a->w - 1; x++) {
            double d = fabs(a->data[y * a->w + x] - b->data[y * b->w + x]);
            if (!(d <= m)) m = d;
        }
    return m;
}

/* scikit-image structural_similarity(win_size=3, uniform, population stats). */
static void test_ssim(nj_graph *g)
{
    char dir[4096];
    if (losses_ref_run("ssim", dir, sizeof dir, "ssim vs scikit-image")) return;
    const char *tags[2] = {"random", "camera"};
    for (int k = 0; k < 2; k++) {
        char na[64], nb[64], ns[64], name[96];
        snprintf(na, sizeof na, "%s_a", tags[k]);
        snprintf(nb, sizeof nb, "%s_b", tags[k]);
        snprintf(ns, sizeof ns, "%s_ssim", tags[k]);
        snprintf(name, sizeof name, "ssim vs scikit-image structural_similarity (%s image)", tags[k]);
        nj_graph_reset(g);
        nj_tensor *a = losses_ref_tensor(g, dir, na, 0), *b = losses_ref_tensor(g, dir, nb, 0);
        nj_tensor *ref = losses_ref_tensor(g, dir, ns, 0);
        nj_tensor *s = nj_ssim(g, a, b);
        if (!s) { check(0, name, "%s", nj_graph_error(g)); continue; }
        double err = interior_max_abs(s, ref);
        check(err <= 1e-5, name, "max abs difference on interior pixels %.3g > 1e-5", err);
    }
    ref_rmtree(dir);
}

static void compare(const char *name, const float *a, const float *b, size_t n, double tol)
{
    double e = ref_rel_err(a, b, n);
    check(e <= tol, name, "relative error %.3g > %.1g", e, tol);
}

/* PyTorch grid_sample (border, align_corners=True) and OpenCV remap. */
static void test_sample(nj_graph *g)
{
    char dir[4096];
    if (losses_ref_run("sample", dir, sizeof dir, "bilinear sampling vs PyTorch grid_sample")) return;
    nj_graph_reset(g);
    nj_tensor *img = losses_ref_tensor(g, dir, "img", 1), *co = losses_ref_tensor(g, dir, "coords", 1);
    nj_tensor *go = losses_ref_tensor(g, dir, "go", 0), *ty = losses_ref_tensor(g, dir, "torch_y", 0);
    nj_tensor *tgi = losses_ref_tensor(g, dir, "torch_gimg", 0);
    nj_tensor *tgc = losses_ref_tensor(g, dir, "torch_gcoords", 0);
    nj_tensor *cv = losses_ref_tensor(g, dir, "cv_y", 0);
    nj_tensor *y = nj_sample_bilinear(g, img, co);
    if (!y || !go || !ty || !tgi || !tgc || !cv) {
        check(0, "bilinear sampling vs PyTorch grid_sample", "%s", nj_graph_error(g));
        ref_rmtree(dir);
        return;
    }
    nj_backward_seeded(g, y, go->data);
    compare("sample values vs PyTorch grid_sample(border, align_corners=True)", y->data, ty->data, nj_numel(y), 1e-5);
    compare("sample image gradient vs PyTorch grid_sample", img->grad, tgi->data, nj_numel(img), 1e-4);
    compare("sample coordinate gradient vs PyTorch grid_sample", co->grad, tgc->data, nj_numel(co), 1e-4);
    compare("sample values vs OpenCV remap(INTER_LINEAR, BORDER_REPLICATE)", y->data, cv->data, nj_numel(y), 1e-5);
    ref_rmtree(dir);
}

/* SciPy Rotation.from_rotvec, angles from 0 to π. */
static void test_rotation(nj_graph *g)
{
    const char *name = "Rodrigues rotation vs SciPy Rotation.from_rotvec (0 .. pi)";
    char dir[4096];
    if (losses_ref_run("rotation", dir, sizeof dir, name)) return;
    nj_graph_reset(g);
    nj_tensor *v = losses_ref_tensor(g, dir, "rotvec", 0), *m = losses_ref_tensor(g, dir, "matrix", 0);
    if (!v || !m) { ref_rmtree(dir); return; }
    int n = v->h;   /* rotvec is (n, 3) → 1×1×n×3 */
    nj_tensor *vec = nj_tensor_new(g, n, 6, 1, 1, 0);
    for (int k = 0; k < n; k++)
        for (int j = 0; j < 6; j++) vec->data[6 * k + j] = j < 3 ? v->data[3 * k + j] : 0.0f;
    nj_tensor *T = nj_pose_from_vec(g, vec);
    double worst = 0;
    for (int k = 0; k < n; k++)
        for (int r = 0; r < 3; r++)
            for (int c = 0; c < 3; c++) {
                double d = fabs(T->data[12 * k + 4 * r + c] - m->data[9 * k + 3 * r + c]);
                if (!(d <= worst)) worst = d;
            }
    check(worst <= 2e-7, name, "max abs difference %.3g > 2e-7", worst);
    ref_rmtree(dir);
}

/* The whole loss against an independent PyTorch implementation; with guard
 * > 0 (mode "vsloss_guard") some disparities are saturated and the
 * saturation guard is on; with offsets (mode "vsloss_offsets") four sources
 * in two groups and loss.each_offset. */
static void test_vsloss(nj_graph *g, const char *mode, float guard, int offsets)
{
    int nsrc = offsets ? 4 : 2;
    char name[128], dir[4096];
    snprintf(name, sizeof name, "%s vs independent PyTorch implementation", mode);
    if (losses_ref_run(mode, dir, sizeof dir, name)) return;
    nj_graph_reset(g);
    nj_vs_input in;
    memset(&in, 0, sizeof in);
    in.target = losses_ref_tensor(g, dir, "target", 0);
    in.nsources = nsrc;
    in.nscales = 4;
    in.depth_range = (nj_depth_range){0.1f, 100.0f};   /* the reference's min_d, max_d */
    nj_tensor *pv[4];
    char nm[32];
    for (int i = 0; i < nsrc; i++) {
        in.group[i] = (unsigned char)(offsets ? i / 2 : 0);
        snprintf(nm, sizeof nm, "source%d", i);
        in.sources[i] = losses_ref_tensor(g, dir, nm, 0);
        snprintf(nm, sizeof nm, "pose%d", i);
        pv[i] = losses_ref_tensor(g, dir, nm, 1);
        in.poses[i] = nj_pose_from_vec(g, pv[i]);
    }
    for (int s = 0; s < 4; s++) {
        snprintf(nm, sizeof nm, "disp%d", s);
        in.disp[s] = losses_ref_tensor(g, dir, nm, 1);
    }
    nj_tensor *cams = losses_ref_tensor(g, dir, "cams", 0);
    nj_tensor *total = losses_ref_tensor(g, dir, "total", 0);
    if (nj_graph_failed(g) || !cams || !total) { check(0, name, "%s", nj_graph_error(g)); ref_rmtree(dir); return; }
    nj_camera cam[2];
    for (int n = 0; n < 2; n++)
        cam[n] = (nj_camera){cams->data[4 * n], cams->data[4 * n + 1], cams->data[4 * n + 2], cams->data[4 * n + 3]};
    in.cams = cam;
    nj_vs_config cfg;
    nj_vs_config_default(&cfg);
    cfg.tie_break = 0;          /* the reference has no random tie-break */
    cfg.saturation_guard = guard;
    cfg.each_offset = offsets;
    nj_vs_output out;
    if (nj_view_synthesis_loss(g, &cfg, &in, &out) || nj_backward(g, out.total)) {
        check(0, name, "%s", nj_graph_error(g));
        ref_rmtree(dir);
        return;
    }
    nj_tensor *mask = losses_ref_tensor(g, dir, "mask0", 0);
    char tn[160];
    snprintf(tn, sizeof tn, "%s auto-mask vs PyTorch", mode);
    compare(tn, out.automask->data, mask->data, nj_numel(mask), 0);
    snprintf(tn, sizeof tn, "%s value vs PyTorch", mode);
    compare(tn, out.total->data, total->data, 1, 1e-4);
    for (int s = 0; s < 4; s++) {
        snprintf(nm, sizeof nm, "gdisp%d", s);
        nj_tensor *r = losses_ref_tensor(g, dir, nm, 0);
        snprintf(tn, sizeof tn, "%s d(loss)/d(disparity scale %d) vs PyTorch", mode, s);
        compare(tn, in.disp[s]->grad, r->data, nj_numel(r), 1e-4);
    }
    for (int i = 0; i < nsrc; i++) {
        snprintf(nm, sizeof nm, "gpose%d", i);
        nj_tensor *r = losses_ref_tensor(g, dir, nm, 0);
        snprintf(tn, sizeof tn, "%s d(loss)/d(pose %d) vs PyTorch", mode, i);
        compare(tn, pv[i]->grad, r->data, nj_numel(r), 1e-4);
    }
    ref_rmtree(dir);
}

/* Mean photometric error of the right image warped into the left with
 * disparity disp + offset, over pixels flagged in `use`. */
static double stereo_error(nj_graph *g, nj_tensor *left, nj_tensor *right, const nj_tensor *disp,
                           const unsigned char *use, float offset)
{
    const float fx = 500.0f, baseline = 0.2f;   /* any values: only fx·B/Z = d matters */
    int H = left->h, W = left->w;
    nj_tensor *depth = nj_tensor_new(g, 1, 1, H, W, 0);
    for (int i = 0; i < H * W; i++) {
        float d = disp->data[i] > 0 ? disp->data[i] + offset : offset;
        depth->data[i] = d > 1e-3f ? fx * baseline / d : 1e6f;
    }
    nj_camera cam = {fx, fx, (W - 1) / 2.0f, (H - 1) / 2.0f};
    float tx = -baseline;
    nj_tensor *T = nj_pose_stereo(g, 1, &tx);
    nj_tensor *warped = nj_sample_bilinear(g, right, nj_reproject(g, depth, T, &cam, NULL));
    nj_tensor *pe = nj_photometric_error(g, warped, left, 0.85f);   /* α = 0.85: Godard et al. 2017's common choice */
    if (!pe) return NAN;
    double s = 0; long n = 0;
    for (int i = 0; i < H * W; i++)
        if (use[i]) { s += pe->data[i]; n++; }
    return n ? s / n : NAN;
}

/* Middlebury 2014 motorcycle pair (Scharstein et al. 2014, quarter size, via
 * scikit-image): the true disparity must explain the pair far better than
 * zero or shifted disparities, and a sweep of offsets must bottom out at 0. */
static void test_motorcycle(nj_graph *g)
{
    const char *name = "Middlebury motorcycle: true disparity warps right into left";
    char dir[4096];
    if (losses_ref_run("motorcycle", dir, sizeof dir, name)) return;
    nj_graph_reset(g);
    nj_graph_set_grad(g, 0);
    nj_tensor *left = losses_ref_tensor(g, dir, "left", 0), *right = losses_ref_tensor(g, dir, "right", 0);
    nj_tensor *disp = losses_ref_tensor(g, dir, "disp", 0);
    if (!left || !right || !disp) { ref_rmtree(dir); nj_graph_set_grad(g, 1); return; }
    int H = left->h, W = left->w;
    unsigned char *use = nj_graph_alloc(g, (size_t)H * W);
    long count = 0;
    for (int y = 0; y < H; y++)
        for (int x = 0; x < W; x++) {
            float d = disp->data[y * W + x];   /* 0 = unknown in the ground truth */
            use[y * W + x] = d > 0 && x - d - 3 >= 1 && x - d + 3 <= W - 2;
            count += use[y * W + x];
        }
    double e_true = stereo_error(g, left, right, disp, use, 0.0f);
    nj_tensor *zero = nj_tensor_new(g, 1, 1, H, W, 0);
    memset(zero->data, 0, sizeof(float) * (size_t)H * W);
    double e_zero = stereo_error(g, left, right, zero, use, 0.0f);
    double e_plus = stereo_error(g, left, right, disp, use, 3.0f);
    double e_minus = stereo_error(g, left, right, disp, use, -3.0f);
    check(count > H * W / 2 && e_true < 0.5 * e_zero && e_true < 0.75 * e_plus && e_true < 0.75 * e_minus, name,
          "%ld pixels; error true %.4f, zero %.4f, +3px %.4f, -3px %.4f", count, e_true, e_zero, e_plus, e_minus);
    float best = 99;
    double best_e = INFINITY;
    for (int k = -12; k <= 12; k++) {
        double e = stereo_error(g, left, right, disp, use, k * 0.25f);
        if (e < best_e) { best_e = e; best = k * 0.25f; }
    }
    printf("  motorcycle: error true %.4f zero %.4f +3px %.4f -3px %.4f; sweep minimum at %+.2f px\n",
           e_true, e_zero, e_plus, e_minus, best);
    check(fabsf(best) <= 0.5f, "Middlebury motorcycle: offset sweep minimum at 0 +- 0.5 px",
          "minimum at %+.2f px (error %.4f)", best, best_e);
    nj_graph_set_grad(g, 1);
    ref_rmtree(dir);
}

/* Runs the reference script's `mode` and loads its tensor `tensor` (no
 * gradient); NULL on failure (reported, the folder removed). */
static nj_tensor *ref_result(nj_graph *g, const char *mode, const char *tensor, const char *name, char *dir,
                             size_t len)
{
    if (losses_ref_run(mode, dir, len, name)) return NULL;
    nj_graph_reset(g);
    nj_tensor *t = losses_ref_tensor(g, dir, tensor, 0);
    if (!t) ref_rmtree(dir);
    return t;
}

/* Intrinsics under resize and crop vs where OpenCV's INTER_AREA resize puts
 * a sub-pixel dot: a point projecting onto the dot at full size must project
 * onto the dot's centroid in the resized (and then cropped) image. */
static void test_camera(nj_graph *g)
{
    const char *name = "camera intrinsics resize+crop vs OpenCV INTER_AREA dot centroid";
    char dir[4096];
    nj_tensor *d = ref_result(g, "camera", "dot", name, dir, sizeof dir);
    if (!d) return;
    const float *v = d->data;
    nj_camera c = {200.0f, 190.0f, 160.2f, 119.7f};
    float Z = 7.0f, X = (v[0] - c.cx) / c.fx * Z, Y = (v[1] - c.cy) / c.fy * Z;
    nj_camera s = nj_camera_resize(c, 320, 240, 128, 96), k = nj_camera_crop(s, 20, 10);
    double e1 = fabs(s.fx * X / Z + s.cx - v[2]) + fabs(s.fy * Y / Z + s.cy - v[3]);
    double e2 = fabs(k.fx * X / Z + k.cx - v[4]) + fabs(k.fy * Y / Z + k.cy - v[5]);
    check(e1 < 0.02 && e2 < 0.02, name, "resized error %.4f px, cropped error %.4f px", e1, e2);
    ref_rmtree(dir);
}

/* The pose net's ray channels (nj_camera_rays) vs OpenCV's normalised image
 * coordinates of every pixel centre (undistortPoints without distortion). */
static void test_rays(nj_graph *g)
{
    const char *name = "camera rays vs OpenCV undistortPoints";
    char dir[4096];
    nj_tensor *r = ref_result(g, "rays", "rays", name, dir, sizeof dir);
    if (!r) return;
    int W = 24, H = 14;
    if (r->c != 2 || r->h != H || r->w != W) {
        check(0, name, "reference is %dx%dx%d, expected 2x%dx%d", r->c, r->h, r->w, H, W);
        ref_rmtree(dir);
        return;
    }
    float x[24 * 14], y[24 * 14];
    nj_camera_rays((nj_camera){20.5f, 18.25f, 13.7f, 5.2f}, W, H, x, y);
    double worst = 0;
    for (int i = 0; i < W * H; i++) {
        double e = fmax(fabs(x[i] - r->data[i]), fabs(y[i] - r->data[W * H + i]));
        worst = e > worst ? e : worst;
    }
    check(worst < 1e-6, name, "largest difference %.2e over %d pixels", worst, W * H);
    ref_rmtree(dir);
}

/* The free-space hinge's bounds (nj_ground_bound) against OpenCV's rays
 * intersected with two ground planes, and its value and gradient against
 * PyTorch autograd of the same formula. */
static void test_free_space(nj_graph *g)
{
    const char *name = "free-space bounds and hinge vs OpenCV rays and PyTorch";
    char dir[4096];
    if (losses_ref_run("free_space", dir, sizeof dir, name)) return;
    nj_graph_reset(g);
    nj_tensor *pl = losses_ref_tensor(g, dir, "planes", 0), *bd = losses_ref_tensor(g, dir, "bound", 0);
    nj_tensor *disp = losses_ref_tensor(g, dir, "disp", 1), *lv = losses_ref_tensor(g, dir, "loss", 0);
    nj_tensor *gr = losses_ref_tensor(g, dir, "grad", 0), *cm = losses_ref_tensor(g, dir, "camera", 0);
    if (!pl || !bd || !disp || !lv || !gr || !cm) {
        ref_rmtree(dir);
        return;
    }
    const float *c = cm->data;
    nj_camera cam = {c[0], c[1], c[2], c[3]};
    int W = (int)c[4], H = (int)c[5];
    size_t k = (size_t)W * H;
    float bound[2 * 20 * 12], rays[2 * 20 * 12];
    if (disp->n != 2 || k != 20 * 12 || disp->h != H || disp->w != W) {
        check(0, name, "reference shapes differ from the test's (%dx%d)", W, H);
        ref_rmtree(dir);
        return;
    }
    double worst = 0, big = 0;
    int bounded = 0;
    for (int i = 0; i < 2; i++) {
        const double n[3] = {pl->data[4 * i], pl->data[4 * i + 1], pl->data[4 * i + 2]};
        nj_ground_bound(n, pl->data[4 * i + 3], cam, W, H, c[6], c[9], rays, bound + i * k);
    }
    for (size_t p = 0; p < 2 * k; p++) {
        worst = fmax(worst, fabs(bound[p] - bd->data[p]));
        big = fmax(big, bd->data[p]);
        bounded += bd->data[p] > 0;
    }
    check(worst <= 1e-6 * big && bounded > 0 && bounded < (int)(2 * k), "free-space bounds vs OpenCV rays",
          "largest difference %.2e (largest bound %.3g; %d of %zu pixels bounded)", worst, big, bounded, 2 * k);
    float share = -1;
    nj_tensor *l = nj_free_space_loss(g, disp, (nj_depth_range){c[7], c[8]}, bd->data, &share);
    if (!l || nj_backward(g, l)) {
        check(0, name, "%s", nj_graph_error(g));
        ref_rmtree(dir);
        return;
    }
    double gw = 0, gmax = 0;
    for (size_t p = 0; p < 2 * k; p++) {
        gw = fmax(gw, fabs(disp->grad[p] - gr->data[p]));
        gmax = fmax(gmax, fabs(gr->data[p]));
    }
    checkv(fabs(l->data[0] - lv->data[0]) <= 1e-5 * lv->data[0] && fabs(share - lv->data[1]) < 1e-6 &&
               lv->data[1] > 0.1 && lv->data[1] < 0.9 && gw <= 1e-5 * gmax,
           "free-space hinge vs PyTorch autograd", "loss %.6f vs %.6f, share beyond %.4f vs %.4f, largest gradient "
           "difference %.2e (largest %.2e)", l->data[0], lv->data[0], share, lv->data[1], gw, gmax);
    ref_rmtree(dir);
}

int main(void)
{
    nj_threads_init(0);
    nj_graph *g = nj_graph_new(16 << 20);
    test_ssim(g);
    test_sample(g);
    test_rotation(g);
    test_vsloss(g, "vsloss", 0.0f, 0);
    test_vsloss(g, "vsloss_guard", 0.05f, 0);
    test_vsloss(g, "vsloss_offsets", 0.0f, 1);
    test_motorcycle(g);
    test_camera(g);
    test_rays(g);
    test_free_space(g);
    nj_graph_free(g);
    return test_exit();
}

/* tests/test_grad_spatial.c — spatial ops (conv2d, upsample2, resize_bilinear,
 * concat, slice_channels, reflect_pad, avgpool3, global_avgpool).
 *
 * Sources of truth:
 *  - finite differences (tests/gradcheck.h) for every op's gradient, in the
 *    configurations the networks use and the edge cases of the index maps;
 *  - the ops' documented shape contracts (nn/ops.h) for the error checks;
 *  - the op itself run with 1 OpenMP thread for the thread-count check.
 * Conv is linear in x and in w separately, so its central differences are
 * exact for any step: the larger convs use a large step to stay far above the
 * float32 noise floor of the loss.
 */
#include "nn/ops.h"
#include "tests/check.h"
#include "tests/gradcheck.h"
#include <math.h>
#include <omp.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* ---- conv2d gradient checks ------------------------------------------- */

typedef struct conv_case {
    const char *name;
    int n, cin, h, w, cout, kh, kw, stride, pad;
    nj_pad_mode mode;
    int bias;
    float eps;
} conv_case;

static nj_tensor *build_conv(nj_graph *g, nj_tensor *const *in, void *ctx)
{
    const conv_case *c = ctx;
    return nj_conv2d(g, in[0], in[1], c->bias ? in[2] : NULL, c->stride, c->pad, c->mode);
}

static void check_conv(const conv_case *c)
{
    gc_spec s = {0};
    s.nin = c->bias ? 3 : 2;
    int shapes[3][4] = {{c->n, c->cin, c->h, c->w}, {c->cout, c->cin, c->kh, c->kw},
                        {1, c->cout, 1, 1}};
    memcpy(s.shape, shapes, sizeof shapes);
    s.eps = c->eps;
    s.seed = (unsigned)(c->h * 131 + c->w * 17 + c->kh * 7 + c->stride);
    gradcheck(c->name, build_conv, (void *)c, &s);
}

static void test_conv_grads(void)
{
    static const conv_case cases[] = {
        {"conv 3x3 zero pad odd size bias", 1, 3, 7, 5, 4, 3, 3, 1, 1, NJ_PAD_ZERO, 1, 0},
        {"conv 3x3 reflect pad batch 2 no bias", 2, 2, 6, 7, 3, 3, 3, 1, 1, NJ_PAD_REFLECT, 0, 0},
        {"conv 3x3 no pad", 1, 2, 6, 5, 3, 3, 3, 1, 0, NJ_PAD_ZERO, 1, 0},
        {"conv 3x3 stride 2 zero pad odd size", 1, 2, 7, 9, 3, 3, 3, 2, 1, NJ_PAD_ZERO, 1, 0},
        {"conv 3x3 stride 2 reflect pad even size", 2, 2, 8, 6, 2, 3, 3, 2, 1, NJ_PAD_REFLECT, 1, 0},
        {"conv 1x1 direct batch 2 bias", 2, 3, 4, 5, 4, 1, 1, 1, 0, NJ_PAD_ZERO, 1, 0},
        {"conv 1x1 direct no bias", 1, 5, 3, 3, 2, 1, 1, 1, 0, NJ_PAD_ZERO, 0, 0},
        {"conv 1x1 stride 2", 1, 3, 5, 7, 2, 1, 1, 2, 0, NJ_PAD_ZERO, 1, 0},
        {"conv 7x7 stride 2 reflect pad 3", 1, 2, 9, 11, 2, 7, 7, 2, 3, NJ_PAD_REFLECT, 1, 0},
        {"conv 7x7 stride 2 zero pad 3 batch 2", 2, 2, 8, 10, 2, 7, 7, 2, 3, NJ_PAD_ZERO, 0, 0},
        {"conv 3x5 kernel reflect pad 2", 1, 2, 5, 6, 2, 3, 5, 1, 2, NJ_PAD_REFLECT, 1, 0},
        {"conv 5x5 reflect pad 4 (wide reflection)", 1, 1, 5, 6, 2, 5, 5, 1, 4, NJ_PAD_REFLECT, 1, 0},
        /* Enough input channels that each sample is cut into several row
         * bands, so band edges and the two-phase dx scatter are exercised. */
        {"conv 3x3 reflect multi-band", 1, 120, 16, 12, 2, 3, 3, 1, 1, NJ_PAD_REFLECT, 1, 0.25f},
        {"conv 3x3 stride 2 zero multi-band", 1, 128, 72, 8, 2, 3, 3, 2, 1, NJ_PAD_ZERO, 1, 0.25f},
        {"conv 7x7 stride 2 reflect multi-band batch 2", 2, 24, 46, 14, 2, 7, 7, 2, 3,
         NJ_PAD_REFLECT, 1, 0.25f},
        {"conv 1x1 direct multi-band", 1, 1100, 20, 6, 2, 1, 1, 1, 0, NJ_PAD_ZERO, 0, 0.25f},
        /* stride-1 convs that take the register-blocked kernels (nn/conv_direct.c):
         * up to 128 output channels; channel counts that use every block size
         * (16, 8, 4, 1), reflection/zero padding, several bands */
        {"conv direct 3x3 zero cout 5 (blocks 4+1) batch 2", 2, 3, 6, 45, 5, 3, 3, 1, 1,
         NJ_PAD_ZERO, 1, 0.25f},
        {"conv direct 3x3 reflect cout 24 (blocks 16+8) multi-band", 1, 2, 21, 40, 24, 3, 3, 1, 1,
         NJ_PAD_REFLECT, 0, 0.25f},
        {"conv direct 3x3 reflect cout 17 rows 2", 1, 2, 2, 41, 17, 3, 3, 1, 1,
         NJ_PAD_REFLECT, 1, 0.25f},
        {"conv direct head 3x3 reflect cout 1 narrow", 2, 4, 7, 12, 1, 3, 3, 1, 1,
         NJ_PAD_REFLECT, 1, 0},
        {"conv direct 3x3 zero pad 2", 1, 2, 5, 40, 4, 3, 3, 1, 2, NJ_PAD_ZERO, 1, 0.25f},
        {"conv direct 5x5 reflect pad 2", 1, 2, 6, 41, 3, 5, 5, 1, 2, NJ_PAD_REFLECT, 1, 0.25f},
        /* stride 2 (phase planes) for the pose net's 7×7 and 5×5 kernels: ≥ 40 output columns */
        {"conv direct 7x7 stride 2 zero pad 3 batch 2", 2, 2, 9, 83, 5, 7, 7, 2, 3, NJ_PAD_ZERO, 1,
         0.25f},
        {"conv direct 7x7 stride 2 reflect pad 3 even size", 1, 3, 10, 80, 17, 7, 7, 2, 3,
         NJ_PAD_REFLECT, 0, 0.25f},
        {"conv direct 5x5 stride 2 reflect pad 2 multi-band", 1, 2, 40, 81, 8, 5, 5, 2, 2,
         NJ_PAD_REFLECT, 1, 0.25f},
        {"conv direct 5x5 stride 2 zero pad 2 odd", 1, 2, 7, 85, 3, 5, 5, 2, 2, NJ_PAD_ZERO, 1, 0.25f},
        /* the weight gradient along output channels (≥ 16): vectors of 32 + 16
         * channels, groups of 9 combinations that span input channels (5×5),
         * small maps, and the 3×3 stride-2 backward pass */
        {"conv direct 3x3 reflect small map cout 40 (dW 32+16)", 2, 3, 6, 20, 40, 3, 3, 1, 1,
         NJ_PAD_REFLECT, 1, 0.25f},
        {"conv direct 5x5 reflect cout 16 (dW groups span channels)", 1, 3, 5, 12, 16, 5, 5, 1, 2,
         NJ_PAD_REFLECT, 0, 0.25f},
        {"conv 3x3 stride 2 zero backward direct cout 33", 2, 2, 9, 22, 33, 3, 3, 2, 1, NJ_PAD_ZERO,
         1, 0.25f},
        /* forward direct too: 3×3 stride 2 from ≥ 32 channels onto ≥ 64
         * positions, and stride 1 beyond 128 outputs on ≥ 64 positions */
        {"conv direct 3x3 stride 2 zero cin 32 (forward direct)", 1, 32, 16, 20, 8, 3, 3, 2, 1,
         NJ_PAD_ZERO, 1, 0.25f},
        {"conv direct 3x3 reflect cout 136 on 8x12", 1, 2, 8, 12, 136, 3, 3, 1, 1, NJ_PAD_REFLECT, 1,
         0.25f},
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) check_conv(&cases[i]);
}

/* ---- other spatial ops ------------------------------------------------- */

typedef struct resize_case { int oh, ow; } resize_case;

static nj_tensor *build_resize(nj_graph *g, nj_tensor *const *in, void *ctx)
{
    const resize_case *r = ctx;
    return nj_resize_bilinear(g, in[0], r->oh, r->ow);
}

static nj_tensor *build_upsample(nj_graph *g, nj_tensor *const *in, void *ctx)
{
    (void)ctx;
    return nj_upsample2(g, in[0]);
}

static nj_tensor *build_concat(nj_graph *g, nj_tensor *const *in, void *ctx)
{
    (void)ctx;
    return nj_concat(g, in[0], in[1]);
}

static nj_tensor *build_slice(nj_graph *g, nj_tensor *const *in, void *ctx)
{
    const int *range = ctx;
    return nj_slice_channels(g, in[0], range[0], range[1]);
}

static nj_tensor *build_pad(nj_graph *g, nj_tensor *const *in, void *ctx)
{
    return nj_reflect_pad(g, in[0], *(const int *)ctx);
}

static nj_tensor *build_avgpool3(nj_graph *g, nj_tensor *const *in, void *ctx)
{
    (void)ctx;
    return nj_avgpool3(g, in[0]);
}

static nj_tensor *build_gap(nj_graph *g, nj_tensor *const *in, void *ctx)
{
    (void)ctx;
    return nj_global_avgpool(g, in[0]);
}

static void one_input(const char *name, gc_build b, void *ctx, int n, int c, int h, int w)
{
    gc_spec s = {0};
    s.nin = 1;
    s.shape[0][0] = n; s.shape[0][1] = c; s.shape[0][2] = h; s.shape[0][3] = w;
    s.seed = (unsigned)(n * 1000 + c * 100 + h * 10 + w);
    gradcheck(name, b, ctx, &s);
}

static void test_resample_grads(void)
{
    static resize_case up = {8, 11}, down = {4, 6}, mixed = {13, 3}, same = {5, 7};
    one_input("resize up 5x7->8x11 (ratios 1.6, 1.57)", build_resize, &up, 2, 2, 5, 7);
    one_input("resize down 9x11->4x6 (ratios 0.44, 0.55)", build_resize, &down, 1, 2, 9, 11);
    one_input("resize mixed 6x8->13x3", build_resize, &mixed, 1, 3, 6, 8);
    one_input("resize same size 5x7", build_resize, &same, 1, 2, 5, 7);
    one_input("upsample2", build_upsample, NULL, 2, 2, 3, 5);
    static int p1 = 1, p3 = 3;
    one_input("reflect_pad 1", build_pad, &p1, 2, 2, 4, 5);
    one_input("reflect_pad 3 on 4x5", build_pad, &p3, 1, 2, 4, 5);
    one_input("avgpool3", build_avgpool3, NULL, 2, 2, 5, 6);
    one_input("global_avgpool", build_gap, NULL, 2, 3, 4, 5);
    static int mid[2] = {1, 2}, all[2] = {0, 4};
    one_input("slice_channels [1,3) of 4", build_slice, mid, 2, 4, 3, 3);
    one_input("slice_channels all 4", build_slice, all, 1, 4, 2, 3);

    gc_spec s = {0};
    s.nin = 2;
    int shapes[2][4] = {{2, 3, 4, 5}, {2, 2, 4, 5}};
    memcpy(s.shape, shapes, sizeof shapes);
    s.seed = 5;
    gradcheck("concat 3+2 channels batch 2", build_concat, NULL, &s);
    s.no_grad[0] = 1;
    gradcheck("concat with first input gradient-free", build_concat, NULL, &s);
}

/* ---- shape errors ------------------------------------------------------ */

/* The op returned NULL, the graph failed, and the message names the op and
 * contains each of the given shape strings. */
static void expect_error(const char *name, nj_graph *g, nj_tensor *y, const char *op,
                         const char *shape1, const char *shape2)
{
    const char *msg = nj_graph_error(g);
    int ok = y == NULL && nj_graph_failed(g) && strstr(msg, op) != NULL &&
             strstr(msg, shape1) != NULL && (!shape2 || strstr(msg, shape2) != NULL);
    check(ok, name, "returned %p, message \"%s\"", (void *)y, msg);
    nj_graph_reset(g);
}

static void test_shape_errors(void)
{
    nj_graph *g = nj_graph_new(1 << 20);
    nj_tensor *x = nj_tensor_new(g, 2, 3, 5, 5, 1), *w = nj_tensor_new(g, 4, 2, 3, 3, 1);
    expect_error("conv mismatched Cin is an error", g,
                 nj_conv2d(g, x, w, NULL, 1, 1, NJ_PAD_ZERO), "conv2d", "2x3x5x5", "4x2x3x3");

    x = nj_tensor_new(g, 2, 3, 5, 5, 1); w = nj_tensor_new(g, 4, 3, 3, 3, 1);
    nj_tensor *b = nj_tensor_new(g, 1, 3, 1, 1, 1);
    expect_error("conv bias of wrong size is an error", g,
                 nj_conv2d(g, x, w, b, 1, 1, NJ_PAD_ZERO), "conv2d", "1x3x1x1", "4x3x3x3");

    x = nj_tensor_new(g, 2, 3, 5, 5, 1); w = nj_tensor_new(g, 4, 3, 3, 3, 1);
    expect_error("conv stride 3 is an error", g,
                 nj_conv2d(g, x, w, NULL, 3, 1, NJ_PAD_ZERO), "conv2d", "2x3x5x5", NULL);

    x = nj_tensor_new(g, 1, 3, 5, 4, 1); w = nj_tensor_new(g, 4, 3, 3, 3, 1);
    expect_error("conv reflection pad >= W is an error", g,
                 nj_conv2d(g, x, w, NULL, 1, 4, NJ_PAD_REFLECT), "conv2d", "1x3x5x4", NULL);

    x = nj_tensor_new(g, 1, 3, 2, 2, 1); w = nj_tensor_new(g, 4, 3, 5, 5, 1);
    expect_error("conv kernel larger than padded input is an error", g,
                 nj_conv2d(g, x, w, NULL, 1, 1, NJ_PAD_ZERO), "conv2d", "1x3x2x2", NULL);

    nj_tensor *a = nj_tensor_new(g, 1, 2, 4, 4, 1), *c = nj_tensor_new(g, 1, 2, 4, 5, 1);
    expect_error("concat mismatched W is an error", g, nj_concat(g, a, c), "concat",
                 "1x2x4x4", "1x2x4x5");

    a = nj_tensor_new(g, 1, 4, 3, 3, 1);
    expect_error("slice past the last channel is an error", g,
                 nj_slice_channels(g, a, 3, 2), "slice_channels", "1x4x3x3", NULL);

    a = nj_tensor_new(g, 1, 2, 3, 8, 1);
    expect_error("reflect_pad >= H is an error", g, nj_reflect_pad(g, a, 3), "reflect_pad",
                 "1x2x3x8", NULL);

    a = nj_tensor_new(g, 1, 2, 2, 8, 1);
    expect_error("avgpool3 on H < 3 is an error", g, nj_avgpool3(g, a), "avgpool3", "1x2x2x8", NULL);

    a = nj_tensor_new(g, 1, 2, 4, 4, 1);
    expect_error("resize to 0 rows is an error", g, nj_resize_bilinear(g, a, 0, 3),
                 "resize_bilinear", "1x2x4x4", NULL);

    /* Errors are sticky: a later op on a failed graph returns NULL. */
    a = nj_tensor_new(g, 1, 2, 4, 4, 1);
    nj_tensor *bad = nj_reflect_pad(g, a, 9);
    nj_tensor *up = nj_upsample2(g, bad);
    nj_tensor *pool = nj_global_avgpool(g, a);
    check(bad == NULL && up == NULL && pool == NULL && strstr(nj_graph_error(g), "reflect_pad"),
          "errors are sticky across later ops", "bad %p up %p pool %p, message \"%s\"",
          (void *)bad, (void *)up, (void *)pool, nj_graph_error(g));
    nj_graph_free(g);
}

/* ---- threads and accumulation ----------------------------------------- */

typedef struct conv_run { float *y, *dx, *dw, *db; size_t ny, nx, nw, nb; } conv_run;

/* Forward, then backward seeded with r; grads start at `grad0` everywhere. */
static int run_conv(const conv_case *c, int threads, float grad0, conv_run *out)
{
    omp_set_num_threads(threads);
    nj_graph *g = nj_graph_new(1 << 22);
    size_t nx = (size_t)c->n * c->cin * c->h * c->w, nw = (size_t)c->cout * c->cin * c->kh * c->kw;
    float *xv = malloc(nx * sizeof(float)), *wv = malloc(nw * sizeof(float));
    float bv[256]; /* cout of every case ≤ 256 */
    test_fill_uniform(xv, nx, -1, 1, 11);
    test_fill_uniform(wv, nw, -1, 1, 12);
    test_fill_uniform(bv, (size_t)c->cout, -1, 1, 13);
    nj_tensor *x = nj_tensor_from(g, c->n, c->cin, c->h, c->w, xv, 1);
    nj_tensor *w = nj_tensor_from(g, c->cout, c->cin, c->kh, c->kw, wv, 1);
    nj_tensor *b = nj_tensor_from(g, 1, c->cout, 1, 1, bv, 1);
    float *gx = nj_tensor_grad(x), *gw = nj_tensor_grad(w), *gb = nj_tensor_grad(b);
    for (size_t i = 0; i < nx; i++) gx[i] = grad0;
    for (size_t i = 0; i < nw; i++) gw[i] = grad0;
    for (int i = 0; i < c->cout; i++) gb[i] = grad0;
    nj_tensor *y = nj_conv2d(g, x, w, b, c->stride, c->pad, c->mode);
    int ok = y != NULL;
    if (ok) {
        float *r = malloc(nj_numel(y) * sizeof(float));
        test_fill_uniform(r, nj_numel(y), -1, 1, 14);
        ok = nj_backward_seeded(g, y, r) == 0;
        free(r);
        out->ny = nj_numel(y); out->nx = nx; out->nw = nw; out->nb = (size_t)c->cout;
        out->y = malloc(out->ny * sizeof(float));
        out->dx = malloc(nx * sizeof(float));
        out->dw = malloc(nw * sizeof(float));
        out->db = malloc(out->nb * sizeof(float));
        memcpy(out->y, y->data, out->ny * sizeof(float));
        memcpy(out->dx, x->grad, nx * sizeof(float));
        memcpy(out->dw, w->grad, nw * sizeof(float));
        memcpy(out->db, b->grad, out->nb * sizeof(float));
    }
    free(xv); free(wv);
    nj_graph_free(g);
    return ok;
}

static void free_run(conv_run *r) { free(r->y); free(r->dx); free(r->dw); free(r->db); }

/* Largest |a - (b + shift)| relative to the largest |a|. */
static double rel_diff(const float *a, const float *b, size_t n, float shift)
{
    double d = 0, m = 1e-30;
    for (size_t i = 0; i < n; i++) {
        d = fmax(d, fabs((double)a[i] - ((double)b[i] + shift)));
        m = fmax(m, fabs((double)a[i]));
    }
    return d / m;
}

static double run_diff(const conv_run *a, const conv_run *b, float shift)
{
    double d = rel_diff(a->dx, b->dx, a->nx, shift);
    d = fmax(d, rel_diff(a->dw, b->dw, a->nw, shift));
    d = fmax(d, rel_diff(a->db, b->db, a->nb, shift));
    return shift == 0 ? fmax(d, rel_diff(a->y, b->y, a->ny, 0)) : d;
}

static void test_threads_and_accumulation(void)
{
    static const conv_case cases[] = {
        {"3x3 reflect batch 2", 2, 16, 40, 48, 16, 3, 3, 1, 1, NJ_PAD_REFLECT, 1, 0},
        {"3x3 stride 2 batch 1", 1, 16, 160, 40, 8, 3, 3, 2, 1, NJ_PAD_ZERO, 1, 0},
        {"3x3 reflect one-row bands", 1, 128, 24, 64, 4, 3, 3, 1, 1, NJ_PAD_REFLECT, 0, 0},
        {"1x1 direct batch 1", 1, 32, 48, 64, 16, 1, 1, 1, 0, NJ_PAD_ZERO, 1, 0},
        {"direct 3x3 zero batch 3 cout 40", 3, 24, 37, 70, 40, 3, 3, 1, 1, NJ_PAD_ZERO, 1, 0},
        {"direct head 3x3 reflect cout 1", 4, 16, 50, 96, 1, 3, 3, 1, 1, NJ_PAD_REFLECT, 1, 0},
        {"direct 7x7 stride 2 reflect batch 3", 3, 6, 48, 100, 16, 7, 7, 2, 3, NJ_PAD_REFLECT, 1, 0},
        {"direct 5x5 reflect cin 7 cout 20 (dW split mid-channel)", 2, 7, 19, 44, 20, 5, 5, 1, 2,
         NJ_PAD_REFLECT, 1, 0},
        {"direct 3x3 reflect small map cin 96 cout 128", 4, 96, 6, 20, 128, 3, 3, 1, 1,
         NJ_PAD_REFLECT, 1, 0},
        {"3x3 stride 2 zero direct cout 64", 3, 32, 24, 80, 64, 3, 3, 2, 1, NJ_PAD_ZERO, 1, 0},
        {"direct 3x3 reflect cin 64 cout 144 on 6x20", 2, 64, 6, 20, 144, 3, 3, 1, 1, NJ_PAD_REFLECT,
         1, 0},
    };
    int saved = omp_get_max_threads();
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        const conv_case *c = &cases[i];
        conv_run one, two, acc;
        int ok = run_conv(c, 1, 0, &one) && run_conv(c, 2, 0, &two);
        double d = ok ? run_diff(&one, &two, 0) : INFINITY;
        char name[160];
        snprintf(name, sizeof name, "conv %s: 1 and 2 threads agree", c->name);
        check(ok && d <= 1e-5, name, "max relative difference %.3g (limit 1e-5)", d);
        /* Backward must add to existing gradients: starting at 0.5 gives 0.5 more. */
        snprintf(name, sizeof name, "conv %s: backward accumulates into grads", c->name);
        int ok2 = ok && run_conv(c, 2, 0.5f, &acc);
        double d2 = ok2 ? run_diff(&acc, &two, 0.5f) : INFINITY;
        check(ok2 && d2 <= 1e-5, name, "max relative difference %.3g from grads + 0.5", d2);
        if (ok) { free_run(&one); free_run(&two); }
        if (ok2) free_run(&acc);
    }
    omp_set_num_threads(saved);
}

int main(void)
{
    nj_threads_init(0);
    test_conv_grads();
    test_resample_grads();
    test_shape_errors();
    test_threads_and_accumulation();
    return test_exit();
}

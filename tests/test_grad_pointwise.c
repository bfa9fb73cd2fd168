/* tests/test_grad_pointwise.c — gradients of the pointwise, broadcasting,
 * reduction and normalisation ops checked against central finite differences
 * (tests/gradcheck.h), plus forward values of the unary and binary ops
 * against the C library / C arithmetic in double, shape-error messages,
 * numerical stability of the sigmoid at large |x|, the running-variance
 * convention of batch norm (Bessel's correction) and batch-norm folding
 * (checked against nj_conv2d followed by inference-mode nj_batchnorm).
 *
 * Inputs near a kink (relu, abs, clamp, minimum) would make finite
 * differences meaningless, so those ops see x + offset, where x is small and
 * the constant offset pattern keeps every value at least 0.1 from the kink
 * on both sides of it. */
#include "nn/ops.h"
#include "tests/check.h"
#include "tests/gradcheck.h"
#include <math.h>
#include <stdio.h>
#include <string.h>

/* Shapes: small ones keep the finite differences exact; "big" ones
 * (18432 elements) exceed the ops' one-thread threshold, so the OpenMP paths
 * are checked too. */
#define SMALL 2, 3, 4, 5
#define BIG 2, 4, 48, 48

static void set_shape(gc_spec *s, int k, int n, int c, int h, int w)
{
    s->shape[k][0] = n; s->shape[k][1] = c; s->shape[k][2] = h; s->shape[k][3] = w;
}

/* A constant (gradient-free) tensor shaped like t, cycling through pattern. */
static nj_tensor *offsets_like(nj_graph *g, const nj_tensor *t, const float *pattern, int np)
{
    nj_tensor *o = nj_tensor_new(g, t->n, t->c, t->h, t->w, 0);
    if (!o) return NULL;
    for (size_t i = 0; i < nj_numel(o); i++) o->data[i] = pattern[i % (size_t)np];
    return o;
}

/* ---- unary ops ---------------------------------------------------------- */
typedef nj_tensor *(*unary_fn)(nj_graph *, nj_tensor *);
typedef struct { unary_fn fn; const float *pattern; int np; } unary_ctx;

static nj_tensor *build_unary(nj_graph *g, nj_tensor *const *in, void *ctx)
{
    const unary_ctx *u = ctx;
    nj_tensor *x = in[0];
    if (u->pattern) x = nj_add(g, x, offsets_like(g, x, u->pattern, u->np));
    return u->fn(g, x);
}

static nj_tensor *clamp_half(nj_graph *g, nj_tensor *x) { return nj_clamp(g, x, -0.5f, 0.5f); }
static nj_tensor *affine_fixed(nj_graph *g, nj_tensor *x) { return nj_affine(g, x, -1.5f, 0.3f); }

static void unary_case(const char *name, unary_fn fn, float lo, float hi,
                       const float *pattern, int np)
{
    unary_ctx ctx = {fn, pattern, np};
    char label[96];
    gc_spec s = {.nin = 1, .lo = lo, .hi = hi, .seed = 11};
    set_shape(&s, 0, SMALL);
    snprintf(label, sizeof label, "%s: finite-difference gradient 2x3x4x5", name);
    gradcheck(label, build_unary, &ctx, &s);
    set_shape(&s, 0, BIG);
    s.seed = 12;
    snprintf(label, sizeof label, "%s: finite-difference gradient 2x4x48x48 (threaded)", name);
    gradcheck(label, build_unary, &ctx, &s);
}

static void test_unary(void)
{
    static const float sides[] = {0.5f, -0.5f};             /* away from 0 */
    static const float clamp_zones[] = {-0.8f, 0.0f, 0.8f}; /* away from +-0.5 */
    unary_case("relu", nj_relu, -0.25f, 0.25f, sides, 2);
    unary_case("elu", nj_elu, -2.0f, 2.0f, NULL, 0);
    unary_case("sigmoid", nj_sigmoid, -4.0f, 4.0f, NULL, 0);
    unary_case("exp", nj_exp, -1.0f, 1.0f, NULL, 0);
    unary_case("log", nj_log, 0.5f, 2.0f, NULL, 0);
    unary_case("abs", nj_abs, -0.25f, 0.25f, sides, 2);
    unary_case("sqrt", nj_sqrt, 0.5f, 2.0f, NULL, 0);
    unary_case("clamp", clamp_half, -0.2f, 0.2f, clamp_zones, 3);
    unary_case("affine", affine_fixed, -1.0f, 1.0f, NULL, 0);
}

/* sigmoid at large |x| against 1 / (1 + exp(-x)) from libm in double: the
 * output must be finite and accurate to 1e-6 relative (or underflow below
 * 1e-38), the gradient finite and within 1e-7 (float's resolution of 1 - y
 * near y = 1). */
static void test_sigmoid_stability(void)
{
    static const float xs[] = {-100.0f, -40.0f, -15.0f, 0.0f, 15.0f, 40.0f, 100.0f};
    nj_graph *g = nj_graph_new(1 << 16);
    nj_tensor *x = nj_tensor_from(g, 1, 1, 1, 7, xs, 1);
    nj_tensor *y = nj_sigmoid(g, x);
    float seed[7] = {1, 1, 1, 1, 1, 1, 1};
    int ok = y && nj_backward_seeded(g, y, seed) == 0;
    double worst = 0;
    for (int i = 0; ok && i < 7; i++) {
        double ref = 1.0 / (1.0 + exp(-(double)xs[i]));
        double dref = ref * (1.0 - ref);
        ok = isfinite(y->data[i]) && isfinite(x->grad[i]);
        worst = fmax(worst, fabs(y->data[i] - ref) / (1e-6 * ref + 1e-38));
        worst = fmax(worst, fabs(x->grad[i] - dref) / 1e-7);
    }
    check(ok && worst <= 1.0, "sigmoid: finite and accurate at |x| up to 100 (libm exp in double)",
          "finite %d, worst error %g x tolerance", ok, worst);
    nj_graph_free(g);
}

/* Forward values against the C library in double: |y - ref| <= 1e-6 max(1, |ref|). */
typedef double (*ref_unary)(double);
static double ref_relu(double x) { return x > 0 ? x : 0; }
static double ref_elu(double x) { return x > 0 ? x : expm1(x); }
static double ref_sigmoid(double x) { return 1.0 / (1.0 + exp(-x)); }
static double ref_clamp_half(double x) { return fmin(fmax(x, -0.5), 0.5); }
static double ref_affine(double x) { return -1.5 * x + 0.3; }

static double fwd_err(double y, double ref) { return fabs(y - ref) / (1e-6 * fmax(1.0, fabs(ref))); }

static void forward_unary(const char *name, unary_fn fn, ref_unary ref, float lo, float hi)
{
    float x[120];
    test_fill_uniform(x, 120, lo, hi, 7);
    nj_graph *g = nj_graph_new(1 << 16);
    nj_tensor *y = fn(g, nj_tensor_from(g, SMALL, x, 0));
    double worst = y ? 0 : INFINITY;
    for (int i = 0; y && i < 120; i++) worst = fmax(worst, fwd_err(y->data[i], ref(x[i])));
    char label[96];
    snprintf(label, sizeof label, "%s: forward equals the C library in double on [%g, %g]", name, lo, hi);
    check(worst <= 1.0, label, "worst error %g x tolerance", worst);
    nj_graph_free(g);
}

static void test_forward_unary(void)
{
    forward_unary("relu", nj_relu, ref_relu, -2, 2);
    forward_unary("elu", nj_elu, ref_elu, -4, 4);
    forward_unary("sigmoid", nj_sigmoid, ref_sigmoid, -8, 8);
    forward_unary("exp", nj_exp, exp, -3, 3);
    forward_unary("log", nj_log, log, 0.01f, 10);
    forward_unary("abs", nj_abs, fabs, -2, 2);
    forward_unary("sqrt", nj_sqrt, sqrt, 0, 10);
    forward_unary("clamp", clamp_half, ref_clamp_half, -2, 2);
    forward_unary("affine", affine_fixed, ref_affine, -2, 2);
}

/* Gradient at exactly the kink follows the ops.h contract (as torch does). */
static void test_kink_conventions(void)
{
    const float zero[2] = {0.0f, 0.0f}, seed[2] = {1.0f, 1.0f};
    nj_graph *g = nj_graph_new(1 << 16);
    nj_tensor *x = nj_tensor_from(g, 1, 1, 1, 2, zero, 1);
    nj_tensor *y = nj_abs(g, x);
    nj_backward_seeded(g, y, seed);
    check(x->grad[0] == 0.0f && x->grad[1] == 0.0f, "abs: gradient at 0 is 0 (ops.h, torch.abs)",
          "got %g %g", x->grad[0], x->grad[1]);
    nj_graph_reset(g);
    nj_tensor *a = nj_tensor_from(g, 1, 1, 1, 2, zero, 1);
    nj_tensor *b = nj_tensor_from(g, 1, 1, 1, 2, zero, 1);
    y = nj_minimum(g, a, b);
    nj_backward_seeded(g, y, seed);
    check(a->grad[0] == 1.0f && b->grad[0] == 0.0f, "minimum: tie sends the gradient to a (ops.h)",
          "a grad %g, b grad %g", a->grad[0], b->grad[0]);
    nj_graph_free(g);
}

/* ---- binary ops with broadcasting --------------------------------------- */
typedef nj_tensor *(*binary_fn)(nj_graph *, nj_tensor *, nj_tensor *);
typedef struct { binary_fn fn; int kind; } binary_ctx;
enum { PLAIN, DIVIDE, MINIMUM };

static nj_tensor *build_binary(nj_graph *g, nj_tensor *const *in, void *ctx)
{
    static const float sides[] = {0.6f, -0.6f};
    const binary_ctx *b = ctx;
    nj_tensor *x = in[0], *y = in[1];
    if (b->kind == DIVIDE) y = nj_affine(g, y, 0.5f, 1.0f);   /* denominators in [0.5, 1.5] */
    if (b->kind == MINIMUM) x = nj_add(g, x, offsets_like(g, x, sides, 2)); /* |a - b| >= 0.1 */
    return b->fn(g, x, y);
}

static const int small_pairs[][2][4] = {
    {{2, 3, 4, 5}, {2, 3, 4, 5}}, /* same shape */
    {{2, 3, 4, 5}, {1, 3, 1, 1}}, /* per-channel */
    {{1, 3, 1, 1}, {2, 3, 4, 5}},
    {{2, 3, 4, 5}, {1, 1, 1, 1}}, /* scalar */
    {{1, 1, 1, 1}, {2, 3, 4, 5}},
    {{2, 3, 4, 5}, {2, 1, 4, 5}}, /* N×1×H×W */
    {{2, 1, 4, 5}, {2, 3, 4, 5}},
    {{1, 3, 1, 5}, {2, 1, 4, 1}}, /* both sides broadcast */
    {{2, 3, 4, 1}, {1, 1, 1, 5}},
    {{1, 1, 4, 5}, {2, 3, 1, 1}},
    {{2, 3, 1, 5}, {1, 3, 4, 5}},
};

static const int big_pairs[][2][4] = {
    {{BIG}, {BIG}},
    {{BIG}, {1, 4, 1, 1}},
    {{1, 1, 1, 1}, {BIG}},
    {{BIG}, {2, 1, 48, 48}},
    {{1, 4, 1, 48}, {2, 1, 48, 1}},
};

static const char *shape_str(const int *s, char *buf, size_t len)
{
    snprintf(buf, len, "%dx%dx%dx%d", s[0], s[1], s[2], s[3]);
    return buf;
}

static void binary_pair(const char *name, binary_ctx *ctx, const int (*p)[4], unsigned seed,
                        float lo, float hi, const char *tag)
{
    char label[160], sa[32], sb[32];
    gc_spec s = {.nin = 2, .lo = lo, .hi = hi, .seed = seed};
    set_shape(&s, 0, p[0][0], p[0][1], p[0][2], p[0][3]);
    set_shape(&s, 1, p[1][0], p[1][1], p[1][2], p[1][3]);
    snprintf(label, sizeof label, "%s: finite-difference gradient %s with %s%s", name,
             shape_str(p[0], sa, sizeof sa), shape_str(p[1], sb, sizeof sb), tag);
    gradcheck(label, build_binary, ctx, &s);
}

static void binary_case(const char *name, binary_fn fn, int kind)
{
    binary_ctx ctx = {fn, kind};
    const float lo = kind == MINIMUM ? -0.25f : -1.0f, hi = -lo;
    for (size_t i = 0; i < sizeof small_pairs / sizeof small_pairs[0]; i++)
        binary_pair(name, &ctx, small_pairs[i], 20u + (unsigned)i, lo, hi, "");
    for (size_t i = 0; i < sizeof big_pairs / sizeof big_pairs[0]; i++)
        binary_pair(name, &ctx, big_pairs[i], 40u + (unsigned)i, lo, hi, " (threaded)");
    /* Only b carries a gradient: a's backward must be skipped cleanly. */
    gc_spec s = {.nin = 2, .lo = lo, .hi = hi, .seed = 60, .no_grad = {1, 0}};
    set_shape(&s, 0, SMALL);
    set_shape(&s, 1, 1, 3, 1, 1);
    char label[96];
    snprintf(label, sizeof label, "%s: gradient of b alone (a without grad)", name);
    gradcheck(label, build_binary, &ctx, &s);
}

/* Forward values against C arithmetic in double, broadcasting by explicit
 * indexing (a size-1 dimension always reads index 0). */
static size_t bcast_index(const int *s, int n, int c, int h, int w)
{
    n = s[0] == 1 ? 0 : n; c = s[1] == 1 ? 0 : c; h = s[2] == 1 ? 0 : h; w = s[3] == 1 ? 0 : w;
    return (((size_t)n * s[1] + c) * s[2] + h) * s[3] + w;
}

static double ref_binary(int op, double u, double v)
{
    switch (op) {
    case 0: return u + v;
    case 1: return u - v;
    case 2: return u * v;
    case 3: return u / v;
    default: return fmin(u, v);
    }
}

static void forward_binary_pair(int op, const char *name, binary_fn fn, const int (*p)[4])
{
    float a[120], b[120];
    test_fill_uniform(a, 120, -2, 2, 8);
    test_fill_uniform(b, 120, 0.5f, 1.5f, 9); /* keeps div away from 0 */
    if (op != 3) for (int i = 0; i < 120; i++) b[i] = 2 * b[i] - 2; /* [-1, 1] otherwise */
    nj_graph *g = nj_graph_new(1 << 16);
    nj_tensor *y = fn(g, nj_tensor_from(g, p[0][0], p[0][1], p[0][2], p[0][3], a, 0),
                      nj_tensor_from(g, p[1][0], p[1][1], p[1][2], p[1][3], b, 0));
    double worst = y ? 0 : INFINITY;
    for (int n = 0; y && n < y->n; n++)
        for (int c = 0; c < y->c; c++)
            for (int h = 0; h < y->h; h++)
                for (int w = 0; w < y->w; w++) {
                    double ref = ref_binary(op, a[bcast_index(p[0], n, c, h, w)],
                                            b[bcast_index(p[1], n, c, h, w)]);
                    float got = y->data[(((size_t)n * y->c + c) * y->h + h) * y->w + w];
                    worst = fmax(worst, fwd_err(got, ref));
                }
    char label[128], sa[32], sb[32];
    snprintf(label, sizeof label, "%s: forward %s with %s equals C arithmetic in double", name,
             shape_str(p[0], sa, sizeof sa), shape_str(p[1], sb, sizeof sb));
    check(worst <= 1.0, label, "worst error %g x tolerance", worst);
    nj_graph_free(g);
}

static void test_forward_binary(void)
{
    static const binary_fn fns[] = {nj_add, nj_sub, nj_mul, nj_div, nj_minimum};
    static const char *const names[] = {"add", "sub", "mul", "div", "minimum"};
    for (int op = 0; op < 5; op++)
        for (size_t i = 0; i < sizeof small_pairs / sizeof small_pairs[0]; i++)
            forward_binary_pair(op, names[op], fns[op], small_pairs[i]);
}

/* The same tensor on both sides: both contributions must accumulate. */
static nj_tensor *build_square(nj_graph *g, nj_tensor *const *in, void *ctx)
{
    (void)ctx;
    return nj_mul(g, in[0], in[0]);
}

static nj_tensor *build_self_sub_add(nj_graph *g, nj_tensor *const *in, void *ctx)
{
    (void)ctx;
    return nj_add(g, nj_sub(g, in[0], nj_affine(g, in[0], 0.25f, 0.0f)), in[0]);
}

/* A broadcast operand feeding two ops: both reductions must accumulate. */
static nj_tensor *build_shared_broadcast(nj_graph *g, nj_tensor *const *in, void *ctx)
{
    (void)ctx;
    nj_tensor *t = nj_mul(g, in[0], in[1]);
    t = nj_div(g, nj_add(g, t, in[1]), nj_affine(g, in[2], 0.5f, 1.0f));
    return nj_sub(g, nj_mul(g, t, in[2]), in[2]);
}

static void test_binary(void)
{
    binary_case("add", nj_add, PLAIN);
    binary_case("sub", nj_sub, PLAIN);
    binary_case("mul", nj_mul, PLAIN);
    binary_case("div", nj_div, DIVIDE);
    binary_case("minimum", nj_minimum, MINIMUM);
    gc_spec s = {.nin = 1, .seed = 70};
    set_shape(&s, 0, SMALL);
    gradcheck("mul: x*x with the same tensor as both operands", build_square, NULL, &s);
    gradcheck("add/sub: the same tensor used three times", build_self_sub_add, NULL, &s);
    static const int shared[][4] = {{1, 3, 1, 1}, {1, 1, 1, 1}, {2, 1, 4, 5}, {1, 3, 4, 1}};
    char label[128];
    for (int i = 0; i < 4; i++) {
        gc_spec t = {.nin = 3, .seed = 71u + (unsigned)i};
        set_shape(&t, 0, SMALL);
        set_shape(&t, 1, shared[i][0], shared[i][1], shared[i][2], shared[i][3]);
        set_shape(&t, 2, shared[i][0], shared[i][1], shared[i][2], shared[i][3]);
        snprintf(label, sizeof label, "binary: broadcast %dx%dx%dx%d operands each used by two ops",
                 shared[i][0], shared[i][1], shared[i][2], shared[i][3]);
        gradcheck(label, build_shared_broadcast, NULL, &t);
    }
}

/* ---- reductions --------------------------------------------------------- */
typedef struct { int axes, mean; } reduce_ctx;

static nj_tensor *build_reduce(nj_graph *g, nj_tensor *const *in, void *ctx)
{
    const reduce_ctx *r = ctx;
    return r->mean ? nj_mean(g, in[0], r->axes) : nj_sum(g, in[0], r->axes);
}

static void test_reduce(void)
{
    char label[96];
    for (int mean = 0; mean < 2; mean++)
        for (int axes = 0; axes <= NJ_AXIS_ALL; axes++) {
            reduce_ctx ctx = {axes, mean};
            gc_spec s = {.nin = 1, .seed = 80u + (unsigned)axes};
            set_shape(&s, 0, SMALL);
            snprintf(label, sizeof label, "%s: finite-difference gradient, axis mask %d",
                     mean ? "mean" : "sum", axes);
            gradcheck(label, build_reduce, &ctx, &s);
        }
    /* Threaded paths; the ops are linear so a wide step is exact and keeps
     * the rounding of the large sums out of the estimate. */
    static const int big_axes[] = {NJ_AXIS_ALL, NJ_AXIS_N | NJ_AXIS_H | NJ_AXIS_W,
                                   NJ_AXIS_C | NJ_AXIS_H | NJ_AXIS_W, NJ_AXIS_N | NJ_AXIS_C,
                                   NJ_AXIS_W};
    for (int mean = 0; mean < 2; mean++)
        for (size_t i = 0; i < sizeof big_axes / sizeof big_axes[0]; i++) {
            reduce_ctx ctx = {big_axes[i], mean};
            gc_spec s = {.nin = 1, .seed = 100u + (unsigned)i, .eps = 0.1f};
            set_shape(&s, 0, BIG);
            snprintf(label, sizeof label, "%s: finite-difference gradient 2x4x48x48, axis mask %d (threaded)",
                     mean ? "mean" : "sum", big_axes[i]);
            gradcheck(label, build_reduce, &ctx, &s);
        }
}

/* Large normalisation groups: every output of the group moves when one input does, and the
 * float rounding of the shared statistics shifts them all coherently, so the
 * step grows to 1e-2 to stay well above that noise (truncation error of the
 * central difference is O(step^2) for these smooth ops). */
static float big_step(int n, int c, int h, int w)
{
    return n * c * h * w > (1 << 14) ? 1e-2f : 0.0f;
}

/* ---- batch norm ---------------------------------------------------------- */
typedef struct { int training, elu; float run_mean[8], run_var[8]; } bn_ctx;

static nj_tensor *build_bn(nj_graph *g, nj_tensor *const *in, void *ctx)
{
    bn_ctx *b = ctx;
    nj_graph_set_training(g, b->training);
    if (b->elu) return nj_batchnorm_elu(g, in[0], in[1], in[2], b->run_mean, b->run_var, 0.1f, 1e-5f);
    return nj_batchnorm(g, in[0], in[1], in[2], b->run_mean, b->run_var, 0.1f, 1e-5f);
}

static int bn_elu;   /* bn_case builds the fused batch norm + ELU */

static void bn_case(const char *label, int training, int n, int c, int h, int w,
                    const int *no_grad, unsigned seed)
{
    bn_ctx ctx = {.training = training, .elu = bn_elu};
    test_fill_uniform(ctx.run_mean, 8, -0.5f, 0.5f, seed + 1000u);
    test_fill_uniform(ctx.run_var, 8, 0.5f, 1.5f, seed + 2000u);
    gc_spec s = {.nin = 3, .seed = seed, .eps = big_step(n, c, h, w)};
    set_shape(&s, 0, n, c, h, w);
    set_shape(&s, 1, 1, c, 1, 1);
    set_shape(&s, 2, 1, c, 1, 1);
    if (no_grad) memcpy(s.no_grad, no_grad, 3 * sizeof(int));
    gradcheck(label, build_bn, &ctx, &s);
}

/* Momentum 1 makes the running statistics the batch's; then the inference
 * output must equal the training output times sqrt((m-1)/m) (eps 0), because
 * torch keeps the unbiased variance (Bessel's correction) while training
 * normalises with the biased one.  Momentum 0 must leave them untouched. */
static void test_bn_running_stats(void)
{
    enum { N = 2, C = 3, H = 4, W = 5, M = N * H * W };
    float x[N * C * H * W], gamma[C], beta[C], rm[C], rv[C];
    test_fill_uniform(x, sizeof x / sizeof x[0], -1.0f, 2.0f, 501);
    test_fill_uniform(gamma, C, 0.5f, 1.5f, 502);
    test_fill_uniform(beta, C, -1.0f, 1.0f, 503);
    nj_graph *g = nj_graph_new(1 << 16);
    for (int c = 0; c < C; c++) { rm[c] = 0.25f; rv[c] = 2.0f; }
    nj_tensor *xt = nj_tensor_from(g, N, C, H, W, x, 0);
    nj_tensor *gt = nj_tensor_from(g, 1, C, 1, 1, gamma, 0);
    nj_tensor *bt = nj_tensor_from(g, 1, C, 1, 1, beta, 0);
    nj_batchnorm(g, xt, gt, bt, rm, rv, 0.0f, 0.0f);
    int same = 1;
    for (int c = 0; c < C; c++) same &= rm[c] == 0.25f && rv[c] == 2.0f;
    check(same, "batchnorm: momentum 0 leaves running statistics unchanged (torch update rule)",
          "run_mean[0] %g run_var[0] %g", rm[0], rv[0]);
    nj_tensor *yt = nj_batchnorm(g, xt, gt, bt, rm, rv, 1.0f, 0.0f);
    nj_graph_set_training(g, 0);
    nj_tensor *yi = nj_batchnorm(g, xt, gt, bt, rm, rv, 1.0f, 0.0f);
    double worst = nj_graph_failed(g) ? INFINITY : 0;
    const double f = sqrt((M - 1.0) / M);
    for (int i = 0; yt && yi && i < N * C * H * W; i++) {
        int c = i / (H * W) % C;
        double ref = beta[c] + (yt->data[i] - beta[c]) * f;
        worst = fmax(worst, fabs(yi->data[i] - ref));
    }
    check(worst < 1e-5, "batchnorm: running variance is unbiased (inference = training x sqrt((m-1)/m))",
          "max deviation %g", worst);
    nj_graph_free(g);
}

/* The fused op must give exactly what nj_elu(nj_batchnorm(...)) gives (that
 * pair is checked against PyTorch in test_torch_nn): values, gradients of x,
 * gamma, beta and the running statistics, bit for bit. */
static void test_bn_elu_identical(void)
{
    enum { N = 2, C = 8, H = 33, W = 33, K = N * C * H * W };   /* threaded size */
    static float x[K], seed[K];
    float gamma[C], beta[C], rm[2][C], rv[2][C], *grads[2][3];
    test_fill_uniform(x, K, -2.0f, 2.0f, 601);
    test_fill_uniform(seed, K, -1.0f, 1.0f, 602);
    test_fill_uniform(gamma, C, 0.5f, 1.5f, 603);
    test_fill_uniform(beta, C, -0.5f, 0.5f, 604);
    nj_graph *gs[2] = {nj_graph_new(1 << 20), nj_graph_new(1 << 20)}, *g;
    nj_tensor *y[2];
    for (int v = 0; v < 2; v++) {
        g = gs[v];   /* one graph each: a backward replays its whole tape */
        for (int c = 0; c < C; c++) { rm[v][c] = 0.1f; rv[v][c] = 1.5f; }
        nj_tensor *xt = nj_tensor_from(g, N, C, H, W, x, 1), *gt = nj_tensor_from(g, 1, C, 1, 1, gamma, 1);
        nj_tensor *bt = nj_tensor_from(g, 1, C, 1, 1, beta, 1);
        y[v] = v ? nj_batchnorm_elu(g, xt, gt, bt, rm[v], rv[v], 0.1f, 1e-5f)
                 : nj_elu(g, nj_batchnorm(g, xt, gt, bt, rm[v], rv[v], 0.1f, 1e-5f));
        nj_backward_seeded(g, y[v], seed);
        grads[v][0] = xt->grad; grads[v][1] = gt->grad; grads[v][2] = bt->grad;
    }
    int same = !nj_graph_failed(gs[0]) && !nj_graph_failed(gs[1]) && !memcmp(y[0]->data, y[1]->data, sizeof x) &&
               !memcmp(grads[0][0], grads[1][0], sizeof x) && !memcmp(grads[0][1], grads[1][1], sizeof gamma) &&
               !memcmp(grads[0][2], grads[1][2], sizeof beta) && !memcmp(rm[0], rm[1], sizeof rm[0]) &&
               !memcmp(rv[0], rv[1], sizeof rv[0]);
    check(same, "batchnorm+ELU fused: bit-identical to nj_elu(nj_batchnorm()) (values, grads, running stats)",
          "differs (graph: %s %s)", nj_graph_error(gs[0]), nj_graph_error(gs[1]));
    nj_graph_free(gs[0]);
    nj_graph_free(gs[1]);
}

static void test_batchnorm(void)
{
    static const int only_x[3] = {0, 1, 1}, only_affine[3] = {1, 0, 0};
    bn_case("batchnorm: training, finite-difference gradient of x, gamma, beta 2x3x4x5", 1, SMALL, NULL, 120);
    bn_case("batchnorm: training, 4x3x1x1 (statistics over the batch only)", 1, 4, 3, 1, 1, NULL, 121);
    bn_case("batchnorm: training, 1x2x3x3 (single sample)", 1, 1, 2, 3, 3, NULL, 122);
    bn_case("batchnorm: training, gradient of x alone", 1, SMALL, only_x, 123);
    bn_case("batchnorm: training, gradient of gamma and beta alone", 1, SMALL, only_affine, 124);
    bn_case("batchnorm: inference, finite-difference gradient of x, gamma, beta 2x3x4x5", 0, SMALL, NULL, 125);
    bn_case("batchnorm: inference, gradient of x alone", 0, SMALL, only_x, 126);
    bn_case("batchnorm: training, 2x8x33x33 (threaded)", 1, 2, 8, 33, 33, NULL, 127);
    bn_case("batchnorm: inference, 2x8x33x33 (threaded)", 0, 2, 8, 33, 33, NULL, 128);
    test_bn_running_stats();
    bn_elu = 1;
    bn_case("batchnorm+ELU fused: training, finite-difference gradient of x, gamma, beta 2x3x4x5", 1, SMALL, NULL, 130);
    bn_case("batchnorm+ELU fused: inference, finite-difference gradient of x, gamma, beta 2x3x4x5", 0, SMALL, NULL, 131);
    bn_elu = 0;
    test_bn_elu_identical();
}

/* ---- group norm ---------------------------------------------------------- */
static nj_tensor *build_gn(nj_graph *g, nj_tensor *const *in, void *ctx)
{
    return nj_groupnorm(g, in[0], *(const int *)ctx, in[1], in[2], 1e-5f);
}

static void gn_case(int n, int c, int h, int w, int groups, unsigned seed)
{
    char label[96];
    gc_spec s = {.nin = 3, .seed = seed, .eps = big_step(n, c, h, w)};
    set_shape(&s, 0, n, c, h, w);
    set_shape(&s, 1, 1, c, 1, 1);
    set_shape(&s, 2, 1, c, 1, 1);
    snprintf(label, sizeof label, "groupnorm: finite-difference gradient %dx%dx%dx%d, %d groups%s",
             n, c, h, w, groups, n * c * h * w > (1 << 14) ? " (threaded)" : "");
    gradcheck(label, build_gn, &groups, &s);
}

static void test_groupnorm(void)
{
    static const int groups[] = {1, 2, 3, 6};
    for (int i = 0; i < 4; i++) gn_case(2, 6, 3, 4, groups[i], 140u + (unsigned)i);
    gc_spec s = {.nin = 3, .seed = 150, .no_grad = {0, 1, 1}};
    set_shape(&s, 0, 3, 4, 1, 1);
    set_shape(&s, 1, 1, 4, 1, 1);
    set_shape(&s, 2, 1, 4, 1, 1);
    int two = 2;
    gradcheck("groupnorm: 3x4x1x1, 2 groups, gradient of x alone", build_gn, &two, &s);
    gn_case(2, 8, 34, 34, 4, 151);
}

/* ---- shape errors -------------------------------------------------------- */
static int mentions(const char *msg, const char *a, const char *b, const char *c)
{
    return strstr(msg, a) && strstr(msg, b) && strstr(msg, c);
}

static void test_shape_errors(void)
{
    static const binary_fn fns[] = {nj_add, nj_sub, nj_mul, nj_div, nj_minimum};
    static const char *const names[] = {"add", "sub", "mul", "div", "minimum"};
    nj_graph *g = nj_graph_new(1 << 16);
    char label[96];
    for (int k = 0; k < 5; k++) {
        nj_graph_reset(g);
        nj_tensor *a = nj_tensor_new(g, 2, 3, 4, 5, 1), *b = nj_tensor_new(g, 2, 4, 4, 5, 1);
        nj_tensor *y = fns[k](g, a, b);
        const char *msg = nj_graph_error(g);
        snprintf(label, sizeof label, "%s: 2x3x4x5 with 2x4x4x5 fails naming op and shapes", names[k]);
        check(!y && nj_graph_failed(g) && mentions(msg, names[k], "2x3x4x5", "2x4x4x5"), label,
              "returned %p, message \"%s\"", (void *)y, msg);
    }
    nj_graph_reset(g);
    nj_tensor *a = nj_tensor_new(g, 1, 3, 1, 5, 0), *b = nj_tensor_new(g, 2, 1, 4, 4, 0);
    nj_tensor *y = nj_add(g, a, b);
    nj_tensor *z = nj_relu(g, y);
    check(!y && !z && mentions(nj_graph_error(g), "add", "1x3x1x5", "2x1x4x4"),
          "add: 1x3x1x5 with 2x1x4x4 fails; the error is sticky (next op returns NULL)",
          "y %p z %p message \"%s\"", (void *)y, (void *)z, nj_graph_error(g));

    nj_graph_reset(g);
    nj_tensor *x = nj_tensor_new(g, 2, 6, 3, 3, 0), *gm = nj_tensor_new(g, 1, 6, 1, 1, 0);
    y = nj_groupnorm(g, x, 4, gm, gm, 1e-5f);
    check(!y && mentions(nj_graph_error(g), "groupnorm", "4 groups", "2x6x3x3"),
          "groupnorm: 4 groups for 6 channels fails naming op and shape", "message \"%s\"",
          nj_graph_error(g));
    nj_graph_reset(g);
    float rm[6] = {0}, rv[6] = {1, 1, 1, 1, 1, 1};
    x = nj_tensor_new(g, 2, 5, 3, 3, 0);
    y = nj_batchnorm(g, x, gm, gm, rm, rv, 0.1f, 1e-5f);
    check(!y && mentions(nj_graph_error(g), "batchnorm", "1x6x1x1", "2x5x3x3"),
          "batchnorm: gamma 1x6x1x1 for x 2x5x3x3 fails naming op and shapes", "message \"%s\"",
          nj_graph_error(g));
    nj_graph_reset(g);
    y = nj_sum(g, x, 16);
    check(!y && mentions(nj_graph_error(g), "sum", "16", "2x5x3x3"),
          "sum: axis mask 16 fails naming op, mask and shape", "message \"%s\"", nj_graph_error(g));
    nj_graph_free(g);
}

/* ---- batch-norm folding --------------------------------------------------- */
/* conv (nj_conv2d) followed by inference-mode nj_batchnorm must equal a single
 * conv with the folded weights. */
static void test_fold(void)
{
    enum { N = 2, CI = 3, CO = 4, H = 6, W = 7, K = 3 };
    float x[N * CI * H * W], w[CO * CI * K * K], b[CO], gamma[CO], beta[CO], rm[CO], rv[CO];
    test_fill_uniform(x, sizeof x / sizeof x[0], -1, 1, 601);
    test_fill_uniform(w, sizeof w / sizeof w[0], -0.5f, 0.5f, 602);
    test_fill_uniform(b, CO, -0.5f, 0.5f, 603);
    test_fill_uniform(gamma, CO, 0.5f, 1.5f, 604);
    test_fill_uniform(beta, CO, -0.5f, 0.5f, 605);
    test_fill_uniform(rm, CO, -0.3f, 0.3f, 606);
    test_fill_uniform(rv, CO, 0.2f, 1.5f, 607);
    nj_graph *g = nj_graph_new(1 << 20);
    nj_graph_set_training(g, 0);
    nj_graph_set_grad(g, 0);
    nj_tensor *xt = nj_tensor_from(g, N, CI, H, W, x, 0);
    nj_tensor *conv = nj_conv2d(g, xt, nj_tensor_from(g, CO, CI, K, K, w, 0),
                                nj_tensor_from(g, 1, CO, 1, 1, b, 0), 1, 1, NJ_PAD_ZERO);
    nj_tensor *ref = nj_batchnorm(g, conv, nj_tensor_from(g, 1, CO, 1, 1, gamma, 0),
                                  nj_tensor_from(g, 1, CO, 1, 1, beta, 0), rm, rv, 0.1f, 1e-5f);
    nj_batchnorm_fold(w, b, CO, CI * K * K, gamma, beta, rm, rv, 1e-5f);
    nj_tensor *folded = nj_conv2d(g, xt, nj_tensor_from(g, CO, CI, K, K, w, 0),
                                  nj_tensor_from(g, 1, CO, 1, 1, b, 0), 1, 1, NJ_PAD_ZERO);
    double worst = (ref && folded) ? 0 : INFINITY;
    for (size_t i = 0; ref && folded && i < nj_numel(ref); i++)
        worst = fmax(worst, fabs(ref->data[i] - folded->data[i]));
    check(worst <= 1e-5, "batchnorm_fold: folded 3x3 conv equals conv + inference batchnorm",
          "max difference %g (%s)", worst, nj_graph_error(g));
    nj_graph_free(g);
}

/* Grad buffers are zeroed lazily (nn/graph.c): a reused arena must still give
 * zero-valued gradients — before the reverse pass through nj_tensor_grad(),
 * after it for tensors the pass never reached, and as the start of the
 * accumulation for the ones it did.  Expected values are d(sum x*x)/dx = 2x. */
static void test_lazy_grad_zero(void)
{
    enum { N = 2 * 4 * 48 * 48 }; /* big enough for the threaded zeroing */
    static float xv[N];
    test_fill_uniform(xv, N, -1, 1, 701);
    nj_graph *g = nj_graph_new(1 << 22);
    /* step 1 leaves non-zero values in every grad buffer of the arena */
    for (int k = 0; k < 3; k++) {
        nj_tensor *t = nj_tensor_new(g, 2, 4, 48, 48, 1);
        float *gt = t ? nj_tensor_grad(t) : NULL;
        for (int i = 0; gt && i < N; i++) gt[i] = 7.0f;
    }
    nj_graph_reset(g);
    nj_tensor *x = nj_tensor_from(g, 2, 4, 48, 48, xv, 1);
    nj_tensor *unused = nj_tensor_new(g, 2, 4, 48, 48, 1);
    nj_tensor *idle = nj_tensor_new(g, 2, 4, 48, 48, 1); /* in no op at all */
    nj_tensor *loss = nj_sum(g, nj_mul(g, x, x), NJ_AXIS_ALL);
    nj_tensor *dangling = nj_relu(g, x); /* recorded, but not on the loss's path */
    int ok = loss && dangling && unused && idle && !nj_graph_failed(g);
    double before = 0, unreached = 0, wrong = 0, dangle = 0;
    if (ok) {
        float *gu = nj_tensor_grad(unused);
        for (int i = 0; i < N; i++) before = fmax(before, fabs(gu[i]));
        for (int i = 0; i < N; i++) gu[i] = 7.0f; /* written before backward: kept */
    }
    ok = ok && nj_backward(g, loss) == 0;
    for (int i = 0; ok && i < N; i++) {
        unreached = fmax(unreached, fabs(unused->grad[i] - 7.0f));
        wrong = fmax(wrong, fabs(x->grad[i] - 2.0f * xv[i]));
        dangle = fmax(dangle, fabs(dangling->grad[i]));
        dangle = fmax(dangle, fabs(idle->grad[i]));
    }
    check(ok && before == 0 && unreached == 0 && wrong <= 1e-6 && dangle == 0,
          "lazily zeroed grads: zero before, accumulate from zero, untouched ones kept or zero",
          "ok %d, before backward %g, written-before changed by %g, dx off by %g, dangling/idle %g (%s)",
          ok, before, unreached, wrong, dangle, nj_graph_error(g));
    nj_graph_free(g);
}

int main(void)
{
    nj_threads_init(0);
    test_forward_unary();
    test_unary();
    test_sigmoid_stability();
    test_kink_conventions();
    test_forward_binary();
    test_binary();
    test_reduce();
    test_batchnorm();
    test_groupnorm();
    test_shape_errors();
    test_fold();
    test_lazy_grad_zero();
    return test_exit();
}

/* tests/gradcheck.c — finite-difference gradient checker (see gradcheck.h). */
#include "tests/gradcheck.h"
#include "tests/check.h"
#include <math.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

/* splitmix64 (Steele et al. 2014): well mixed even for consecutive seeds.
 * Its constants (the increment 0x9E3779B97F4A7C15 = 2^64/φ and the two
 * multipliers) are the usual ones of the published splitmix64 (Vigna's
 * public-domain splitmix64.c), written from common practice; 0x243F6A8885A308D3
 * is the start of π's hexadecimal fraction, an arbitrary offset.  Only the
 * mixing matters here: any constants would give usable test inputs. */
void test_fill_uniform(float *x, size_t n, float lo, float hi, unsigned seed)
{
    uint64_t s = 0x243F6A8885A308D3ull + (uint64_t)seed * 0x9E3779B97F4A7C15ull;
    for (size_t i = 0; i < n; i++) {
        uint64_t z = (s += 0x9E3779B97F4A7C15ull);
        z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ull;
        z = (z ^ (z >> 27)) * 0x94D049BB133111EBull;
        z ^= z >> 31;
        x[i] = lo + (hi - lo) * (float)((z >> 40) * (1.0 / 16777216.0));
    }
}

/* L = sum(out * r) in double, with gradients off. */
static double eval_loss(nj_graph *g, gc_build build, void *ctx, float **vals,
                        const gc_spec *sp, const float *r)
{
    nj_graph_reset(g);
    nj_graph_set_grad(g, 0);
    nj_tensor *in[4] = {0};
    for (int k = 0; k < sp->nin; k++) {
        const int *s = sp->shape[k];
        in[k] = nj_tensor_from(g, s[0], s[1], s[2], s[3], vals[k], 0);
    }
    nj_tensor *out = build(g, in, ctx);
    nj_graph_set_grad(g, 1);
    if (!out) return NAN;
    double L = 0;
    for (size_t i = 0; i < nj_numel(out); i++) L += (double)out->data[i] * r[i];
    return L;
}

static size_t shape_numel(const int *s) { return (size_t)s[0] * s[1] * s[2] * s[3]; }

int gradcheck(const char *name, gc_build build, void *ctx, const gc_spec *spec)
{
    gc_spec sp = *spec;
    if (sp.lo == 0 && sp.hi == 0) { sp.lo = -1; sp.hi = 1; }
    if (sp.eps == 0) sp.eps = 1e-3f;
    if (sp.rtol == 0) sp.rtol = 1e-2f;
    if (sp.atol == 0) sp.atol = 1e-3f;
    int ok = 0;
    nj_graph *g = nj_graph_new(1 << 20);
    float *vals[4] = {0}, *ana[4] = {0};
    for (int k = 0; k < sp.nin; k++) {
        size_t n = shape_numel(sp.shape[k]);
        vals[k] = malloc(n * sizeof(float));
        ana[k] = calloc(n, sizeof(float));
        test_fill_uniform(vals[k], n, sp.lo, sp.hi, sp.seed * 31u + (unsigned)k + 1u);
    }
    /* analytic pass */
    nj_graph_reset(g);
    nj_tensor *in[4] = {0};
    for (int k = 0; k < sp.nin; k++) {
        const int *s = sp.shape[k];
        in[k] = nj_tensor_from(g, s[0], s[1], s[2], s[3], vals[k], !sp.no_grad[k]);
    }
    nj_tensor *out = build(g, in, ctx);
    if (!out || nj_graph_failed(g)) {
        check(0, name, "op failed: %s", nj_graph_error(g));
        goto done;
    }
    size_t nout = nj_numel(out);
    float *r = malloc(nout * sizeof(float));
    test_fill_uniform(r, nout, -1, 1, sp.seed + 777u);
    nj_backward_seeded(g, out, r);
    for (int k = 0; k < sp.nin; k++)
        if (in[k]->grad) memcpy(ana[k], in[k]->grad, shape_numel(sp.shape[k]) * sizeof(float));

    double worst = 0; int wk = -1; size_t wi = 0; double wa = 0, wn = 0;
    for (int k = 0; k < sp.nin; k++) {
        if (sp.no_grad[k]) continue;
        size_t n = shape_numel(sp.shape[k]);
        size_t count = n <= 400 ? n : 400;
        for (size_t j = 0; j < count; j++) {
            /* 2654435761 ≈ 2^32/φ, Knuth's multiplicative-hash constant (common practice):
             * spreads the 400 probes over the tensor */
            size_t i = n <= 400 ? j : (size_t)(((uint64_t)j * 2654435761u + sp.seed) % n);
            float keep = vals[k][i];
            vals[k][i] = keep + sp.eps;
            double lp = eval_loss(g, build, ctx, vals, &sp, r);
            vals[k][i] = keep - sp.eps;
            double lm = eval_loss(g, build, ctx, vals, &sp, r);
            vals[k][i] = keep;
            double num = (lp - lm) / (2.0 * sp.eps);
            double err = fabs(ana[k][i] - num) / (sp.atol + sp.rtol * fabs(num));
            if (!(err <= worst)) { worst = err; wk = k; wi = i; wa = ana[k][i]; wn = num; }
        }
    }
    ok = check(worst <= 1.0, name,
          "input %d element %zu: analytic %.6g vs numeric %.6g (error %.2f x tolerance)",
          wk, wi, wa, wn, worst);
    free(r);
done:
    for (int k = 0; k < sp.nin; k++) { free(vals[k]); free(ana[k]); }
    nj_graph_free(g);
    return ok;
}

/* tests/test_pose_series.c — the small-angle series branch of nj_pose_from_vec
 * (losses/pose.c: below θ = 1e-2 the Rodrigues coefficients A, B and the
 * derivative coefficients a, b come from Taylor series) checked directly at
 * θ ≈ 1e-3 and θ ≈ 9e-3.
 *
 * The reference is the closed form evaluated in long double (x87, 64-bit
 * mantissa), not the product's series:
 *   R = I + A K + B K²,  A = sin θ/θ,  B = (1 − cos θ)/θ²        (Rodrigues)
 *   ∂R/∂v_i = A E_i + B (E_i K + K E_i) + a v_i K + b v_i K²,
 *   a = (θ cos θ − sin θ)/θ³,  b = (θ sin θ − 2(1 − cos θ))/θ⁴
 * (Gallego & Yezzi 2015, "A compact formula for the derivative of a 3-D
 * rotation in exponential coordinates", eq. 9 written with K = [v]×).  In long
 * double the cancellation in a and b at θ = 1e-3 costs ~1e-12 relative.
 *
 * A gradient check with random upstream gradients cannot see a or b at
 * θ = 1e-3: their terms are ~1e-6 of the A term.  So the upstream gradient is
 * chosen to switch the other terms off:
 *   - antisymmetric gR = [w]× with w ⟂ e_i: the A term (2 w·e_i) and the
 *     B, b terms (antisymmetric against symmetric) vanish, leaving
 *     ∂/∂v_i = a v_i Σ gR∘K = 2 a v_i (w·v): a alone;
 *   - symmetric gR orthogonal to E_i K + K E_i: leaves b v_i Σ gR∘K².
 * Measured with perturbed builds: a's leading coefficient −1/3 → −0.3334 fails
 * both a-checks, b's −1/12 → −1/12·1.0001 fails the θ = 9e-3 b-check.  The
 * series' second-order terms (t2/30, t2/180, t2/24, ...) change the result by
 * < 3e-7 relative for any θ below the 1e-2 switch — under float32's
 * resolution of the op's output — so no check of the float op can see them,
 * and they cannot move a float result by more than an ulp (t2/30 → t2/3 is
 * caught). */
#include "losses/pose.h"
#include "nn/graph.h"
#include "tests/check.h"
#include <math.h>
#include <stdio.h>
#include <string.h>

typedef long double ld;

static void skew(const ld v[3], ld K[9])
{
    K[0] = 0;     K[1] = -v[2]; K[2] = v[1];
    K[3] = v[2];  K[4] = 0;     K[5] = -v[0];
    K[6] = -v[1]; K[7] = v[0];  K[8] = 0;
}

static void mul3(const ld *x, const ld *y, ld *z)
{
    for (int r = 0; r < 3; r++)
        for (int c = 0; c < 3; c++) z[r * 3 + c] = x[r * 3] * y[c] + x[r * 3 + 1] * y[3 + c] + x[r * 3 + 2] * y[6 + c];
}

/* The reference gradient of Σ gR∘R(v) with respect to v (closed form, long double). */
static void reference(const ld v[3], const ld gR[9], ld gv[3])
{
    ld t = sqrtl(v[0] * v[0] + v[1] * v[1] + v[2] * v[2]), s = sinl(t), c = cosl(t);
    ld A = s / t, B = (1 - c) / (t * t), a = (t * c - s) / (t * t * t), b = (t * s - 2 * (1 - c)) / (t * t * t * t);
    ld K[9], K2[9], E[9], EK[9], KE[9];
    skew(v, K);
    mul3(K, K, K2);
    for (int i = 0; i < 3; i++) {
        ld e[3] = {0, 0, 0};
        e[i] = 1;
        skew(e, E);
        mul3(E, K, EK);
        mul3(K, E, KE);
        gv[i] = 0;
        for (int k = 0; k < 9; k++) gv[i] += gR[k] * (A * E[k] + B * (EK[k] + KE[k]) + a * v[i] * K[k] + b * v[i] * K2[k]);
    }
}

/* The product's gradient (float in and out) for rotation vector v and gR. */
static int product(const float v[3], const float gR[9], float gv[3])
{
    nj_graph *g = nj_graph_new(1 << 16);
    if (!g) return -1;
    nj_tensor *x = nj_tensor_new(g, 1, 6, 1, 1, 1);
    for (int k = 0; k < 6; k++) x->data[k] = k < 3 ? v[k] : 0.1f * (float)k;
    nj_tensor *T = nj_pose_from_vec(g, x);
    float seed[12] = {0};
    for (int r = 0; r < 3; r++)
        for (int c = 0; c < 3; c++) seed[r * 4 + c] = gR[r * 3 + c];
    int rc = T ? nj_backward_seeded(g, T, seed) : -1;
    for (int k = 0; k < 3 && rc == 0; k++) gv[k] = x->grad[k];
    nj_graph_free(g);
    return rc;
}

/* Compares component i of the product's gradient with the reference. */
static void compare(const char *name, const float v[3], const float gR[9], int i, double tol)
{
    ld vl[3] = {v[0], v[1], v[2]}, gl[9], ref[3];
    for (int k = 0; k < 9; k++) gl[k] = gR[k];
    reference(vl, gl, ref);
    float got[3] = {0, 0, 0};
    int rc = product(v, gR, got);
    double rel = rc == 0 && ref[i] != 0 ? fabs((double)(got[i] - ref[i]) / (double)ref[i]) : INFINITY;
    checkv(rc == 0 && rel <= tol, name, "component %d: product %.9g, closed form %.9Lg, relative error %.2g (tolerance %.0e)",
           i, got[i], ref[i], rel, tol);
}

static void at_angle(double theta)
{
    /* a generic direction; the angle scales it */
    double d[3] = {0.48, -0.6, 0.64}, n = sqrt(d[0] * d[0] + d[1] * d[1] + d[2] * d[2]);
    float v[3];
    for (int k = 0; k < 3; k++) v[k] = (float)(theta * d[k] / n);
    char name[160];

    /* a alone: gR = [w]x with w ⟂ e_0 (w_0 = 0) */
    float w[3] = {0, 0.7f, -0.3f};
    float gA[9] = {0, -w[2], w[1], w[2], 0, -w[0], -w[1], w[0], 0};
    snprintf(name, sizeof name, "pose_from_vec series branch, theta %.0e: the a = A'/theta term alone", theta);
    compare(name, v, gA, 0, 1e-6);

    /* b alone: symmetric gR orthogonal to E_1 K + K E_1 (component 1) */
    ld vl[3] = {v[0], v[1], v[2]}, K[9], E[9], EK[9], KE[9], K2[9], e1[3] = {0, 1, 0};
    skew(vl, K);
    skew(e1, E);
    mul3(E, K, EK);
    mul3(K, E, KE);
    mul3(K, K, K2);
    /* S = K² − (⟨K², F⟩ / ⟨D, F⟩) D with F = E K + K E, D = diag(1, 2, 3) */
    ld D[9] = {1, 0, 0, 0, 2, 0, 0, 0, 3}, fk = 0, fd = 0, scale = 0;
    for (int k = 0; k < 9; k++) {
        fk += K2[k] * (EK[k] + KE[k]);
        fd += D[k] * (EK[k] + KE[k]);
    }
    float gB[9];
    for (int k = 0; k < 9; k++) scale = fmaxl(scale, fabsl(K2[k] - fk / fd * D[k]));
    for (int k = 0; k < 9; k++) gB[k] = (float)((K2[k] - fk / fd * D[k]) / scale);
    snprintf(name, sizeof name, "pose_from_vec series branch, theta %.0e: the b = B'/theta term alone", theta);
    compare(name, v, gB, 1, theta < 5e-3 ? 5e-3 : 1e-5);

    /* everything at once, generic upstream gradient */
    float gG[9] = {0.3f, -1.1f, 0.4f, 0.9f, -0.2f, 0.5f, -0.7f, 0.6f, 1.3f};
    for (int i = 0; i < 3; i++) {
        snprintf(name, sizeof name, "pose_from_vec series branch, theta %.0e: generic gradient, component %d", theta, i);
        compare(name, v, gG, i, 1e-6);
    }
}

int main(void)
{
    at_angle(1e-3);
    at_angle(9e-3);
    return test_failures() ? 1 : 0;
}

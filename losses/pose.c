/* losses/pose.c — Rodrigues rotation, pose inversion and composition with
 * hand-written backward passes.
 *
 * With K = [v]× (skew matrix of the unnormalised rotation vector v, θ = |v|):
 *   R = I + A·K + B·K²,  A = sin θ/θ,  B = (1 − cos θ)/θ²      (Rodrigues)
 *   ∂R/∂v_i = A·E_i + B·(E_i K + K E_i) + a·v_i·K + b·v_i·K²
 * with E_i = [e_i]×, a = A'(θ)/θ = (θ cos θ − sin θ)/θ³ and
 * b = B'(θ)/θ = (θ sin θ − 2(1 − cos θ))/θ⁴.  Below θ = 1e-2 the four
 * coefficients use their Taylor series (error < 1e-13), so the small-angle
 * limit is exact rather than 0/0.
 */
#include "losses/pose.h"
#include "nn/ops.h"
#include <math.h>
#include <string.h>

typedef struct { double A, B, a, b; } rod_coef;

static rod_coef rodrigues_coef(double t2)
{
    rod_coef c;
    if (t2 < 1e-4) {
        c.A = 1 - t2 / 6 + t2 * t2 / 120;
        c.B = 0.5 - t2 / 24 + t2 * t2 / 720;
        c.a = -1.0 / 3 + t2 / 30 - t2 * t2 / 840;
        c.b = -1.0 / 12 + t2 / 180 - t2 * t2 / 6720;
    } else {
        double t = sqrt(t2), s = sin(t), co = cos(t);
        c.A = s / t;
        c.B = (1 - co) / t2;
        c.a = (t * co - s) / (t2 * t);
        c.b = (t * s - 2 * (1 - co)) / (t2 * t2);
    }
    return c;
}

static void skew(const double v[3], double K[9])
{
    K[0] = 0;     K[1] = -v[2]; K[2] = v[1];
    K[3] = v[2];  K[4] = 0;     K[5] = -v[0];
    K[6] = -v[1]; K[7] = v[0];  K[8] = 0;
}

static void matmul3(const double *x, const double *y, double *z)
{
    for (int r = 0; r < 3; r++)
        for (int c = 0; c < 3; c++)
            z[r * 3 + c] = x[r * 3] * y[c] + x[r * 3 + 1] * y[3 + c] + x[r * 3 + 2] * y[6 + c];
}

void nj_rotvec_to_matrix(const double v[3], double R[9])
{
    double K[9], K2[9];
    rod_coef c = rodrigues_coef(v[0] * v[0] + v[1] * v[1] + v[2] * v[2]);
    skew(v, K);
    matmul3(K, K, K2);
    for (int k = 0; k < 9; k++) R[k] = (k % 4 == 0) + c.A * K[k] + c.B * K2[k];
}

/* gv += Σ_jk gR_jk ∂R_jk/∂v. */
static void rodrigues_backward(const double v[3], const double gR[9], double gv[3])
{
    double K[9], K2[9], E[9], EK[9], KE[9];
    rod_coef c = rodrigues_coef(v[0] * v[0] + v[1] * v[1] + v[2] * v[2]);
    skew(v, K);
    matmul3(K, K, K2);
    for (int i = 0; i < 3; i++) {
        double e[3] = {0, 0, 0};
        e[i] = 1;
        skew(e, E);
        matmul3(E, K, EK);
        matmul3(K, E, KE);
        double s = 0;
        for (int k = 0; k < 9; k++) {
            double d = c.A * E[k] + c.B * (EK[k] + KE[k]) + c.a * v[i] * K[k] + c.b * v[i] * K2[k];
            s += gR[k] * d;
        }
        gv[i] += s;
    }
}

static void from_vec_backward(nj_graph *g, const nj_op *op)
{
    (void)g;
    nj_tensor *vec = op->in[0], *T = op->out;
    if (!vec->grad) return;
    for (int n = 0; n < vec->n; n++) {
        const float *v = vec->data + 6 * n, *gT = T->grad + 12 * n;
        double vd[3] = {v[0], v[1], v[2]}, gR[9], gv[3] = {0, 0, 0};
        for (int r = 0; r < 3; r++)
            for (int c = 0; c < 3; c++) gR[r * 3 + c] = gT[r * 4 + c];
        rodrigues_backward(vd, gR, gv);
        float *gvec = vec->grad + 6 * n;
        for (int k = 0; k < 3; k++) {
            gvec[k] += (float)gv[k];
            gvec[3 + k] += gT[k * 4 + 3];
        }
    }
}

nj_tensor *nj_pose_from_vec(nj_graph *g, nj_tensor *vec)
{
    if (!vec || nj_graph_failed(g)) return NULL;
    if (vec->c != 6 || vec->h != 1 || vec->w != 1)
        return nj_graph_fail(g, "pose_from_vec: expected N×6×1×1, got %dx%dx%dx%d",
                             vec->n, vec->c, vec->h, vec->w);
    nj_tensor *in[1] = {vec};
    nj_tensor *T = nj_op_output(g, vec->n, 1, 3, 4, in, 1);
    if (!T) return NULL;
    for (int n = 0; n < vec->n; n++) {
        const float *v = vec->data + 6 * n;
        double vd[3] = {v[0], v[1], v[2]}, R[9];
        nj_rotvec_to_matrix(vd, R);
        float *t = T->data + 12 * n;
        for (int r = 0; r < 3; r++) {
            for (int c = 0; c < 3; c++) t[r * 4 + c] = (float)R[r * 3 + c];
            t[r * 4 + 3] = v[3 + r];
        }
    }
    nj_graph_record(g, "pose_from_vec", from_vec_backward, T, in, 1);
    return T;
}

static int is_pose(nj_graph *g, const char *op, const nj_tensor *t)
{
    if (t->c == 1 && t->h == 3 && t->w == 4) return 1;
    nj_graph_fail(g, "%s: expected a N×1×3×4 pose, got %dx%dx%dx%d", op, t->n, t->c, t->h, t->w);
    return 0;
}

static void invert_backward(nj_graph *g, const nj_op *op)
{
    (void)g;
    nj_tensor *T = op->in[0], *Y = op->out;
    if (!T->grad) return;
    for (int n = 0; n < T->n; n++) {
        const float *x = T->data + 12 * n, *gy = Y->grad + 12 * n;
        float *gx = T->grad + 12 * n;
        /* Y_R = Rᵀ, Y_t = −Rᵀ t */
        for (int r = 0; r < 3; r++)
            for (int c = 0; c < 3; c++) {
                gx[c * 4 + r] += gy[r * 4 + c];          /* from Y_R[r][c] = R[c][r] */
                gx[c * 4 + r] -= gy[r * 4 + 3] * x[c * 4 + 3]; /* Y_t[r] = −Σ_c R[c][r] t[c] */
                gx[c * 4 + 3] -= gy[r * 4 + 3] * x[c * 4 + r];
            }
    }
}

nj_tensor *nj_pose_invert(nj_graph *g, nj_tensor *T)
{
    if (!T || nj_graph_failed(g) || !is_pose(g, "pose_invert", T)) return NULL;
    nj_tensor *in[1] = {T};
    nj_tensor *Y = nj_op_output(g, T->n, 1, 3, 4, in, 1);
    if (!Y) return NULL;
    for (int n = 0; n < T->n; n++) {
        const float *x = T->data + 12 * n;
        float *y = Y->data + 12 * n;
        for (int r = 0; r < 3; r++) {
            float s = 0;
            for (int c = 0; c < 3; c++) {
                y[r * 4 + c] = x[c * 4 + r];
                s += x[c * 4 + r] * x[c * 4 + 3];
            }
            y[r * 4 + 3] = -s;
        }
    }
    nj_graph_record(g, "pose_invert", invert_backward, Y, in, 1);
    return Y;
}

static void compose_backward(nj_graph *g, const nj_op *op)
{
    (void)g;
    nj_tensor *A = op->in[0], *B = op->in[1], *Y = op->out;
    for (int n = 0; n < Y->n; n++) {
        const float *a = A->data + 12 * n, *b = B->data + 12 * n, *gy = Y->grad + 12 * n;
        float *ga = A->grad ? A->grad + 12 * n : NULL, *gb = B->grad ? B->grad + 12 * n : NULL;
        /* Y[r][c] = Σ_k a[r][k]·b[k][c] (+ a[r][3] when c == 3); b's 4th row is [0 0 0 1] */
        for (int r = 0; r < 3; r++)
            for (int c = 0; c < 4; c++) {
                float gv = gy[r * 4 + c];
                for (int k = 0; k < 3; k++) {
                    if (ga) ga[r * 4 + k] += gv * b[k * 4 + c];
                    if (gb) gb[k * 4 + c] += gv * a[r * 4 + k];
                }
                if (c == 3 && ga) ga[r * 4 + 3] += gv;
            }
    }
}

nj_tensor *nj_pose_compose(nj_graph *g, nj_tensor *a, nj_tensor *b)
{
    if (!a || !b || nj_graph_failed(g)) return NULL;
    if (!is_pose(g, "pose_compose", a) || !is_pose(g, "pose_compose", b)) return NULL;
    if (a->n != b->n)
        return nj_graph_fail(g, "pose_compose: batch sizes differ (%d vs %d)", a->n, b->n);
    nj_tensor *in[2] = {a, b};
    nj_tensor *Y = nj_op_output(g, a->n, 1, 3, 4, in, 2);
    if (!Y) return NULL;
    for (int n = 0; n < a->n; n++) {
        const float *x = a->data + 12 * n, *z = b->data + 12 * n;
        float *y = Y->data + 12 * n;
        for (int r = 0; r < 3; r++)
            for (int c = 0; c < 4; c++) {
                float s = c == 3 ? x[r * 4 + 3] : 0.0f;
                for (int k = 0; k < 3; k++) s += x[r * 4 + k] * z[k * 4 + c];
                y[r * 4 + c] = s;
            }
    }
    nj_graph_record(g, "pose_compose", compose_backward, Y, in, 2);
    return Y;
}

nj_tensor *nj_pose_stereo(nj_graph *g, int n, const float *tx)
{
    nj_tensor *T = nj_tensor_new(g, n, 1, 3, 4, 0);
    if (!T) return NULL;
    memset(T->data, 0, sizeof(float) * 12 * (size_t)n);
    for (int k = 0; k < n; k++) {
        float *t = T->data + 12 * k;
        t[0] = t[5] = t[10] = 1.0f;
        t[3] = tx[k];
    }
    return T;
}

nj_tensor *nj_arc_slip(nj_graph *g, nj_tensor *vec, float eps, int heading_given)
{
    if (!vec || vec->c != 6 || vec->h != 1 || vec->w != 1)
        return nj_graph_fail(g, "arc_slip: need an N×6×1×1 motion vector");
    nj_tensor *ry = nj_slice_channels(g, vec, 1, 1), *t = nj_slice_channels(g, vec, 3, 3);
    if (heading_given) {   /* a copy made off the tape: the gradient stops at it */
        int was = nj_graph_grad_enabled(g);
        nj_graph_set_grad(g, 0);
        ry = nj_affine(g, ry, 1.0f, 0.0f);
        nj_graph_set_grad(g, was);
    }
    nj_tensor *tx = nj_slice_channels(g, vec, 3, 1), *tz = nj_slice_channels(g, vec, 5, 1);
    nj_tensor *slip = nj_sub(g, tx, nj_affine(g, nj_mul(g, tz, ry), 0.5f, 0.0f));
    nj_tensor *len2 = nj_affine(g, nj_sum(g, nj_mul(g, t, t), NJ_AXIS_C), 1.0f, eps * eps);
    nj_tensor *r = nj_div(g, slip, nj_sqrt(g, len2));
    return nj_mul(g, r, r);
}

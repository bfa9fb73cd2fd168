/* losses/reproject.c — back-project, transform, project; with backward. */
#include "losses/reproject.h"
#include "nn/prof.h"
#include <string.h>

typedef struct {
    const nj_camera *cams;   /* copied into the arena */
} reproj_aux;

/* Source-camera point Q of pixel (u, v) at depth d, and the ray r = K⁻¹[u v 1]. */
static void point(const float *T, nj_camera c, int u, int v, float d, float r[3], float Q[3])
{
    r[0] = (u - c.cx) / c.fx;
    r[1] = (v - c.cy) / c.fy;
    r[2] = 1.0f;
    for (int i = 0; i < 3; i++)
        Q[i] = d * (T[i * 4] * r[0] + T[i * 4 + 1] * r[1] + T[i * 4 + 2] * r[2]) + T[i * 4 + 3];
}

static void reproject_row(const nj_tensor *depth, const float *T, nj_camera c, int n, int v,
                          float *xo, float *yo, float *ok)
{
    int W = depth->w, H = depth->h;
    const float *d = depth->data + ((size_t)n * H + v) * W;
    for (int u = 0; u < W; u++) {
        float r[3], Q[3];
        point(T, c, u, v, d[u], r, Q);
        int front = Q[2] > NJ_MIN_Z;
        float z = front ? Q[2] : NJ_MIN_Z;
        float x = c.fx * Q[0] / z + c.cx, y = c.fy * Q[1] / z + c.cy;
        xo[u] = x;
        yo[u] = y;
        if (ok) ok[u] = front && x >= 0 && x <= W - 1 && y >= 0 && y <= H - 1;
    }
}

/* Backward of one row: depth grads directly, pose grads into acc[12] (double,
 * summed in a local array: acc may alias nothing, but the compiler cannot
 * know that, and memory accumulators serialise on store-to-load latency). */
static void backward_row(const nj_tensor *depth, const nj_tensor *out, const float *T,
                         nj_camera c, int n, int v, float *gd, double *restrict acc_out)
{
    int W = depth->w, H = depth->h;
    double acc[12] = {0};
    size_t plane = (size_t)H * W, row = (size_t)v * W;
    const float *d = depth->data + n * plane + row;
    const float *gx = out->grad + (size_t)n * 2 * plane + row, *gy = gx + plane;
    for (int u = 0; u < W; u++) {
        float r[3], Q[3];
        point(T, c, u, v, d[u], r, Q);
        if (!(Q[2] > NJ_MIN_Z) || (gx[u] == 0 && gy[u] == 0)) continue;
        float iz = 1.0f / Q[2];
        float gQ[3] = {gx[u] * c.fx * iz, gy[u] * c.fy * iz,
                       -(gx[u] * c.fx * Q[0] + gy[u] * c.fy * Q[1]) * iz * iz};
        float P[3] = {d[u] * r[0], d[u] * r[1], d[u] * r[2]};
        for (int i = 0; i < 3; i++) {
            for (int j = 0; j < 3; j++) acc[i * 4 + j] += (double)gQ[i] * P[j];
            acc[i * 4 + 3] += gQ[i];
        }
        if (gd) {
            float s = 0;
            for (int k = 0; k < 3; k++)
                s += (T[k * 4] * r[0] + T[k * 4 + 1] * r[1] + T[k * 4 + 2] * r[2]) * gQ[k];
            gd[u] += s;
        }
    }
    memcpy(acc_out, acc, sizeof acc);
}

static void reproject_backward(nj_graph *g, const nj_op *op)
{
    nj_tensor *depth = op->in[0], *T = op->in[1], *out = op->out;
    const reproj_aux *aux = op->aux;
    int N = depth->n, H = depth->h, W = depth->w;
    /* Per-row pose partials, summed in a fixed order: thread-count independent. */
    double *acc = nj_graph_calloc(g, sizeof(double) * 12 * (size_t)N * H);
    if (!acc) return;
    #pragma omp parallel for collapse(2) schedule(static)
    for (int n = 0; n < N; n++)
        for (int v = 0; v < H; v++) {
            float *gd = depth->grad ? depth->grad + ((size_t)n * H + v) * W : NULL;
            backward_row(depth, out, T->data + 12 * n, aux->cams[n], n, v, gd,
                         acc + 12 * ((size_t)n * H + v));
        }
    if (!T->grad) return;
    for (int n = 0; n < N; n++)
        for (int k = 0; k < 12; k++) {
            double s = 0;
            for (int v = 0; v < H; v++) s += acc[12 * ((size_t)n * H + v) + k];
            T->grad[12 * n + k] += (float)s;
        }
}

nj_tensor *nj_reproject(nj_graph *g, nj_tensor *depth, nj_tensor *T,
                        const nj_camera *cams, nj_tensor **valid)
{
    if (valid) *valid = NULL;
    if (!depth || !T || nj_graph_failed(g)) return NULL;
    if (depth->c != 1)
        return nj_graph_fail(g, "reproject: depth must have 1 channel, got %dx%dx%dx%d",
                             depth->n, depth->c, depth->h, depth->w);
    if (T->n != depth->n || T->c != 1 || T->h != 3 || T->w != 4)
        return nj_graph_fail(g, "reproject: pose must be %dx1x3x4, got %dx%dx%dx%d",
                             depth->n, T->n, T->c, T->h, T->w);
    int N = depth->n, H = depth->h, W = depth->w;
    nj_tensor *in[2] = {depth, T};
    nj_tensor *out = nj_op_output(g, N, 2, H, W, in, 2);
    nj_tensor *ok = valid ? nj_tensor_new(g, N, 1, H, W, 0) : NULL;
    if (!out || (valid && !ok)) return NULL;
    size_t plane = (size_t)H * W;
    double t0 = nj_prof_start();
    #pragma omp parallel for collapse(2) schedule(static)
    for (int n = 0; n < N; n++)
        for (int v = 0; v < H; v++) {
            float *xo = out->data + (size_t)n * 2 * plane + (size_t)v * W;
            reproject_row(depth, T->data + 12 * n, cams[n], n, v, xo, xo + plane,
                          ok ? ok->data + n * plane + (size_t)v * W : NULL);
        }
    nj_prof_stop("warping", t0);
    if (valid) *valid = ok;
    nj_op *op = nj_graph_record(g, "reproject", reproject_backward, out, in, 2);
    if (op) {
        op->prof = "warping";
        reproj_aux *aux = nj_graph_alloc(g, sizeof *aux);
        nj_camera *c = nj_graph_alloc(g, sizeof *c * (size_t)N);
        if (!aux || !c) return NULL;
        memcpy(c, cams, sizeof *c * (size_t)N);
        aux->cams = c;
        op->aux = aux;
    }
    return out;
}

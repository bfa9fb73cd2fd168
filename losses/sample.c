/* losses/sample.c — bilinear sampling with border clamp, forward and backward. */
#include "losses/sample.h"
#include "nn/prof.h"
#include <math.h>

/* Corner indices and weights of one sample; dx/dy are 0 where clamped. */
typedef struct { int x0, x1, y0, y1; float wx, wy, dx, dy; } tap;

static inline tap make_tap(float x, float y, int W, int H)
{
    tap t;
    t.dx = (x > 0 && x < W - 1) ? 1.0f : 0.0f;
    t.dy = (y > 0 && y < H - 1) ? 1.0f : 0.0f;
    if (!(x > 0)) x = 0;                 /* also maps NaN to the border */
    if (x > W - 1) x = (float)(W - 1);
    if (!(y > 0)) y = 0;
    if (y > H - 1) y = (float)(H - 1);
    t.x0 = (int)x; t.y0 = (int)y;
    t.x1 = t.x0 + 1 < W ? t.x0 + 1 : t.x0;
    t.y1 = t.y0 + 1 < H ? t.y0 + 1 : t.y0;
    t.wx = x - (float)t.x0;
    t.wy = y - (float)t.y0;
    return t;
}

static inline float interp(const float *p, int W, tap t)
{
    float a = p[t.y0 * W + t.x0], b = p[t.y0 * W + t.x1];
    float c = p[t.y1 * W + t.x0], d = p[t.y1 * W + t.x1];
    return (1 - t.wy) * ((1 - t.wx) * a + t.wx * b) + t.wy * ((1 - t.wx) * c + t.wx * d);
}

static void sample_forward(const nj_tensor *img, const nj_tensor *co, nj_tensor *out)
{
    int N = img->n, C = img->c, H = img->h, W = img->w, Ho = co->h, Wo = co->w;
    size_t in_plane = (size_t)H * W, out_plane = (size_t)Ho * Wo;
    #pragma omp parallel for collapse(2) schedule(static)
    for (int n = 0; n < N; n++)
        for (int v = 0; v < Ho; v++) {
            const float *cx = co->data + (size_t)n * 2 * out_plane + (size_t)v * Wo;
            const float *cy = cx + out_plane;
            #pragma omp simd
            for (int u = 0; u < Wo; u++) {
                tap t = make_tap(cx[u], cy[u], W, H);
                for (int c = 0; c < C; c++)
                    out->data[((size_t)n * C + c) * out_plane + (size_t)v * Wo + u] =
                        interp(img->data + ((size_t)n * C + c) * in_plane, W, t);
            }
        }
}

/* d out / d coords, summed over channels. */
static void coords_backward(const nj_tensor *img, const nj_tensor *co, const nj_tensor *out)
{
    int N = img->n, C = img->c, H = img->h, W = img->w, Ho = co->h, Wo = co->w;
    size_t in_plane = (size_t)H * W, out_plane = (size_t)Ho * Wo;
    #pragma omp parallel for collapse(2) schedule(static)
    for (int n = 0; n < N; n++)
        for (int v = 0; v < Ho; v++) {
            size_t off = (size_t)n * 2 * out_plane + (size_t)v * Wo;
            #pragma omp simd
            for (int u = 0; u < Wo; u++) {
                tap t = make_tap(co->data[off + u], co->data[off + out_plane + u], W, H);
                float gx = 0, gy = 0;
                for (int c = 0; c < C; c++) {
                    const float *p = img->data + ((size_t)n * C + c) * in_plane;
                    float go = out->grad[((size_t)n * C + c) * out_plane + (size_t)v * Wo + u];
                    float a = p[t.y0 * W + t.x0], b = p[t.y0 * W + t.x1];
                    float cc = p[t.y1 * W + t.x0], d = p[t.y1 * W + t.x1];
                    gx += go * ((1 - t.wy) * (b - a) + t.wy * (d - cc));
                    gy += go * ((1 - t.wx) * (cc - a) + t.wx * (d - b));
                }
                co->grad[off + u] += gx * t.dx;
                co->grad[off + out_plane + u] += gy * t.dy;
            }
        }
}

/* d out / d img: scatter, one thread per (n, c) plane so writes never race. */
static void image_backward(const nj_tensor *img, const nj_tensor *co, const nj_tensor *out)
{
    int N = img->n, C = img->c, H = img->h, W = img->w, Ho = co->h, Wo = co->w;
    size_t in_plane = (size_t)H * W, out_plane = (size_t)Ho * Wo;
    #pragma omp parallel for collapse(2) schedule(static)
    for (int n = 0; n < N; n++)
        for (int c = 0; c < C; c++) {
            float *gp = img->grad + ((size_t)n * C + c) * in_plane;
            const float *go = out->grad + ((size_t)n * C + c) * out_plane;
            const float *cx = co->data + (size_t)n * 2 * out_plane, *cy = cx + out_plane;
            for (size_t i = 0; i < out_plane; i++) {
                tap t = make_tap(cx[i], cy[i], W, H);
                float g = go[i];
                gp[t.y0 * W + t.x0] += g * (1 - t.wx) * (1 - t.wy);
                gp[t.y0 * W + t.x1] += g * t.wx * (1 - t.wy);
                gp[t.y1 * W + t.x0] += g * (1 - t.wx) * t.wy;
                gp[t.y1 * W + t.x1] += g * t.wx * t.wy;
            }
        }
}

static void sample_backward(nj_graph *g, const nj_op *op)
{
    (void)g;
    if (op->in[1]->grad) coords_backward(op->in[0], op->in[1], op->out);
    if (op->in[0]->grad) image_backward(op->in[0], op->in[1], op->out);
}

nj_tensor *nj_sample_bilinear(nj_graph *g, nj_tensor *img, nj_tensor *coords)
{
    if (!img || !coords || nj_graph_failed(g)) return NULL;
    if (coords->c != 2 || coords->n != img->n)
        return nj_graph_fail(g, "sample_bilinear: coords must be %dx2xHxW for image %dx%dx%dx%d, got %dx%dx%dx%d",
                             img->n, img->n, img->c, img->h, img->w,
                             coords->n, coords->c, coords->h, coords->w);
    nj_tensor *in[2] = {img, coords};
    nj_tensor *out = nj_op_output(g, img->n, img->c, coords->h, coords->w, in, 2);
    if (!out) return NULL;
    double t0 = nj_prof_start();
    sample_forward(img, coords, out);
    nj_prof_stop("warping", t0);
    nj_op *op = nj_graph_record(g, "sample_bilinear", sample_backward, out, in, 2);
    if (op) op->prof = "warping";
    return out;
}

/* nn/ops.h — differentiable operations.
 *
 * Every op: nj_tensor *nj_<op>(nj_graph *g, inputs..., settings...).
 * It checks shapes (failing the graph with a one-line message naming the op and
 * the shapes), returns NULL if any input is NULL or the graph already failed,
 * allocates its output in the graph's arena, and records its backward when a
 * gradient is needed.  Backward functions accumulate (+=) into input grads and
 * skip inputs whose grad is NULL.
 *
 * Threading: each op uses exactly one level of parallelism — OpenMP over
 * batch, channels or pixels.  OpenBLAS is kept single-threaded (nj_threads_init)
 * and called from inside those OpenMP regions, so cores are never oversubscribed.
 *
 * Implementation files (one concept each): conv2d.c (+ conv_direct.c), upsample.c, resize.c,
 * concat.c, pool.c, pad.c, activation.c, binary.c, unary.c, reduce.c,
 * batchnorm.c, groupnorm.c, slice.c.
 */
#ifndef NJ_OPS_H
#define NJ_OPS_H
#include "nn/graph.h"

typedef enum { NJ_PAD_ZERO = 0, NJ_PAD_REFLECT = 1 } nj_pad_mode;

/* Sets OpenBLAS to one thread and OpenMP to `threads` (<=0: all cores).
 * Call once at program start. Returns the OpenMP thread count in use. */
int nj_threads_init(int threads);

/* ---- convolution and resampling ---------------------------------------- */
/* x: N×Cin×H×W, w: Cout×Cin×K×K (square or not: kh=w->h, kw=w->w),
 * b: 1×Cout×1×1 or NULL.  stride 1 or 2, `pad` pixels on each side, zero or
 * reflection padding (reflection needs pad < H and pad < W).
 * Output: N×Cout×((H+2p-kh)/s+1)×((W+2p-kw)/s+1).  Register-blocked direct
 * kernels for stride-1 convs on wide maps and 1-channel heads (nn/conv_direct.c),
 * im2col + sgemm otherwise. */
nj_tensor *nj_conv2d(nj_graph *g, nj_tensor *x, nj_tensor *w, nj_tensor *b,
                     int stride, int pad, nj_pad_mode mode);
/* Nearest-neighbour ×2: N×C×H×W → N×C×2H×2W. */
nj_tensor *nj_upsample2(nj_graph *g, nj_tensor *x);
/* Bilinear resize to oh×ow with half-pixel centres (PyTorch
 * F.interpolate(mode="bilinear", align_corners=False), no antialias). */
nj_tensor *nj_resize_bilinear(nj_graph *g, nj_tensor *x, int oh, int ow);
/* Channel concatenation of two tensors with equal N, H, W (skip connections). */
nj_tensor *nj_concat(nj_graph *g, nj_tensor *a, nj_tensor *b);
/* Channels [c0, c0+count) of x. */
nj_tensor *nj_slice_channels(nj_graph *g, nj_tensor *x, int c0, int count);
/* Reflection padding by p on all four sides (p < H, p < W). */
nj_tensor *nj_reflect_pad(nj_graph *g, nj_tensor *x, int p);
/* 3×3 average pooling, stride 1, no padding: N×C×H×W → N×C×(H-2)×(W-2). */
nj_tensor *nj_avgpool3(nj_graph *g, nj_tensor *x);
/* Global average pool: N×C×H×W → N×C×1×1. */
nj_tensor *nj_global_avgpool(nj_graph *g, nj_tensor *x);

/* ---- activations and unary math ----------------------------------------- */
nj_tensor *nj_relu(nj_graph *g, nj_tensor *x);
nj_tensor *nj_elu(nj_graph *g, nj_tensor *x);          /* alpha = 1 */
nj_tensor *nj_sigmoid(nj_graph *g, nj_tensor *x);
nj_tensor *nj_exp(nj_graph *g, nj_tensor *x);
nj_tensor *nj_log(nj_graph *g, nj_tensor *x);
nj_tensor *nj_abs(nj_graph *g, nj_tensor *x);          /* d|x|/dx = sign(x), 0 at 0 */
nj_tensor *nj_sqrt(nj_graph *g, nj_tensor *x);
/* Clamp to [lo, hi]; gradient passes where lo <= x <= hi. */
nj_tensor *nj_clamp(nj_graph *g, nj_tensor *x, float lo, float hi);
/* s*x + t. */
nj_tensor *nj_affine(nj_graph *g, nj_tensor *x, float s, float t);

/* ---- binary elementwise with broadcasting -------------------------------
 * Shapes broadcast per dimension: sizes must be equal or one of them 1; the
 * output takes the larger.  Gradients are summed over broadcast dimensions. */
nj_tensor *nj_add(nj_graph *g, nj_tensor *a, nj_tensor *b);
nj_tensor *nj_sub(nj_graph *g, nj_tensor *a, nj_tensor *b);
nj_tensor *nj_mul(nj_graph *g, nj_tensor *a, nj_tensor *b);
nj_tensor *nj_div(nj_graph *g, nj_tensor *a, nj_tensor *b);
/* Elementwise minimum (same broadcasting); the gradient goes to the smaller
 * input (to `a` on ties). */
nj_tensor *nj_minimum(nj_graph *g, nj_tensor *a, nj_tensor *b);

/* ---- reductions --------------------------------------------------------- */
enum { NJ_AXIS_N = 1, NJ_AXIS_C = 2, NJ_AXIS_H = 4, NJ_AXIS_W = 8, NJ_AXIS_ALL = 15 };
/* Sum / mean over the axes in `axes` (bit mask above); reduced axes keep size 1. */
nj_tensor *nj_sum(nj_graph *g, nj_tensor *x, int axes);
nj_tensor *nj_mean(nj_graph *g, nj_tensor *x, int axes);

/* ---- normalisation ------------------------------------------------------ */
/* Batch normalisation (Ioffe & Szegedy 2015).  gamma, beta: 1×C×1×1 (may carry
 * grads).  run_mean, run_var: C floats owned by the caller.  In training mode
 * (nj_graph_training) it normalises with the batch mean and biased variance,
 * then updates run_* += momentum*(batch_stat - run_*), using the unbiased
 * variance for run_var (as PyTorch does).  In inference mode it uses run_*. */
nj_tensor *nj_batchnorm(nj_graph *g, nj_tensor *x, nj_tensor *gamma, nj_tensor *beta,
                        float *run_mean, float *run_var, float momentum, float eps);
/* ELU(batchnorm(x)) as one op (same arguments and modes): values and gradients
 * bit-identical to nj_elu(nj_batchnorm(...)), one activation buffer fewer. */
nj_tensor *nj_batchnorm_elu(nj_graph *g, nj_tensor *x, nj_tensor *gamma, nj_tensor *beta,
                            float *run_mean, float *run_var, float momentum, float eps);
/* Group normalisation (Wu & He 2018): C split into `groups` groups, statistics
 * per sample and group; gamma, beta 1×C×1×1. */
nj_tensor *nj_groupnorm(nj_graph *g, nj_tensor *x, int groups,
                        nj_tensor *gamma, nj_tensor *beta, float eps);
/* Folds inference-mode batch norm into the preceding conv, in place:
 * w (Cout×Cin×kh×kw floats), b (Cout floats, required) become the weights of a
 * single conv equal to conv→batchnorm. */
void nj_batchnorm_fold(float *w, float *b, int cout, int per_out,
                       const float *gamma, const float *beta,
                       const float *run_mean, const float *run_var, float eps);

#endif

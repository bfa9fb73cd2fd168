/* nn/conv_direct.h — convolution without im2col (internal to nn/).
 *
 * Register-blocked direct kernels for stride 1 and 2 and kernels of up to 64
 * taps: a block of output channels × 16–64 flat output positions is held in
 * vector registers while the input channels and taps stream past, reading a
 * per-thread band of the padded input staged as stride×stride phase planes.
 * The input gradient is the same correlation applied to the zero-extended
 * output gradient (per input phase for stride 2), with the padding folded
 * back; the weight gradient holds 9 (channel, tap) combinations × 16–32 output
 * channels in registers (below 16 outputs: 9 taps × 2 outputs of position
 * vectors).  Details in conv_direct.c.
 *
 * Outputs, dx and dW from 16 output channels do not depend on the thread
 * count: every element is summed by one thread in a fixed order.  Below 16
 * output channels dW is summed from per-thread partials (fixed items per
 * thread), so it is reproducible at a given thread count. */
#ifndef NJ_CONV_DIRECT_H
#define NJ_CONV_DIRECT_H
#include <stddef.h>

typedef struct nj_dconv {
    int n, cin, h, w, cout, kh, kw, stride, pad, reflect;
    int oh, ow;
} nj_dconv;

/* 1 when the direct kernels handle this geometry and are the faster choice
 * for the forward pass (backward = 0) or for dx and dW (backward = 1). */
int nj_dconv_suits(const nj_dconv *D, int backward);
/* Floats of scratch the forward / input-gradient pass needs for `threads` threads. */
size_t nj_dconv_forward_scratch(const nj_dconv *D, int threads);
size_t nj_dconv_dx_scratch(const nj_dconv *D, int threads);
/* y (N×Cout×OH×OW) = conv(x, w) + b (b may be NULL). */
void nj_dconv_forward(const nj_dconv *D, const float *x, const float *w, const float *b,
                      float *y, float *scratch, int par);
/* dx (N×Cin×H×W) += gradient of the convolution's input given dy (N×Cout×OH×OW). */
void nj_dconv_backward_dx(const nj_dconv *D, const float *dy, const float *w, float *dx,
                          float *scratch, int par);
size_t nj_dconv_dw_scratch(const nj_dconv *D, int threads);
/* dw (Cout×Cin×kh×kw) += gradient of the weights given x and dy. */
void nj_dconv_backward_dw(const nj_dconv *D, const float *x, const float *dy, float *dw,
                          float *scratch, int par);

#endif

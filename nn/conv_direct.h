/* nn/conv_direct.h — stride-1 convolution without im2col (internal to nn/).
 *
 * A register-blocked direct kernel: a block of output channels × 16–64 output
 * pixels of one row is held in vector registers while the input channels and
 * kernel taps stream past, reading a per-thread band of the padded input.
 * The input gradient of a stride-1 convolution is itself such a correlation
 * (of the zero-extended output gradient with the flipped, transposed kernel)
 * followed by folding the padding back onto the edge rows and columns, so the
 * same kernel serves both directions.  The weight gradient of a 3×3 kernel is
 * accumulated per (output channel pair, input channel) over 9 taps in
 * registers; other kernel sizes leave it to im2col + sgemm (nn/conv2d.c).
 *
 * Outputs and dx do not depend on the thread count: every element is summed by
 * one thread in a fixed order.  dW is summed from per-thread partials (fixed
 * items per thread), so it is reproducible at a given thread count. */
#ifndef NJ_CONV_DIRECT_H
#define NJ_CONV_DIRECT_H
#include <stddef.h>

typedef struct nj_dconv {
    int n, cin, h, w, cout, kh, kw, pad, reflect;
    int oh, ow;
} nj_dconv;

/* 1 when the direct kernels are the faster choice for this stride-1 geometry. */
int nj_dconv_suits(const nj_dconv *D);
/* Floats of scratch the forward / input-gradient pass needs for `threads` threads. */
size_t nj_dconv_forward_scratch(const nj_dconv *D, int threads);
size_t nj_dconv_dx_scratch(const nj_dconv *D, int threads);
/* y (N×Cout×OH×OW) = conv(x, w) + b (b may be NULL). */
void nj_dconv_forward(const nj_dconv *D, const float *x, const float *w, const float *b,
                      float *y, float *scratch, int par);
/* dx (N×Cin×H×W) += gradient of the convolution's input given dy (N×Cout×OH×OW). */
void nj_dconv_backward_dx(const nj_dconv *D, const float *dy, const float *w, float *dx,
                          float *scratch, int par);
/* 1 when nj_dconv_backward_dw handles this kernel size (3×3). */
int nj_dconv_dw_direct(const nj_dconv *D);
size_t nj_dconv_dw_scratch(const nj_dconv *D, int threads);
/* dw (Cout×Cin×3×3) += gradient of the weights given x and dy. */
void nj_dconv_backward_dw(const nj_dconv *D, const float *x, const float *dy, float *dw,
                          float *scratch, int par);

#endif

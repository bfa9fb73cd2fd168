/* train/export/export_c.h — pieces of the C export shared between its files:
 * the runtime text every emitted .c carries, and the scratch-memory plan. */
#ifndef NJ_EXPORT_C_H
#define NJ_EXPORT_C_H
#include <stdio.h>
#include <stddef.h>

/* Writes the runtime (layer struct, blocked convolution with zero/reflection
 * padding and stride 1/2, group norm, ELU/sigmoid, nearest x2 upsampling,
 * input standardisation, disparity → depth) into f.  `int8` selects the
 * integer runtime (int8 NHWC activations) instead of the float one; upper is
 * the symbol prefix of the header's macros (the size macros it uses).  The
 * int8 runtime carries the nkern kernels listed in kern. */
typedef struct nj_i8_kernel {
    int kp;     /* taps per row of weights */
    int rows;   /* 4: blocks of 4 output channels x 6 positions; 1: the head's 1 x 6 */
} nj_i8_kernel;
/* int8 tap counts up to this get a kernel with kp a constant (nd_kernel_<kp>),
 * larger ones share nd_kernel_any. */
#define NJ_I8_KP_CONST 256
void nj_export_c_runtime(FILE *f, int int8, const char *upper, const char *lower, const nj_i8_kernel *kern, int nkern);
/* The name of the int8 kernel for kp and rows (4 or 1). */
void nj_export_i8_kernel_name(int kp, int rows, char *buf, size_t size);

/* First-fit placement of buffers inside one scratch array (offsets and sizes
 * in bytes); `peak` is the highest end ever used. */
#define NJ_PLAN_MAX 32
typedef struct nj_scratch_plan {
    long off[NJ_PLAN_MAX], size[NJ_PLAN_MAX];
    int n;
    long peak;
} nj_scratch_plan;

/* Returns the offset of a new live buffer of `size` bytes, or -1 when more
 * than NJ_PLAN_MAX buffers would be live. */
long nj_plan_alloc(nj_scratch_plan *p, long size);
/* Ends the life of the buffer at `off`. */
void nj_plan_free(nj_scratch_plan *p, long off);

#endif

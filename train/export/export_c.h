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
 * the symbol prefix of the header's macros (the size macros it uses). */
void nj_export_c_runtime(FILE *f, int int8, const char *upper, const char *lower);

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

/* fuzz/fuzz_npy.c — libFuzzer target: data/npy.c's reader (nj_npy_read). */
#include "data/npy.h"
#include "fuzz/fuzz_input.h"
#include <stdlib.h>

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    const char *path = fuzz_input_path(data, size);
    if (!path) return 0;
    float *v = NULL;
    int shape[NJ_NPY_MAX_DIMS], ndim = 0;
    char err[512];
    if (nj_npy_read(path, &v, shape, &ndim, err, sizeof err) == NJ_NPY_OK) {
        size_t n = nj_npy_numel(shape, ndim);
        fuzz_touch_floats(v, n);
        free(v);
    }
    return 0;
}

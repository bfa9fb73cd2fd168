/* fuzz/fuzz_pfm.c — libFuzzer target: data/pfm.c's reader (nj_pfm_read). */
#include "data/depthio.h"
#include "fuzz/fuzz_input.h"
#include <stdlib.h>

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    const char *path = fuzz_input_path(data, size);
    if (!path) return 0;
    float *v = NULL;
    int w = 0, h = 0;
    char err[512];
    if (nj_pfm_read(path, &v, &w, &h, err, sizeof err) == 0) {
        fuzz_touch_floats(v, (size_t)w * (size_t)h);
        free(v);
    }
    return 0;
}

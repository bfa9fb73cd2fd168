/* fuzz/fuzz_png16.c — libFuzzer target: 16-bit PNG depth maps
 * (data/depthio.c, nj_depth_read with format png16, through stb_image). */
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
    if (nj_depth_read(path, NJ_DEPTH_PNG16, 1000.0f, &v, &w, &h, err, sizeof err) == 0) {
        fuzz_touch_floats(v, (size_t)w * (size_t)h);
        free(v);
    }
    return 0;
}

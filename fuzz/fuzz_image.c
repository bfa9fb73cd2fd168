/* fuzz/fuzz_image.c — libFuzzer target: frame decoding as the loader does it
 * (data/image.c: nj_image_probe, then nj_image_load through stb_image). */
#include "data/image.h"
#include "fuzz/fuzz_input.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    const char *path = fuzz_input_path(data, size);
    if (!path) return 0;
    char err[512];
    int w = 0, h = 0;
    if (nj_image_probe(path, &w, &h, err, sizeof err)) return 0;
    nj_image im;
    if (nj_image_load(path, &im, err, sizeof err) == 0) {
        fuzz_touch_floats(im.data, (size_t)3 * im.w * im.h);
        nj_image_free(&im);
    }
    return 0;
}

/* tests/ref/export_driver.c — a firmware-style caller of the C code emitted by
 * `nightjar export --format c`, used by tests/test_export.c (host gcc and the
 * aarch64 cross compiler under qemu) and bench/bench_export.c.  Strict C99,
 * only the generated header, stdio/stdlib/time.  (It lives in tests/ref/
 * because every C file directly in tests/ is linked into each test program.)
 *
 *   export_driver FRAMES.rgb COUNT OUT.f32 [REPEAT]
 * FRAMES.rgb: COUNT frames of NIGHTJAR_DEPTH_WIDTH x NIGHTJAR_DEPTH_HEIGHT
 * interleaved 8-bit RGB, back to back.  OUT.f32: COUNT depth maps, float32 in
 * the host's byte order.  With REPEAT, every frame is run REPEAT times and
 * the mean CPU seconds per frame is printed as "seconds_per_frame S", the
 * fastest single run as "min_seconds_per_frame S", with "scratch_bytes N". */
#include "nightjar_depth.h"
#include <stdio.h>
#include <stdlib.h>
#include <time.h>

#define PIXELS ((long)NIGHTJAR_DEPTH_WIDTH * NIGHTJAR_DEPTH_HEIGHT)

static float scratch[NIGHTJAR_DEPTH_SCRATCH_FLOATS];
static unsigned char rgb[PIXELS * 3];
static float depth[PIXELS];

static int fail(const char *what)
{
    fprintf(stderr, "export_driver: %s\n", what);
    return 1;
}

int main(int argc, char **argv)
{
    FILE *in, *out;
    long count, repeat, i, r;
    clock_t t0;
    double seconds = 0.0, fastest = 1e30, one;
    if (argc != 4 && argc != 5) return fail("usage: export_driver FRAMES.rgb COUNT OUT.f32 [REPEAT]");
    count = strtol(argv[2], NULL, 10);
    repeat = argc == 5 ? strtol(argv[4], NULL, 10) : 1;
    if (count < 1 || repeat < 1) return fail("COUNT and REPEAT must be positive");
    in = fopen(argv[1], "rb");
    out = fopen(argv[3], "wb");
    if (!in || !out) return fail("cannot open the input or the output file");
    for (i = 0; i < count; i++) {
        if (fread(rgb, 1, sizeof rgb, in) != sizeof rgb) return fail("short input file");
        for (r = 0; r < repeat; r++) {
            t0 = clock();
            if (nightjar_depth_run(rgb, scratch, depth, NULL) != 0) return fail("nightjar_depth_run failed");
            one = (double)(clock() - t0) / CLOCKS_PER_SEC;
            seconds += one;
            if (one < fastest) fastest = one;
        }
        if (fwrite(depth, sizeof depth[0], PIXELS, out) != (size_t)PIXELS) return fail("write failed");
    }
    fclose(in);
    if (fclose(out) != 0) return fail("write failed");
    if (argc == 5) {
        printf("seconds_per_frame %.6f\n", seconds / (double)(count * repeat));
        printf("min_seconds_per_frame %.6f\n", fastest);
        printf("scratch_bytes %ld\n", (long)NIGHTJAR_DEPTH_SCRATCH_BYTES);
    }
    return 0;
}

/* fuzz/fuzz_input.h — feeding a fuzz input to readers that take a path.
 *
 * The bytes go into one anonymous memory file (memfd_create) per process,
 * rewritten for every input and named "/proc/self/fd/N": nothing is written
 * to disk and nothing survives between runs. */
#ifndef NJ_FUZZ_INPUT_H
#define NJ_FUZZ_INPUT_H
#include <stddef.h>
#include <stdint.h>

/* The memory file's path after it holds exactly data[0..size-1]; NULL when
 * the memory file cannot be created or written (the target then skips). */
const char *fuzz_input_path(const uint8_t *data, size_t size);
/* Reads every one of the n floats a reader returned (so the sanitizers see
 * any element outside its allocation). */
void fuzz_touch_floats(const float *v, size_t n);

#endif

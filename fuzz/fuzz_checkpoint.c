/* fuzz/fuzz_checkpoint.c — libFuzzer target: checkpoints
 * (train/loop/checkpoint_load.c, nj_checkpoint_load).  The input is a checkpoint
 * without its trailing CRC-32: the target appends the correct CRC so the
 * fuzzer explores the parser behind the checksum (a wrong checksum is one
 * comparison, covered by the hostile-file tests). */
#include "fuzz/fuzz_input.h"
#include "train/loop/checkpoint.h"
#include "data/crc32.h"
#include <stdlib.h>
#include <string.h>

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    if (size > (16u << 20)) return 0;
    uint8_t *buf = malloc(size + 4);
    if (!buf) return 0;
    if (size) memcpy(buf, data, size);
    nj_crc32_ctx c;
    nj_crc32_init(&c);
    nj_crc32_update(&c, data, size);
    uint32_t crc = nj_crc32_value(&c);
    for (int i = 0; i < 4; i++) buf[size + i] = (uint8_t)(crc >> (8 * i));
    const char *path = fuzz_input_path(buf, size + 4);
    free(buf);
    if (!path) return 0;
    nj_model m;
    nj_train_config cfg;
    nj_train_state st;
    char err[1024];
    if (nj_checkpoint_load(path, &m, &cfg, &st, err, sizeof err) == 0) nj_model_free(&m);
    return 0;
}

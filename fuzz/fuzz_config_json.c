/* fuzz/fuzz_config_json.c — libFuzzer target: the training configuration
 * (train/loop/config_json.c via nj_train_config_load, which also runs the
 * cross-field checks). */
#include "fuzz/fuzz_input.h"
#include "train/loop/config.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    const char *path = fuzz_input_path(data, size);
    if (!path) return 0;
    nj_train_config c;
    nj_train_config_default(&c);
    char err[1024];
    nj_train_config_load(&c, path, err, sizeof err);
    return 0;
}

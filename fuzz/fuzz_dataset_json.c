/* fuzz/fuzz_dataset_json.c — libFuzzer target: the dataset description
 * (data/dataset.c, nj_dataset_parse; no file-system checks). */
#include "data/dataset.h"
#include "fuzz/fuzz_input.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    const char *path = fuzz_input_path(data, size);
    if (!path) return 0;
    nj_problems pr;
    nj_problems_init(&pr);
    nj_dataset ds;
    nj_dataset_parse(path, &ds, &pr);
    nj_dataset_free(&ds);
    nj_problems_free(&pr);
    return 0;
}

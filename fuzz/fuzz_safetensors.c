/* fuzz/fuzz_safetensors.c — libFuzzer target: safetensors files
 * (train/loop/safetensors_read.c from memory, then — for files that parse —
 * train/loop/safetensors_init.c loading them into a small fixed model). */
#include "fuzz/fuzz_input.h"
#include "train/loop/config.h"
#include "train/loop/safetensors.h"
#include <stdlib.h>

/* The model of tests/fuzz_corpus/fuzz_safetensors' seeds (kept tiny so the
 * seeds are a few kB): 1 stage, width 0.25, 1 scale, batch norm, no pose net. */
static nj_model *model(void)
{
    static nj_model m;
    static int ready;
    if (!ready) {
        nj_train_config c;
        nj_train_config_default(&c);
        c.model.stages = 1;
        c.model.width = 0.25f;
        c.model.scales = 1;
        c.model.pose = 0;
        char err[256];
        if (nj_model_init(&m, &c.model, err, sizeof err)) abort();
        ready = 1;
    }
    return &m;
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    nj_safetensors st;
    char err[1024];
    if (nj_safetensors_parse(&st, data, size, "fuzz", err, sizeof err)) return 0;
    volatile float sink = 0;
    for (int i = 0; i < st.n; i++)
        if (st.t[i].numel && (st.t[i].dtype_size == 4 || st.t[i].dtype_size == 1))
            sink += nj_safetensors_value(&st, &st.t[i], st.t[i].numel - 1);
    (void)sink;
    nj_safetensors_free(&st);
    const char *path = fuzz_input_path(data, size);
    if (path) nj_safetensors_init_model(path, model(), err, sizeof err);
    return 0;
}

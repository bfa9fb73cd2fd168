/* train/cli/commands.c — the table of subcommands (commands.h), shared by
 * main.c and the tests that run every command. */
#include "train/cli/commands.h"

const nj_command nj_commands[] = {
    {"check-data", "check a dataset description and its files", nj_check_data_main},
    {"synth", "render synthetic robot-yard sequences with exact ground truth", nj_synth_main},
    {"train", "train the depth and pose networks on a dataset", nj_train_main},
    {"eval", "depth and pose metrics of a model against two baselines", nj_eval_main},
    {"predict", "depth maps, pictures and point clouds for frames", nj_predict_main},
    {"map", "fuse a sequence's depth and motion into one 3D map and its picture", nj_map_main},
    {"export", "export a model as C99 code, ONNX or safetensors", nj_export_main},
    {"report", "a self-contained HTML page about a training run", nj_report_main},
    {"bench", "time one training step (speed and memory)", nj_bench_main},
};
const int nj_ncommands = (int)(sizeof nj_commands / sizeof nj_commands[0]);

/* train/cli/main.c — the ./nightjar command: dispatches subcommands. */
#include "train/cli/check_data.h"
#include "data/synth.h"
#include "train/loop/dist.h"
#include "train/bench/bench.h"
#include "train/loop/trainer.h"
#include "train/version.h"
#include <cblas.h>
#include <stdio.h>
#include <string.h>

typedef struct command {
    const char *name;
    const char *summary;
    int (*run)(int argc, char **argv);
} command;

static int cmd_version(int argc, char **argv);
static int cmd_help(int argc, char **argv);
int nj_eval_main(int argc, char **argv);
int nj_predict_main(int argc, char **argv);
int nj_export_main(int argc, char **argv);
int nj_report_main(int argc, char **argv);

static const command COMMANDS[] = {
    {"help", "show this help", cmd_help},
    {"version", "print the version and the libraries in use", cmd_version},
    {"check-data", "check a dataset description and its files", nj_check_data_main},
    {"synth", "render synthetic robot-yard sequences with exact ground truth", nj_synth_main},
    {"train", "train the depth and pose networks on a dataset", nj_train_main},
    {"eval", "depth and pose metrics of a model against two baselines", nj_eval_main},
    {"predict", "depth maps, pictures and point clouds for frames", nj_predict_main},
    {"export", "export a model as C99 code, ONNX or safetensors", nj_export_main},
    {"report", "a self-contained HTML page about a training run", nj_report_main},
    {"bench", "time one training step (speed and memory)", nj_bench_main},
};
#define NCOMMANDS (int)(sizeof COMMANDS / sizeof COMMANDS[0])

static void usage(FILE *f)
{
    fprintf(f,
        "nightjar — self-supervised depth and camera motion from unlabelled video, on CPU\n"
        "\n"
        "usage: nightjar <command> [options]\n"
        "\n"
        "commands:\n");
    for (int i = 0; i < NCOMMANDS; i++)
        fprintf(f, "  %-10s %s\n", COMMANDS[i].name, COMMANDS[i].summary);
    fprintf(f, "\n'nightjar <command> --help' describes a command's options.\n");
}

static int cmd_help(int argc, char **argv)
{
    (void)argc; (void)argv;
    usage(stdout);
    return 0;
}

static int cmd_version(int argc, char **argv)
{
    (void)argc; (void)argv;
    printf("nightjar %s\n", NJ_VERSION);
    printf("openblas: %s\n", openblas_get_config());
    printf("mpi: %s\n", nj_dist_built() ? "built in: data-parallel training with mpirun -np N ./nightjar train ..."
                                         : "not built in (make MPI=1 adds data-parallel training over Open MPI)");
    return 0;
}

int main(int argc, char **argv)
{
    if (argc < 2) {
        usage(stderr);
        return 2;
    }
    const char *name = argv[1];
    if (!strcmp(name, "--help") || !strcmp(name, "-h")) return cmd_help(argc - 1, argv + 1);
    if (!strcmp(name, "--version")) return cmd_version(argc - 1, argv + 1);
    for (int i = 0; i < NCOMMANDS; i++)
        if (!strcmp(name, COMMANDS[i].name)) return COMMANDS[i].run(argc - 1, argv + 1);
    fprintf(stderr, "nightjar: unknown command '%s' (see 'nightjar --help')\n", name);
    return 2;
}

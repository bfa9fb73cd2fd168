/* train/cli/main.c — the ./nightjar command: dispatches subcommands. */
#include "train/cli/commands.h"
#include "train/loop/loop.h"
#include "train/version.h"
#include <cblas.h>
#include <stdio.h>
#include <string.h>

static int cmd_version(int argc, char **argv);
static int cmd_help(int argc, char **argv);

/* help and version are the program's own; the subcommands come from commands.h */
static const nj_command OWN[] = {
    {"help", "show this help", cmd_help},
    {"version", "print the version and the libraries in use", cmd_version},
};
#define NOWN (int)(sizeof OWN / sizeof OWN[0])

/* The i-th of all NOWN + nj_ncommands commands, in listing order. */
static const nj_command *command_at(int i)
{
    return i < NOWN ? &OWN[i] : &nj_commands[i - NOWN];
}

static void usage(FILE *f)
{
    fprintf(f,
        "nightjar — self-supervised depth and camera motion from unlabelled video, on CPU\n"
        "\n"
        "usage: nightjar <command> [options]\n"
        "\n"
        "commands:\n");
    for (int i = 0; i < NOWN + nj_ncommands; i++)
        fprintf(f, "  %-10s %s\n", command_at(i)->name, command_at(i)->summary);
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
    for (int i = 0; i < NOWN + nj_ncommands; i++)
        if (!strcmp(name, command_at(i)->name)) return command_at(i)->run(argc - 1, argv + 1);
    fprintf(stderr, "nightjar: unknown command '%s' (see 'nightjar --help')\n", name);
    return 2;
}

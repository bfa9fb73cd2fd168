/* train/cli/commands.h — the subcommands of ./nightjar.  Each entry (one
 * train/cli/cmd_<name>.c a command) parses its options with the one parser
 * (options.h) and calls its module's library function; argv[0] is the
 * command's name and the result is the exit status (0 done, 1 failure,
 * 2 bad usage; check-data: 1 = problems found). */
#ifndef NJ_COMMANDS_H
#define NJ_COMMANDS_H

int nj_check_data_main(int argc, char **argv);
int nj_synth_main(int argc, char **argv);
int nj_train_main(int argc, char **argv);
int nj_eval_main(int argc, char **argv);
int nj_predict_main(int argc, char **argv);
int nj_export_main(int argc, char **argv);
int nj_report_main(int argc, char **argv);
int nj_bench_main(int argc, char **argv);
int nj_map_main(int argc, char **argv);

typedef struct nj_command {
    const char *name;
    const char *summary;     /* one line for `nightjar --help` */
    int (*run)(int argc, char **argv);
} nj_command;

/* Every subcommand above, in the order `nightjar --help` lists them. */
extern const nj_command nj_commands[];
extern const int nj_ncommands;

#endif

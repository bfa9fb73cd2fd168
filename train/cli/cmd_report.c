/* train/cli/cmd_report.c — `nightjar report`: options → nj_report_run (train/report/report.h). */
#include "train/cli/commands.h"
#include "train/cli/options.h"
#include "train/report/report.h"
#include <stdio.h>

static const char ABOUT[] =
    "  Writes one self-contained HTML page about a training run: summary, loss and\n"
    "  learning-rate charts, the health figures that need no ground truth (auto-mask\n"
    "  share, depth-order inversion, frame-gap figure), a gallery of validation frames at\n"
    "  up to three checkpoints, the metric table and, when a map was made, its top-down\n"
    "  picture.\n";

static const char EPILOGUE[] = "  Prints the page's path.\n";

int nj_report_main(int argc, char **argv)
{
    nj_report_options o = {NULL, NULL, NULL, NULL, NULL};
    nj_opt opts[] = {
        {.kind = NJ_OPT_ARG, .meta = "RUN_DIR", .help = "the run folder (train --out)", .required = 1,
         .str = &o.run_dir},
        {.name = "--out", .kind = NJ_OPT_STRING, .meta = "FILE", .help = "output", .dflt = "RUN_DIR/report.html",
         .str = &o.out},
        {.name = "--metrics", .kind = NJ_OPT_STRING, .meta = "FILE", .help = "`nightjar eval --out` JSON",
         .dflt = "RUN_DIR/metrics.json if present", .str = &o.metrics},
        {.name = "--export", .kind = NJ_OPT_STRING, .meta = "DIR", .help = "folder of exported models to list",
         .dflt = "RUN_DIR/export", .str = &o.export_dir},
        {.name = "--map", .kind = NJ_OPT_STRING, .meta = "DIR", .help = "`nightjar map --out` folder whose picture to show",
         .dflt = "RUN_DIR/map if present", .str = &o.map_dir},
    };
    nj_opt_spec spec = {.command = "report", .about = ABOUT, .epilogue = EPILOGUE,
                        .opts = opts, .nopts = NJ_OPT_COUNT(opts)};
    int rc = nj_opt_main(&spec, argc, argv);
    if (rc != NJ_OPT_OK) return nj_opt_status(rc);
    char err[1024];
    if (nj_report_run(&o, err, sizeof err)) {
        fprintf(stderr, "nightjar report: %s\n", err);
        return 1;
    }
    if (o.out) printf("%s\n", o.out);
    else printf("%s/report.html\n", o.run_dir);
    return 0;
}

/* train/cli/cmd_bench.c — `nightjar bench`: options → nj_bench_run (train/bench/bench.h). */
#include "train/cli/commands.h"
#include "train/cli/options.h"
#include "train/bench/bench.h"

static const char ABOUT[] =
    "  Times one training step of the default depth+pose nets (full loss, Adam) on synthetic\n"
    "  frames; ends with the line ms_per_step=X peak_rss_mb=Y gflops=Z.\n";

static const char EPILOGUE[] =
    "  --paced is for alternating step by step with another implementation\n"
    "  (bench/side_by_side.py).\n";

int nj_bench_main(int argc, char **argv)
{
    nj_bench_options o;
    nj_bench_options_default(&o);
    int size[2] = {o.w, o.h};
    nj_opt opts[] = {
        {.name = "--size", .kind = NJ_OPT_SIZE, .meta = "WxH", .lo = 8, .hi = 8192,
         .help = "frame size; W and H multiples of 2^stages of the nets", .size = size},
        {.name = "--batch", .kind = NJ_OPT_INT, .meta = "N", .lo = 1, .hi = 256, .help = "frames per step",
         .i = &o.batch},
        NJ_OPT_THREADS(&o.threads, 1024, NULL),
        {.name = "--steps", .kind = NJ_OPT_INT, .meta = "N", .lo = 1, .hi = 100000, .help = "timed steps",
         .i = &o.steps},
        {.name = "--warmup", .kind = NJ_OPT_INT, .meta = "N", .lo = 0, .hi = 1000,
         .help = "untimed steps before them", .i = &o.warmup},
        {.name = "--profile", .kind = NJ_OPT_FLAG,
         .help = "also the time shares of conv forward, conv backward, warping, SSIM", .flag = &o.profile},
        {.name = "--paced", .kind = NJ_OPT_FLAG,
         .help = "each step waits for a line on standard input and is followed by a\n"
                 "line step_ms=X; the closing figures wait for one more line or the\n"
                 "end of the input",
         .flag = &o.paced},
    };
    nj_opt_spec spec = {.command = "bench", .about = ABOUT, .epilogue = EPILOGUE,
                        .opts = opts, .nopts = NJ_OPT_COUNT(opts)};
    int rc = nj_opt_main(&spec, argc, argv);
    if (rc != NJ_OPT_OK) return nj_opt_status(rc);
    o.w = size[0];
    o.h = size[1];
    char err[1024] = "";
    rc = nj_bench_run(&o, err, sizeof err);
    if (rc) fprintf(stderr, "nightjar bench: %s\n", err);
    return rc == NJ_BENCH_BAD_SIZE ? 2 : rc ? 1 : 0;
}

/* train/cli/cmd_export.c — `nightjar export`: options → nj_export_run (train/export/export.h). */
#include "train/cli/commands.h"
#include "train/cli/options.h"
#include "train/export/export.h"

static const char *const FORMATS[] = {"c", "onnx", "safetensors", NULL};   /* nj_export_format order */
static const char *const WEIGHTS[] = {"f32", "int8", NULL};               /* index = int8 */

static const char ABOUT[] =
    "  c            PATH.c + PATH.h (PATH may end in .c): dependency-free C99 code computing the\n"
    "               depth map of one 8-bit RGB frame of a fixed size (libm only, no malloc,\n"
    "               no threads; the caller passes a scratch buffer sized in the header)\n"
    "  onnx         PATH: ONNX (opset 13) graph of the depth net: input \"image\" 1x3xHxW RGB\n"
    "               in [0,1], outputs \"disparity\" and \"depth\"\n"
    "  safetensors  PATH: every weight, with the architecture and training config as JSON\n"
    "  Batch norm is folded into the convs; group norm is kept as an explicit layer.\n";

int nj_export_main(int argc, char **argv)
{
    nj_export_options o = {.prefix = NJ_EXPORT_PREFIX, .calib_frames = 32};
    int format = 0, size[2] = {0, 0};
    nj_opt opts[] = {
        {.name = "--model", .kind = NJ_OPT_STRING, .meta = "CKPT", .help = "the trained model's checkpoint",
         .required = 1, .str = &o.model},
        {.name = "--format", .kind = NJ_OPT_CHOICE, .choices = FORMATS, .help = "what to write (see above)",
         .required = 1, .i = &format},
        {.name = "--weights", .kind = NJ_OPT_CHOICE, .choices = WEIGHTS,
         .help = "int8: per-output-channel symmetric int8 weights; the c export\n"
                 "computes in integers (int8 activations, int32 sums: needs\n"
                 "--calibrate), onnx and safetensors store the int8 weights",
         .i = &o.int8},
        {.name = "--calibrate", .kind = NJ_OPT_STRING, .meta = "DATASET",
         .help = "c int8: dataset JSON whose training frames set the activation\n"
                 "scales (each layer's 99.99th percentile of |x|)",
         .str = &o.calib_data},
        {.name = "--calibrate-frames", .kind = NJ_OPT_INT, .meta = "N", .lo = 1, .hi = 100000,
         .help = "frames of DATASET to calibrate on, spread over its training\nsequences", .i = &o.calib_frames},
        {.name = "--symbol-prefix", .kind = NJ_OPT_STRING, .meta = "NAME",
         .help = "c: prefix of every external name (PREFIXdepth_run, PREFIX\n"
                 "upper-cased for the macros and the header guard), so several\n"
                 "exports link into one program", .str = &o.prefix},
        {.name = "--size", .kind = NJ_OPT_SIZE, .meta = "WxH", .lo = 1, .hi = 16384,
         .help = "input size of the c and onnx exports", .dflt = "the training size", .size = size},
        {.name = "--out", .kind = NJ_OPT_STRING, .meta = "PATH", .help = "output file (c: PATH.c and PATH.h)",
         .required = 1, .str = &o.out},
    };
    nj_opt_spec spec = {.command = "export", .about = ABOUT, .opts = opts, .nopts = NJ_OPT_COUNT(opts)};
    int rc = nj_opt_main(&spec, argc, argv);
    if (rc != NJ_OPT_OK) return nj_opt_status(rc);
    o.format = (nj_export_format)format;
    if ((o.calib_data || nj_opt_find(&spec, "--calibrate-frames")->given) && !(o.format == NJ_EXPORT_C && o.int8))
        return nj_opt_status(nj_opt_fail(&spec, "--calibrate and --calibrate-frames go with --format c --weights int8"));
    if (nj_opt_find(&spec, "--symbol-prefix")->given && o.format != NJ_EXPORT_C)
        return nj_opt_status(nj_opt_fail(&spec, "--symbol-prefix goes with --format c"));
    o.width = size[0];
    o.height = size[1];
    char err[1024] = "";
    if (nj_export_run(&o, err, sizeof err) == 0) return 0;
    fprintf(stderr, "nightjar export: %s\n", err);
    return 1;
}

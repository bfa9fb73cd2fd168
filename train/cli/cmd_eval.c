/* train/cli/cmd_eval.c — `nightjar eval`: options → nj_eval_run (train/eval/eval.h). */
#include "train/cli/commands.h"
#include "train/cli/options.h"
#include "train/eval/eval.h"

static const char *const SPLITS[] = {"train", "val", "test", NULL};   /* nj_split order */

static const char ABOUT[] =
    "  Depth metrics (AbsRel, SqRel, RMSE, RMSE log, delta<1.25^k) over the ground-truth\n"
    "  pixels closer than the depth cap, for the model and three baselines on the same\n"
    "  pixels: a constant depth, the untrained network and the row-layout oracle (each pixel\n"
    "  at the median true depth of its image row: a model that only learned \"lower is\n"
    "  nearer\" cannot beat it).  Monocular models are scaled per image by the median ratio\n"
    "  (the spread of the ratios is reported), the oracle too; stereo-trained models are\n"
    "  evaluated metric, without scaling (the oracle is metric).\n"
    "  Also, for every method: AbsRel, delta<1.25 and the median of scaled prediction /\n"
    "  truth (range compression) per band of true depth (0-3, 3-6, 6-10, 10-20, 20-cap m),\n"
    "  on obstacle pixels (true depth more than 20% off its row's median) and, where the\n"
    "  sequences have \"lead_mask\", on the lead vehicle's pixels; per image, then the mean\n"
    "  over the images that have such pixels (pixels and images counted).\n";

static const char EPILOGUE[] =
    "  Where the split has ground-truth poses and the model a pose net: trajectory error\n"
    "  on 5-frame snippets with least-squares scale alignment (Zhou et al. 2017), and the\n"
    "  rotation error of each pair of neighbouring frames next to the true rotation; per camera\n"
    "  axis (pitch, yaw, roll) the mean and RMS error and the least-squares slope and\n"
    "  correlation of predicted on true (1 and 1: that axis is learned; 0: it is not).\n"
    "  A model trained on frame offsets of k and more is driven on every k-th frame (k the\n"
    "  smallest offset: the motion its pose net learnt), and its pairs are k frames apart.\n"
    "  Gap: the translation it gives frames 2k apart over the summed translation of their\n"
    "  two k-frame halves (truth about 1 on a straight route; about 0.5: the pose net gives\n"
    "  every gap the same motion, the one it learnt for the place, instead of measuring it).\n";

int nj_eval_main(int argc, char **argv)
{
    nj_eval_options o;
    nj_eval_options_default(&o);
    int split = (int)o.split;
    nj_opt opts[] = {
        {.name = "--model", .kind = NJ_OPT_STRING, .meta = "CKPT", .help = "the trained model's checkpoint",
         .required = 1, .str = &o.model},
        {.name = "--data", .kind = NJ_OPT_STRING, .meta = "DATASET.json", .help = "dataset description",
         .required = 1, .str = &o.data},
        {.name = "--split", .kind = NJ_OPT_CHOICE, .choices = SPLITS, .help = "the split to score", .i = &split},
        {.name = "--out", .kind = NJ_OPT_STRING, .meta = "FILE.json", .help = "also write the metrics as JSON",
         .str = &o.out},
        {.name = "--max-depth", .kind = NJ_OPT_FLOAT, .meta = "M", .lo = 0.01, .hi = 1e6,
         .help = "depth cap in metres: ground truth beyond it is left out", .f = &o.depth_cap},
        {.name = "--camera-height", .kind = NJ_OPT_NUMBER, .meta = "METRES", .lo = 1e-3, .hi = 1e4,
         .help = "metric scale from the camera's height above flat ground (a plane\n"
                 "fitted to the lower image region) instead of median scaling;\n"
                 "images where no ground plane is found are left out (counted)",
         .dflt = "", .d = &o.camera_height},
        NJ_OPT_THREADS(&o.threads, 1024, NULL),
    };
    nj_opt_spec spec = {.command = "eval", .about = ABOUT, .epilogue = EPILOGUE,
                        .opts = opts, .nopts = NJ_OPT_COUNT(opts)};
    int rc = nj_opt_main(&spec, argc, argv);
    if (rc != NJ_OPT_OK) return nj_opt_status(rc);
    o.split = (nj_split)split;
    char err[1024] = "";
    if (nj_eval_run(&o, err, sizeof err) == 0) return 0;
    fprintf(stderr, "nightjar eval: %s\n", err);
    return 1;
}

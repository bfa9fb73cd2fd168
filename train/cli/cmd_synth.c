/* train/cli/cmd_synth.c — `nightjar synth`: options → nj_synth_run (data/synth.h). */
#include "train/cli/commands.h"
#include "train/cli/options.h"
#include "data/synth.h"

static const char ABOUT[] =
    "  Renders synthetic robot-yard sequences seen from a moving ground vehicle, with\n"
    "  exact depth and poses, and writes DIR/dataset.json (split by sequence).  The output\n"
    "  is a deterministic function of the options.\n";

static const char EPILOGUE[] =
    "  The fleet nuisances (--lead-cart, --halts, --turns, --exposure-drift,\n"
    "  --sensor-noise) are off by default; without them the output does not change.\n";

int nj_synth_main(int argc, char **argv)
{
    nj_synth_config c;
    nj_synth_config_default(&c);
    int size[2] = {c.width, c.height}, fleet = 0;
    nj_opt opts[] = {
        {.name = "--out", .kind = NJ_OPT_STRING, .meta = "DIR", .help = "output folder, created if missing", .required = 1,
         .str = &c.out},
        {.name = "--seed", .kind = NJ_OPT_U64, .meta = "N", .help = "random seed", .u64 = &c.seed},
        {.name = "--frames", .kind = NJ_OPT_INT, .meta = "N", .lo = 3, .hi = 1000000,
         .help = "frames per sequence, 10 per second", .i = &c.frames},
        {.name = "--sequences", .kind = NJ_OPT_INT, .meta = "N", .lo = 1, .hi = 1000,
         .help = "number of sequences; the last is test, the one before val", .i = &c.sequences},
        {.name = "--stereo", .kind = NJ_OPT_FLAG, .help = "also render a right camera 0.12 m to the right",
         .flag = &c.stereo},
        {.name = "--size", .kind = NJ_OPT_SIZE, .meta = "WxH", .lo = 16, .hi = 4096, .help = "image size",
         .size = size},
        {.name = "--moving", .kind = NJ_OPT_FLAG, .help = "add a robot that moves independently of the scene",
         .flag = &c.moving},
        {.name = "--lead-cart", .kind = NJ_OPT_FLAG,
         .help = "a cart driven 6-7 m ahead at the camera's speed (static in the\n"
                 "image); its pixels as 8-bit masks in <seq>/lead/ (\"lead_mask\")",
         .flag = &c.lead_cart},
        {.name = "--halts", .kind = NJ_OPT_FLAG, .help = "at least two stops holding ~1 s per sequence of 8 s or more",
         .flag = &c.halts},
        {.name = "--turns", .kind = NJ_OPT_FLAG, .help = "sharp turns: heading rate up to 0.85-0.95 deg per frame",
         .flag = &c.turns},
        {.name = "--exposure-drift", .kind = NJ_OPT_FLAG, .help = "per-frame gain, a random walk in [0.85, 1.15]",
         .flag = &c.exposure_drift},
        {.name = "--sensor-noise", .kind = NJ_OPT_FLOAT, .meta = "SIGMA", .lo = 0, .hi = 1,
         .help = "Gaussian noise of std SIGMA (0..1 scale) per pixel and\nchannel (0 = off)",
         .f = &c.sensor_noise},
        {.name = "--fleet", .kind = NJ_OPT_FLAG,
         .help = "all of them: --lead-cart --halts --turns --exposure-drift\n"
                 "--sensor-noise 0.01 (unless given) --moving",
         .flag = &fleet},
    };
    nj_opt_spec spec = {.command = "synth", .about = ABOUT, .epilogue = EPILOGUE,
                        .opts = opts, .nopts = NJ_OPT_COUNT(opts)};
    int rc = nj_opt_main(&spec, argc, argv);
    if (rc != NJ_OPT_OK) return nj_opt_status(rc);
    c.width = size[0];
    c.height = size[1];
    if (fleet) {
        c.lead_cart = c.halts = c.turns = c.exposure_drift = c.moving = 1;
        if (!nj_opt_find(&spec, "--sensor-noise")->given) c.sensor_noise = 0.01f;
    }
    char err[1024];
    if (nj_synth_run(&c, err, sizeof err)) {
        fprintf(stderr, "nightjar synth: %s\n", err);
        return 1;
    }
    printf("synth: wrote %s/dataset.json\n", c.out);
    return 0;
}

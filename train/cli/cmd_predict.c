/* train/cli/cmd_predict.c — `nightjar predict`: options → nj_predict_run (train/eval/eval.h). */
#include "train/cli/commands.h"
#include "train/cli/options.h"
#include "train/eval/eval.h"
#include <math.h>

static const char ABOUT[] =
    "  For each frame NAME.ext (PNG or JPEG; a folder means all its frames) writes into DIR:\n"
    "    NAME.depth.npy    float32 HxW depth in metres, at the input's size\n"
    "    NAME.depth16.png  16-bit depth in millimetres (0 = no depth, saturates at 65.535 m)\n"
    "    NAME.preview.png  depth picture in the " NJ_COLORMAP_NAME " colour map: near = dark, far = light;\n"
    "                      log depth from the frame's 2nd (darkest) to its 98th percentile\n"
    "                      (lightest), printed per frame; slate blue = no depth\n"
    "    NAME.points.ply   with --ply: coloured point cloud (binary PLY, camera frame)\n";

int nj_predict_main(int argc, char **argv)
{
    nj_predict_options o;
    nj_predict_options_default(&o);
    double cam[4];
    nj_opt opts[] = {
        {.name = "--model", .kind = NJ_OPT_STRING, .meta = "CKPT", .help = "the trained model's checkpoint",
         .required = 1, .str = &o.model},
        {.name = "--input", .kind = NJ_OPT_STRING, .meta = "FRAME_OR_DIR", .help = "a frame, or a folder of frames",
         .required = 1, .str = &o.input},
        {.name = "--out", .kind = NJ_OPT_STRING, .meta = "DIR", .help = "output folder, created if missing", .required = 1,
         .str = &o.out},
        {.name = "--camera", .kind = NJ_OPT_NUMBERS, .meta = "fx,fy,cx,cy", .count = 4, .lo = -INFINITY,
         .hi = INFINITY, .help = "intrinsics in pixels at the input's size (fx, fy > 0), for the\n"
                                 "point cloud and the ground plane",
         .dflt = "fx = fy = 0.8*W, centred", .list = cam},
        {.name = "--ply", .kind = NJ_OPT_FLAG, .help = "also write the point cloud NAME.points.ply", .flag = &o.ply},
        {.name = "--camera-height", .kind = NJ_OPT_NUMBER, .meta = "METRES", .lo = 1e-3, .hi = 1e4,
         .help = "metric scale from the camera's height above flat ground,\n"
                 "for models trained on monocular video (depth up to scale)",
         .dflt = "", .d = &o.camera_height},
        NJ_OPT_THREADS(&o.threads, 1024, NULL),
    };
    nj_opt_spec spec = {.command = "predict", .about = ABOUT, .opts = opts, .nopts = NJ_OPT_COUNT(opts)};
    int rc = nj_opt_main(&spec, argc, argv);
    if (rc != NJ_OPT_OK) return nj_opt_status(rc);
    if (nj_opt_find(&spec, "--camera")->given) {
        o.camera = (nj_camera){(float)cam[0], (float)cam[1], (float)cam[2], (float)cam[3]};
        if (!nj_camera_valid(o.camera))
            return nj_opt_status(nj_opt_bad_value(&spec, "--camera", "with fx, fy > 0"));
        o.has_camera = 1;
    }
    char err[1024] = "";
    if (nj_predict_run(&o, err, sizeof err) == 0) return 0;
    fprintf(stderr, "nightjar predict: %s\n", err);
    return 1;
}

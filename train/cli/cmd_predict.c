/* train/cli/cmd_predict.c — `nightjar predict`: options → nj_predict_run (train/eval/eval.h). */
#include "train/cli/commands.h"
#include "train/cli/options.h"
#include "train/eval/eval.h"
#include <math.h>
#include <stdlib.h>
#include <string.h>

static const char ABOUT[] =
    "  For each frame NAME.ext (PNG or JPEG; a folder means all its frames) writes into DIR:\n"
    "    NAME.depth.npy    float32 HxW depth in metres, at the input's size\n"
    "    NAME.depth16.png  16-bit depth in millimetres (0 = no depth, saturates at 65.535 m)\n"
    "    NAME.preview.png  depth picture in the " NJ_COLORMAP_NAME " colour map: near = dark, far = light;\n"
    "                      log depth from the frame's 2nd (darkest) to its 98th percentile\n"
    "                      (lightest), printed per frame; slate blue = no depth\n"
    "    NAME.points.ply   with --ply: coloured point cloud (binary PLY, camera frame)\n";

/* "fx,fy,cx,cy[,coefficients]" into o's camera and lens: 4 numbers (a pinhole,
 * or an equidistant fisheye without coefficients), 8 or 9 (radial-tangential
 * k1,k2,p1,p2[,k3]), or with --fisheye 4 or 8 (k1..k4).  Returns 0 or -1. */
static int parse_camera(const char *text, int fisheye, nj_predict_options *o)
{
    double v[10];
    int n = 0;
    const char *c = text;
    while (n < 10) {
        char *end;
        v[n] = strtod(c, &end);
        if (end == c || !isfinite(v[n])) return -1;
        n++;
        if (*end == 0) break;
        if (*end != ',') return -1;
        c = end + 1;
    }
    if (*c && n == 10) return -1;
    if (fisheye ? (n != 4 && n != 8) : (n != 4 && n != 8 && n != 9)) return -1;
    o->camera = (nj_camera){(float)v[0], (float)v[1], (float)v[2], (float)v[3]};
    memset(&o->lens, 0, sizeof o->lens);
    if (fisheye || n > 4) o->lens.kind = fisheye ? NJ_LENS_FISHEYE : NJ_LENS_RADTAN;
    for (int i = 4; i < n; i++) o->lens.c[i - 4] = v[i];
    return nj_camera_valid(o->camera) ? 0 : -1;
}

int nj_predict_main(int argc, char **argv)
{
    nj_predict_options o;
    nj_predict_options_default(&o);
    const char *cam = NULL;
    int fisheye = 0;
    nj_opt opts[] = {
        {.name = "--model", .kind = NJ_OPT_STRING, .meta = "CKPT", .help = "the trained model's checkpoint",
         .required = 1, .str = &o.model},
        {.name = "--input", .kind = NJ_OPT_STRING, .meta = "FRAME_OR_DIR", .help = "a frame, or a folder of frames",
         .required = 1, .str = &o.input},
        {.name = "--out", .kind = NJ_OPT_STRING, .meta = "DIR", .help = "output folder, created if missing", .required = 1,
         .str = &o.out},
        {.name = "--camera", .kind = NJ_OPT_STRING, .meta = "fx,fy,cx,cy[,k1,k2,p1,p2[,k3]]",
         .help = "intrinsics in pixels at the input's size (fx, fy > 0), for the\n"
                 "point cloud and the ground plane; with lens distortion\n"
                 "coefficients (radial-tangential, Brown 1966) every frame is\n"
                 "first undistorted to a pinhole view that keeps only pixels\n"
                 "inside the frame, and all outputs are in that view (its\n"
                 "intrinsics are printed)",
         .dflt = "fx = fy = 0.8*W, centred", .str = &cam},
        {.name = "--fisheye", .kind = NJ_OPT_FLAG,
         .help = "--camera is an equidistant fisheye (Kannala & Brandt 2006):\n"
                 "fx,fy,cx,cy[,k1,k2,k3,k4]",
         .flag = &fisheye},
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
    if (fisheye && !cam) return nj_opt_status(nj_opt_fail(&spec, "--fisheye needs --camera"));
    if (cam) {
        if (parse_camera(cam, fisheye, &o))
            return nj_opt_status(nj_opt_bad_value(&spec, "--camera",
                                                  fisheye ? "with 4 or 8 numbers (fisheye k1..k4), fx, fy > 0"
                                                          : "with 4, 8 or 9 numbers, fx, fy > 0"));
        o.has_camera = 1;
    }
    char err[1024] = "";
    if (nj_predict_run(&o, err, sizeof err) == 0) return 0;
    fprintf(stderr, "nightjar predict: %s\n", err);
    return 1;
}

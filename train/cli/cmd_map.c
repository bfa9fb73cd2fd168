/* train/cli/cmd_map.c — `nightjar map`: options → nj_map_run (train/map/map.h). */
#include "train/cli/commands.h"
#include "train/cli/options.h"
#include "train/eval/eval.h"
#include "train/map/map.h"
#include <stdio.h>

static const char ABOUT[] =
    "  Drives one sequence through the depth and pose networks (or, with --truth, takes its\n"
    "  ground-truth depth and poses), chains the camera motions into a trajectory and fuses\n"
    "  every depth map into a truncated signed distance volume (Curless & Levoy 1996) of\n"
    "  sparse 8^3-voxel blocks; writes into DIR:\n"
    "    " NJ_MAP_MESH "        the surface by marching cubes (binary PLY, vertex colours, world frame)\n"
    "    " NJ_MAP_PATH "  the camera centres as a PLY line set\n"
    "    " NJ_MAP_PICTURE "     the surface seen from above, shaded by height (" NJ_COLORMAP_NAME " map: low =\n"
    "                    dark), the path from the disc (start) to the square (end), a scale bar\n"
    "    " NJ_MAP_SUMMARY "        the figures (scale, blocks, memory, drift per 10 m when the\n"
    "                    sequence has poses); `nightjar report` shows the picture when the\n"
    "                    map folder is RUN/map\n"
    "  Scale of a monocular model: one factor for the whole sequence, from --camera-height (the\n"
    "  median of the ground-plane scales) or else the median ratio to ground-truth depth when the\n"
    "  sequence has it; otherwise the map is in the model's units.  Stereo-trained models are\n"
    "  metric.  A model trained on frames k apart (the smallest of data.frame_offsets) maps every k-th frame.\n"
    "  The map starts at the first ground-truth pose when there is one, else at the first\n"
    "  camera.  Memory: fusing stops with an error when the blocks would pass --memory-mb.\n";

static const char EPILOGUE[] =
    "Walls that double, ground that bends and obstacles that smear in the picture show scale\n"
    "drift, rotation error and bad depth.  Depth from a learned model is an estimate, not a\n"
    "certified safety sensor.\n";

int nj_map_main(int argc, char **argv)
{
    nj_map_options o;
    nj_map_options_default(&o);
    int truth = 0, untrained = 0;
    nj_opt opts[] = {
        {.name = "--model", .kind = NJ_OPT_STRING, .meta = "CKPT", .help = "the trained model's checkpoint",
         .str = &o.model},
        {.name = "--truth", .kind = NJ_OPT_FLAG,
         .help = "use the sequence's ground-truth depth and poses instead of a\nmodel (a check of the mapping itself)",
         .flag = &truth},
        {.name = "--untrained", .kind = NJ_OPT_FLAG,
         .help = "use the model's architecture with freshly initialised weights\n(the baseline a trained model must beat)",
         .flag = &untrained},
        {.name = "--data", .kind = NJ_OPT_STRING, .meta = "DATASET_JSON", .help = "the dataset description",
         .required = 1, .str = &o.data},
        {.name = "--sequence", .kind = NJ_OPT_STRING, .meta = "NAME", .help = "the sequence to map (its \"name\")",
         .required = 1, .str = &o.sequence},
        {.name = "--out", .kind = NJ_OPT_STRING, .meta = "DIR", .help = "output folder, created if missing",
         .required = 1, .str = &o.out},
        {.name = "--voxel", .kind = NJ_OPT_FLOAT, .meta = "METRES", .lo = 0.005, .hi = 10,
         .help = "voxel edge length", .f = &o.voxel},
        {.name = "--band", .kind = NJ_OPT_FLOAT, .meta = "VOXELS", .lo = 1.5, .hi = 64,
         .help = "truncation distance in voxels: signed distances are kept\nwithin this much of each observed surface",
         .f = &o.band_voxels},
        {.name = "--reach", .kind = NJ_OPT_FLOAT, .meta = "METRES", .lo = 0.1, .hi = 1000,
         .help = "depths beyond are not fused (far depth is the least certain)", .f = &o.max_depth},
        {.name = "--extent", .kind = NJ_OPT_FLOAT, .meta = "METRES", .lo = 1, .hi = 10000,
         .help = "half the side of the cube around the first camera that the\nmap may fill", .f = &o.extent},
        {.name = "--memory-mb", .kind = NJ_OPT_NUMBER, .meta = "MIB", .lo = 0.001, .hi = 1e7,
         .help = "memory cap of the volume's blocks; a map that needs more is\nrefused", .d = &o.memory_mb},
        {.name = "--camera-height", .kind = NJ_OPT_NUMBER, .meta = "METRES", .lo = 1e-3, .hi = 1e4,
         .help = "metric scale from the camera's height above flat ground,\nfor models trained on monocular video",
         .dflt = "", .d = &o.camera_height},
        NJ_OPT_THREADS(&o.threads, 1024, NULL),
    };
    nj_opt_spec spec = {.command = "map", .about = ABOUT, .epilogue = EPILOGUE, .opts = opts,
                        .nopts = NJ_OPT_COUNT(opts)};
    int rc = nj_opt_main(&spec, argc, argv);
    if (rc != NJ_OPT_OK) return nj_opt_status(rc);
    if (truth + untrained > 1) return nj_opt_status(nj_opt_fail(&spec, "--truth and --untrained exclude each other"));
    if (!truth && !o.model) return nj_opt_status(nj_opt_fail(&spec, "--model CKPT is required (or --truth)"));
    if (truth && o.model) return nj_opt_status(nj_opt_fail(&spec, "--truth takes no --model"));
    o.source = truth ? NJ_MAP_TRUTH : untrained ? NJ_MAP_UNTRAINED : NJ_MAP_MODEL;
    char err[1024] = "";
    nj_map_result res;
    if (nj_map_run(&o, &res, err, sizeof err)) {
        fprintf(stderr, "nightjar map: %s\n", err);
        return 1;
    }
    printf("map: %d frames, scale x%.4g%s, %ld blocks (%.1f MiB), %ld vertices, %ld triangles, path %.2f %s\n",
           res.frames, res.scale, res.metric ? "" : " (model units)", res.blocks, res.memory_mb, res.vertices,
           res.triangles, res.path_length, res.metric ? "m" : "model units");
    printf("fusion: %.1f ms per frame\n", res.frames ? 1e3 * res.fuse_seconds / res.frames : 0.0);
    printf("wrote %s/{%s,%s,%s,%s}\n", o.out, NJ_MAP_MESH, NJ_MAP_PATH, NJ_MAP_PICTURE, NJ_MAP_SUMMARY);
    printf("caution: depth from a learned model is an estimate, not a certified safety sensor.\n");
    return 0;
}

/* train/map/map.h — from depth and motion to a map: `nightjar map` fuses a
 * whole sequence into one 3D model.
 *
 *   tsdf.c     truncated signed distance volume (Curless & Levoy 1996) in
 *              sparse hashed blocks of 8³ voxels, with a block budget
 *   mcubes.c   triangle mesh of its zero level set by marching cubes
 *              (Lorensen & Cline 1987); the case table is built by our own code
 *   topdown.c  the top-down picture: surface seen from above, shaded by height,
 *              with the trajectory and a scale bar
 *   map.c      the command: depth and motion over a sequence (model or ground
 *              truth), one scale, the chained trajectory, fusion, the outputs
 *
 * Voxel (i, j, k) is centred at world (i, j, k)·voxel; block (a, b, c) holds
 * voxels 8a..8a+7 (and so on).  Values are signed distances divided by the
 * truncation band, in [−1, 1]: positive in front of the surface (free space
 * seen by the camera), negative behind it.  The command line is
 * train/cli/cmd_map.c. */
#ifndef NJ_MAP_H
#define NJ_MAP_H
#include "data/image.h"
#include "nn/geom/camera.h"
#include <stddef.h>

#define NJ_MAP_BLOCK 8                 /* voxels per block side */
#define NJ_MAP_PICTURE "topdown.png"   /* file names inside the map folder */
#define NJ_MAP_MESH "mesh.ply"
#define NJ_MAP_PATH "trajectory.ply"
#define NJ_MAP_SUMMARY "map.json"

/* ---- the volume --------------------------------------------------------------- */

typedef struct nj_tsdf_params {
    float voxel;            /* voxel size (metres or model units) */
    float band;             /* truncation distance, same unit (> voxel) */
    float max_depth;        /* depths beyond are not fused (0: no limit) */
    float lo[3], hi[3];     /* world box that may hold voxels (the grid's extent) */
    long max_blocks;        /* block budget: fusing past it fails */
} nj_tsdf_params;

typedef struct nj_tsdf nj_tsdf;

/* Bytes one block takes (voxels, key and bookkeeping): the unit of the budget. */
size_t nj_tsdf_block_bytes(void);
/* Returns 0, or -1 with a message (bad parameters, extent beyond ±2^19 voxels). */
int nj_tsdf_create(nj_tsdf **t, const nj_tsdf_params *p, char *err, size_t errlen);
void nj_tsdf_free(nj_tsdf *t);
long nj_tsdf_blocks(const nj_tsdf *t);
/* Fuses one depth map (w×h z-depths along the optical axis; ≤ 0 or non-finite
 * = none) seen by a camera with intrinsics cam and camera-to-world pose c2w
 * (row-major 3×4 [R | c]); `colour` (w×h, may be NULL) colours the voxels.
 * Each observation has weight 1 (see tsdf.c).  Returns 0, or -1 with a
 * message when the block budget would be exceeded (the volume is then
 * unchanged by the frame's new blocks' values but keeps them allocated). */
int nj_tsdf_fuse(nj_tsdf *t, const float *depth, int w, int h, const nj_image *colour, nj_camera cam,
                 const double c2w[12], char *err, size_t errlen);
/* Sets one voxel's value and weight directly (a volume given as values: tests,
 * comparisons).  Returns 0 or -1 (outside the extent, or over budget). */
int nj_tsdf_set(nj_tsdf *t, int i, int j, int k, float value, float weight);
/* Value and weight of a voxel; weight 0 where nothing was fused. */
void nj_tsdf_get(const nj_tsdf *t, int i, int j, int k, float *value, float *weight);

/* ---- the mesh ------------------------------------------------------------------ */

typedef struct nj_mesh {
    float *xyz;             /* nv world points */
    unsigned char *rgb;     /* nv colours */
    int *tri;               /* nt triangles, 3 vertex indices each, normal towards the free side */
    long nv, nt;
} nj_mesh;

/* Marching cubes over every cell whose 8 corners were observed (weight > 0):
 * one vertex per crossed grid edge, shared by the cells around it, placed by
 * linear interpolation of the two values at the zero crossing.  Returns 0,
 * or -1 with a message (out of memory). */
int nj_tsdf_mesh(const nj_tsdf *t, nj_mesh *m, char *err, size_t errlen);
void nj_mesh_free(nj_mesh *m);

/* ---- the picture --------------------------------------------------------------- */

/* The top-down picture: mesh vertices projected along `down` (unit world
 * vector) onto the plane spanned by `right` and `ahead` (unit, orthogonal to
 * down), each pixel coloured by the highest surface above it (bracken map,
 * low = dark), the camera path (n centres, 3 each) as a line with a start
 * disc and an end square, and a scale bar labelled in `unit`.  A pixel
 * covers at least `cell` (the voxel size: every surface voxel then colours
 * its pixel) and the longer side has at most 1000 pixels.  *out is
 * allocated here (planar RGB as data/image.h).  Returns 0 or -1. */
int nj_map_picture(const nj_mesh *m, const double *path, int n, const double down[3], const double right[3],
                   const double ahead[3], double cell, const char *unit, nj_image *out, char *err, size_t errlen);

/* ---- the command --------------------------------------------------------------- */

typedef enum { NJ_MAP_MODEL = 0, NJ_MAP_UNTRAINED = 1, NJ_MAP_TRUTH = 2 } nj_map_source;

typedef struct nj_map_options {
    const char *model;      /* checkpoint (sources model, untrained) */
    const char *data;       /* dataset description */
    const char *sequence;   /* the sequence's name */
    const char *out;        /* output folder (created) */
    nj_map_source source;
    float voxel, band_voxels, max_depth, extent;   /* metres; band in voxels */
    double memory_mb;       /* block budget in MiB */
    double camera_height;   /* monocular scale from the ground plane; 0 = not given */
    int threads;            /* 0 = all cores */
} nj_map_options;

/* Defaults: the values NJ_MAP_DEFAULT_* below. */
#define NJ_MAP_DEFAULT_VOXEL 0.05f
#define NJ_MAP_DEFAULT_BAND 4.0f
#define NJ_MAP_DEFAULT_MAX_DEPTH 20.0f
#define NJ_MAP_DEFAULT_EXTENT 60.0f
#define NJ_MAP_DEFAULT_MEMORY_MB 1024.0
#define NJ_MAP_MIN_FRAMES 2
void nj_map_options_default(nj_map_options *o);

/* Figures of a finished map (also in OUT/map.json). */
typedef struct nj_map_result {
    int frames;             /* frames fused (every frame_step-th of the sequence) */
    double scale;           /* factor applied to the model's depth and motion (1 for truth/stereo) */
    long blocks, vertices, triangles;
    double memory_mb;       /* the blocks' memory */
    double path_length;     /* metres (model units when unscaled) */
    double fuse_seconds;    /* wall time inside nj_tsdf_fuse, all frames */
    int metric;             /* 1: metres */
} nj_map_result;

/* Runs the map of one sequence and writes OUT/mesh.ply, OUT/trajectory.ply,
 * OUT/topdown.png and OUT/map.json.  Returns 0, or -1 with a one-line message
 * naming the file or sequence (nothing is written then). */
int nj_map_run(const nj_map_options *o, nj_map_result *res, char *err, size_t errlen);

#endif

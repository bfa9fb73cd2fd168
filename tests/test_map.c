/* tests/test_map.c — `nightjar map`: the volume, the mesh, the fused map of a
 * synthetic sequence and the command's refusals.
 *
 * Sources of truth:
 *   mcubes_*        scikit-image's skimage.measure.marching_cubes (methods
 *                   'lorensen' and 'lewiner') on the same volume, through
 *                   tests/ref/mcubes_ref.py (vertex sets matched with SciPy's
 *                   cKDTree, the PLY parsed by the script's own reader);
 *   map_truth_*     the synthetic renderer's analytic scene (data/scene.h
 *                   nj_scene_distance on nj_synth_yard: the geometry the
 *                   frames were ray-cast from) and the poses file synth wrote;
 *   map_refuses_*   the inputs the test builds (too few frames, a cap too
 *                   small, a pose with a scaled rotation);
 *   map_report_*    the report's HTML text. */
#include "tests/check.h"
#include "tests/e2e_support.h"
#include "tests/test_data_util.h"
#include "data/npy.h"
#include "data/poses.h"
#include "data/scene_gen.h"
#include "data/synth.h"
#include "train/map/map.h"
#include "train/measure/pointcloud.h"
#include "train/report/report.h"
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

/* ---- marching cubes against scikit-image ------------------------------------------ */

/* A smooth field with two blobs and a ripple, never exactly zero at a voxel,
 * over a box that starts at negative indices and spans several blocks. */
static float field_at(int i, int j, int k)
{
    double x = i + 0.13, y = j - 0.21, z = k + 0.07;
    double a = sqrt((x - 2) * (x - 2) + (y - 1) * (y - 1) + (z - 3) * (z - 3)) - 6.3;
    double b = sqrt((x - 9) * (x - 9) + (y - 6) * (y - 6) + (z - 10) * (z - 10)) - 4.6;
    double v = fmin(a, b) + 0.9 * sin(0.7 * x) * cos(0.5 * y + 0.3 * z);
    return (float)(v / 4.0);
}

static void test_mcubes(const char *argv0, const char *dir)
{
    enum { I0 = -7, J0 = -5, K0 = -6, NX = 25, NY = 21, NZ = 27 };
    nj_tsdf_params p = {.voxel = 1, .band = 4, .max_depth = 0, .lo = {-100, -100, -100}, .hi = {100, 100, 100},
                        .max_blocks = 1000};
    nj_tsdf *t;
    char err[512];
    float *f = malloc(sizeof(float) * NX * NY * NZ);
    if (!f || nj_tsdf_create(&t, &p, err, sizeof err)) {
        check(0, "mcubes_skimage_lorensen", "setup: %s", f ? err : "out of memory");
        free(f);
        return;
    }
    for (int a = 0; a < NX; a++)
        for (int b = 0; b < NY; b++)
            for (int c = 0; c < NZ; c++) {
                float v = field_at(I0 + a, J0 + b, K0 + c);
                f[(a * NY + b) * NZ + c] = v;
                nj_tsdf_set(t, I0 + a, J0 + b, K0 + c, v, 1.0f);
            }
    nj_mesh m;
    char field[300], ply[300], out[300], script[600], args[1400];
    snprintf(field, sizeof field, "%s/field.npy", dir);
    snprintf(ply, sizeof ply, "%s/mesh.ply", dir);
    snprintf(out, sizeof out, "%s/mcubes.npy", dir);
    int shape[3] = {NX, NY, NZ};
    int rc = nj_tsdf_mesh(t, &m, err, sizeof err);
    nj_ply_mesh pm = {"test", m.nv, m.nt, 0, m.xyz, m.rgb, m.tri, NULL};
    if (!rc) rc = nj_npy_write(field, f, shape, 3, err, sizeof err) || nj_ply_write_mesh(ply, &pm, err, sizeof err);
    tdu_ref_path(argv0, "mcubes_ref.py", script, sizeof script);
    snprintf(args, sizeof args, "'%s' '%s' %d %d %d '%s'", field, ply, I0, J0, K0, out);
    float *r = NULL;
    int rshape[4], nd = 0;
    if (!rc) rc = tdu_python(script, args) || nj_npy_read(out, &r, rshape, &nd, err, sizeof err) < 0 ||
                  rshape[0] != 13;
    if (rc) {
        check(0, "mcubes_skimage_lorensen", "could not run %s (%s)", script, err);
    } else {
        /* vertices lie on grid edges at the linear zero crossing in both
         * programs: they must agree to float rounding (1e-4 voxel) */
        checkv(r[2] == 1 && r[0] == r[3] && r[5] <= 1e-4 && r[6] <= 1e-4, "mcubes_skimage_lorensen",
               "PLY ok %g, vertices %g vs skimage %g, max distance ours->skimage %.2g, skimage->ours %.2g voxel",
               r[2], r[0], r[3], r[5], r[6]);
        /* triangulations differ only in ambiguous cells: same area within 0.5% */
        checkv(fabs(r[7] - r[8]) <= 5e-3 * r[8] && r[0] > 1000, "mcubes_skimage_area",
               "area %.3f vs skimage lorensen %.3f (faces %g vs %g), lewiner %.3f", r[7], r[8], r[1], r[4], r[12]);
        /* Lewiner et al. 2003 places the same edge vertices (and may add cell-interior ones) */
        checkv(r[10] <= 1e-4, "mcubes_skimage_lewiner_vertices",
               "max distance ours->lewiner %.2g voxel (lewiner %g vertices, ours %g; lewiner->ours %.2g)", r[10],
               r[9], r[0], r[11]);
    }
    free(r);
    free(f);
    nj_mesh_free(&m);
    nj_tsdf_free(t);
}

int main(int argc, char **argv)
{
    (void)argc;
    char dir[64];
    if (tdu_tmpdir(dir, sizeof dir)) {
        check(0, "map_setup", "no scratch folder");
        return test_exit();
    }
    test_mcubes(argv[0], dir);
    tdu_rmtree(dir);
    return test_exit();
}

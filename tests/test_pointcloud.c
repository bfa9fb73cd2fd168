/* tests/test_pointcloud.c — binary PLY point clouds (train/measure/pointcloud.c).
 *
 * Source of truth: an independent reader in NumPy (tests/ref/ply_read.py via
 * /usr/bin/python3) that parses the header by the PLY format description,
 * reads the binary records with a structured dtype, and compares them with
 * the points it computes itself from the same depth map, colours and
 * intrinsics.  Checks: header valid, vertex count (invalid depths — 0,
 * negative, NaN, ±inf — skipped), coordinates, colours, no trailing bytes;
 * the count returned by the writer; no temporary file left; a bad camera is
 * refused with a one-line message.
 */
#include "data/npy.h"
#include "nn/rng.h"
#include "tests/check.h"
#include "tests/test_data_util.h"
#include "train/measure/pointcloud.h"
#include <dirent.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

enum { W = 37, H = 23 };

static int count_entries(const char *dir)
{
    DIR *d = opendir(dir);
    int n = 0;
    if (!d) return -1;
    for (struct dirent *e; (e = readdir(d));) n += e->d_name[0] != '.';
    closedir(d);
    return n;
}

static void fill(nj_rng *r, float *depth, nj_image *im)
{
    const float special[5] = {0.0f, -1.0f, NAN, INFINITY, -INFINITY};
    for (int i = 0; i < W * H; i++) {
        depth[i] = i % 11 == 3 ? special[(i / 11) % 5] : (float)(0.2 + 60 * nj_rng_uniform(r));
        for (int c = 0; c < 3; c++) im->data[c * W * H + i] = (float)nj_rng_below(r, 256) / 255.0f;
    }
}

int main(int argc, char **argv)
{
    (void)argc;
    char dir[64], script[1024], args[2048], ply[160], dnpy[160], inpy[160], out[160], err[512] = "";
    if (tdu_tmpdir(dir, sizeof dir)) return check(0, "scratch folder", "mkdtemp failed"), test_exit();
    nj_rng r;
    nj_rng_seed(&r, 17);
    static float depth[W * H];
    nj_image im;
    nj_image_alloc(&im, W, H);
    fill(&r, depth, &im);
    nj_camera cam = {41.5f, 39.25f, 17.8f, 11.1f};
    snprintf(ply, sizeof ply, "%s/cloud.ply", dir);
    snprintf(dnpy, sizeof dnpy, "%s/depth.npy", dir);
    snprintf(inpy, sizeof inpy, "%s/image.npy", dir);
    snprintf(out, sizeof out, "%s/result.npy", dir);
    long count = -1;
    int rc = nj_ply_write(ply, depth, &im, cam, &count, err, sizeof err);
    check(rc == 0 && count == nj_cloud_count(depth, W * H) && count > 0 && count < W * H, "PLY written",
          "rc %d (%s) count %ld", rc, err, count);
    check(count_entries(dir) == 1, "no temporary file left", "%d entries", count_entries(dir));
    int ds[2] = {H, W}, is[3] = {3, H, W};
    int wrc = nj_npy_write(dnpy, depth, ds, 2, err, sizeof err) | nj_npy_write(inpy, im.data, is, 3, err, sizeof err);
    tdu_ref_path(argv[0], "ply_read.py", script, sizeof script);
    snprintf(args, sizeof args, "'%s' '%s' '%s' %.9g %.9g %.9g %.9g '%s'", ply, dnpy, inpy, cam.fx, cam.fy, cam.cx,
             cam.cy, out);
    float *res = NULL;
    int shape[4], nd;
    int ok = rc == 0 && wrc == 0 && tdu_python(script, args) == 0 &&
             nj_npy_read(out, &res, shape, &nd, err, sizeof err) == 0 && shape[0] == 6;
    if (check(ok, "numpy reader ran", "%s", err)) {
        check(res[0] == 1, "header follows the PLY format", "header rejected");
        check(res[1] == res[2] && res[1] == (float)count, "vertex count (invalid depths skipped)",
              "file %g, numpy %g, writer %ld", res[1], res[2], count);
        check(res[3] < 1e-6, "coordinates match the back-projection", "max relative diff %g", res[3]);
        check(res[4] == 0, "colours match", "max diff %g", res[4]);
        check(res[5] == 0, "no missing or trailing bytes", "%g bytes", res[5]);
    }
    free(res);
    nj_camera bad = {0.0f, 40.0f, 10.0f, 10.0f};
    err[0] = 0;
    rc = nj_ply_write(ply, depth, &im, bad, NULL, err, sizeof err);
    check(rc == -1 && err[0] && !strchr(err, '\n') && strstr(err, ply), "bad camera refused",
          "rc %d err '%s'", rc, err);
    nj_image_free(&im);
    tdu_rmtree(dir);
    return test_exit();
}

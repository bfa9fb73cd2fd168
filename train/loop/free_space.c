/* train/loop/free_space.c — the free-space hinge's bounds (free_space.h). */
#include "train/loop/free_space.h"
#include "losses/free_space.h"
#include "train/measure/measure.h"
#include <stdlib.h>
#include <string.h>

int nj_free_space_bounds(const nj_tensor *disp, nj_depth_range r, const nj_camera *cams, float margin,
                         float reach, float *scratch, float *bound)
{
    int N = disp->n, H = disp->h, W = disp->w, planes = 0;
    size_t plane = (size_t)H * W;
    float *depth = scratch, *rays = scratch + plane;
    nj_plane_options o;
    nj_plane_options_default(&o);
    for (int n = 0; n < N; n++) {
        float *bn = bound + (size_t)n * plane;
        memset(bn, 0, sizeof(float) * plane);
        for (size_t p = 0; p < plane; p++) depth[p] = nj_depth_from_disparity_value(disp->data[n * plane + p], r);
        float *xyz = NULL;
        int k = nj_ground_points(depth, W, H, cams[n], &o, &xyz);
        if (k < 0) return -1;
        nj_plane pl;
        char why[128];
        if (k > 0 && nj_plane_fit(xyz, k, &o, &pl, why, sizeof why) == 0 && pl.dist > 0) {
            nj_ground_bound(pl.n, pl.dist, cams[n], W, H, margin, reach, rays, bn);
            planes++;
        }
        free(xyz);
    }
    return planes;
}

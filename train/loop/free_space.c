/* train/loop/free_space.c — the free-space hinge's bounds (free_space.h). */
#include "train/loop/free_space.h"
#include "losses/free_space.h"
#include "train/measure/measure.h"
#include <math.h>

/* The largest angle between the direction of travel and the fitted ground
 * that is corrected (a wheeled vehicle on flat ground: 0; the yard models
 * measured 0.7–2.3°, DEVELOPERS.md). */
#define NJ_HEADING_MAX_TILT_DEG 5.0
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

int nj_ground_heading_targets(const nj_tensor *disp, nj_depth_range r, const nj_camera *cams, const float *heading,
                              float *scratch, float *target)
{
    int N = disp->n, H = disp->h, W = disp->w, items = 0;
    size_t plane = (size_t)H * W;
    float *depth = scratch, *rx = scratch + plane, *ry = rx + plane;
    nj_plane_options o;
    nj_plane_options_default(&o);
    int v0 = H - (int)(o.lower_frac * H + 0.5f);
    for (int n = 0; n < N; n++) {
        float *tn = target + (size_t)n * plane;
        memset(tn, 0, sizeof(float) * plane);
        const float *h = heading + 3 * n;
        double hl = sqrt((double)h[0] * h[0] + (double)h[1] * h[1] + (double)h[2] * h[2]);
        if (!(hl > 0)) continue;
        for (size_t p = 0; p < plane; p++) depth[p] = nj_depth_from_disparity_value(disp->data[n * plane + p], r);
        float *xyz = NULL;
        int k = nj_ground_points(depth, W, H, cams[n], &o, &xyz);
        nj_plane pl;
        char why[128];
        int ok = k > 0 && nj_plane_fit(xyz, k, &o, &pl, why, sizeof why) == 0 && pl.dist > 0;
        free(xyz);
        if (!ok) continue;
        double u[3] = {h[0] / hl, h[1] / hl, h[2] / hl}, nu = pl.n[0] * u[0] + pl.n[1] * u[1] + pl.n[2] * u[2];
        double m[3] = {pl.n[0] - nu * u[0], pl.n[1] - nu * u[1], pl.n[2] - nu * u[2]};
        double ml = sqrt(m[0] * m[0] + m[1] * m[1] + m[2] * m[2]);
        /* more than NJ_HEADING_MAX_TILT_DEG between the travel and the fitted ground:
         * an untrained pose net's direction or no flat ground; either way no target */
        if (fabs(nu) > sin(NJ_HEADING_MAX_TILT_DEG * M_PI / 180)) continue;
        nj_camera_rays(cams[n], W, H, rx, ry);
        for (int v = v0 < 0 ? 0 : v0; v < H; v++)
            for (int x = 0; x < W; x++) {
                size_t p = (size_t)v * W + x;
                double nd = pl.n[0] * rx[p] + pl.n[1] * ry[p] + pl.n[2];
                double md = (m[0] * rx[p] + m[1] * ry[p] + m[2]) / ml;
                if (nd <= 0 || md <= 0) continue;
                double q = 1.0 / depth[p], qp = nd / pl.dist;
                if (fabs(q / qp - 1.0) < 0.05) tn[p] = (float)(md / pl.dist);
            }
        items++;
    }
    return items;
}

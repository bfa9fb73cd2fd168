/* nn/geom/camera.c — pinhole intrinsics under resize, crop and flip. */
#include "nn/geom/camera.h"
#include <math.h>
#include <stddef.h>

nj_camera nj_camera_resize(nj_camera c, int w, int h, int new_w, int new_h)
{
    double sx = (double)new_w / w, sy = (double)new_h / h;
    nj_camera r;
    r.fx = (float)(c.fx * sx);
    r.fy = (float)(c.fy * sy);
    r.cx = (float)((c.cx + 0.5) * sx - 0.5);
    r.cy = (float)((c.cy + 0.5) * sy - 0.5);
    return r;
}

nj_camera nj_camera_crop(nj_camera c, int x0, int y0)
{
    c.cx -= (float)x0;
    c.cy -= (float)y0;
    return c;
}

nj_camera nj_camera_flip(nj_camera c, int w)
{
    c.cx = (float)(w - 1) - c.cx;
    return c;
}

void nj_camera_matrix(nj_camera c, double K[9])
{
    K[0] = c.fx; K[1] = 0;    K[2] = c.cx;
    K[3] = 0;    K[4] = c.fy; K[5] = c.cy;
    K[6] = 0;    K[7] = 0;    K[8] = 1;
}

void nj_camera_inverse(nj_camera c, double Kinv[9])
{
    Kinv[0] = 1.0 / c.fx; Kinv[1] = 0;             Kinv[2] = -(double)c.cx / c.fx;
    Kinv[3] = 0;          Kinv[4] = 1.0 / c.fy;    Kinv[5] = -(double)c.cy / c.fy;
    Kinv[6] = 0;          Kinv[7] = 0;             Kinv[8] = 1;
}

void nj_camera_rays(nj_camera c, int w, int h, float *x, float *y)
{
    for (int v = 0; v < h; v++)
        for (int u = 0; u < w; u++) {
            x[(size_t)v * w + u] = (float)(((double)u - c.cx) / c.fx);
            y[(size_t)v * w + u] = (float)(((double)v - c.cy) / c.fy);
        }
}

int nj_camera_valid(nj_camera c)
{
    return isfinite(c.fx) && isfinite(c.fy) && isfinite(c.cx) && isfinite(c.cy) &&
           c.fx > 0 && c.fy > 0;
}

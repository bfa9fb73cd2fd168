/* data/depthio.c — depth formats: names, png16 conversion and dispatch. */
#include "data/depthio.h"
#include "data/image.h"
#include "data/npy.h"
#include <math.h>
#include <stb_image.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

int nj_depth_format_parse(const char *s, nj_depth_format *f)
{
    if (!strcmp(s, "png16")) *f = NJ_DEPTH_PNG16;
    else if (!strcmp(s, "npy")) *f = NJ_DEPTH_NPY;
    else if (!strcmp(s, "pfm")) *f = NJ_DEPTH_PFM;
    else return -1;
    return 0;
}

const char *nj_depth_format_name(nj_depth_format f)
{
    return f == NJ_DEPTH_PNG16 ? "png16" : f == NJ_DEPTH_NPY ? "npy" : f == NJ_DEPTH_PFM ? "pfm" : "none";
}

const char *nj_depth_extension(nj_depth_format f)
{
    return f == NJ_DEPTH_PNG16 ? ".png" : f == NJ_DEPTH_NPY ? ".npy" : f == NJ_DEPTH_PFM ? ".pfm" : "";
}

int nj_png16_depth_read(const char *path, float scale, float **data, int *w, int *h,
                        char *err, size_t errlen)
{
    *data = NULL;
    int comp;
    if (nj_image_probe(path, w, h, err, errlen)) return -1;
    if (!stbi_is_16_bit(path)) {
        snprintf(err, errlen, "%s: not a 16-bit PNG depth map", path);
        return -1;
    }
    uint16_t *v = stbi_load_16(path, w, h, &comp, 1);
    if (!v) {
        snprintf(err, errlen, "%s: corrupt 16-bit PNG (%s)", path, stbi_failure_reason());
        return -1;
    }
    size_t n = (size_t)*w * *h;
    float *out = malloc(n * sizeof(float));
    if (out)
        for (size_t i = 0; i < n; i++) out[i] = v[i] ? (float)v[i] / scale : 0.0f;
    else
        snprintf(err, errlen, "%s: out of memory", path);
    stbi_image_free(v);
    *data = out;
    return out ? 0 : -1;
}

static uint16_t quantise(float d, float scale)
{
    double q = (double)d * scale;
    if (!isfinite(q) || q < 0.5 || q > 65535.0) return 0;
    return (uint16_t)lrint(q);
}

int nj_png16_depth_write(const char *path, float scale, const float *data, int w, int h,
                         char *err, size_t errlen)
{
    size_t n = (size_t)w * h;
    uint16_t *v = malloc(n * sizeof(uint16_t));
    if (!v) {
        snprintf(err, errlen, "%s: out of memory", path);
        return -1;
    }
    for (size_t i = 0; i < n; i++) v[i] = quantise(data[i], scale);
    int rc = nj_png_write_grey16(path, v, w, h, err, errlen);
    free(v);
    return rc;
}

/* (H,W), (1,H,W) or (H,W,1) → w, h. */
static int npy_plane(const int *shape, int ndim, int *w, int *h)
{
    if (ndim == 2) { *h = shape[0]; *w = shape[1]; return 0; }
    if (ndim == 3 && shape[0] == 1) { *h = shape[1]; *w = shape[2]; return 0; }
    if (ndim == 3 && shape[2] == 1) { *h = shape[0]; *w = shape[1]; return 0; }
    return -1;
}

static int npy_depth_read(const char *path, float **data, int *w, int *h, char *err, size_t errlen)
{
    int shape[NJ_NPY_MAX_DIMS], ndim;
    if (nj_npy_read(path, data, shape, &ndim, err, errlen)) return -1;
    if (npy_plane(shape, ndim, w, h)) {
        snprintf(err, errlen, "%s: depth array must have shape (H, W); got rank %d", path, ndim);
        free(*data);
        *data = NULL;
        return -1;
    }
    return 0;
}

int nj_depth_read(const char *path, nj_depth_format f, float scale,
                  float **data, int *w, int *h, char *err, size_t errlen)
{
    *data = NULL;
    if (f == NJ_DEPTH_PNG16) return nj_png16_depth_read(path, scale, data, w, h, err, errlen);
    if (f == NJ_DEPTH_NPY) return npy_depth_read(path, data, w, h, err, errlen);
    if (f == NJ_DEPTH_PFM) return nj_pfm_read(path, data, w, h, err, errlen);
    snprintf(err, errlen, "%s: no depth format given", path);
    return -1;
}

int nj_depth_write(const char *path, nj_depth_format f, float scale,
                   const float *data, int w, int h, char *err, size_t errlen)
{
    if (f == NJ_DEPTH_PNG16) return nj_png16_depth_write(path, scale, data, w, h, err, errlen);
    if (f == NJ_DEPTH_PFM) return nj_pfm_write(path, data, w, h, err, errlen);
    if (f == NJ_DEPTH_NPY) {
        int shape[2] = {h, w};
        return nj_npy_write(path, data, shape, 2, err, errlen);
    }
    snprintf(err, errlen, "%s: no depth format given", path);
    return -1;
}

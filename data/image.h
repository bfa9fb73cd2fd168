/* data/image.h — RGB images for the data pipeline.
 *
 * An nj_image is float, planar RGB (channel-major: element (c, y, x) at
 * data[(c*h + y)*w + x]), values in [0, 1] — the layout of one NCHW batch
 * item.  Files are decoded with stb_image (PNG, JPEG; 8-bit; grey becomes
 * RGB, alpha is dropped; other formats stb_image knows are refused by their
 * signature).  Sizes are checked from the file header before any pixel is
 * decoded: sides, megapixels, and pixels per byte of the file.
 *
 * Resizing is separable.  Along an axis that shrinks it is an area filter
 * (each output pixel is the coverage-weighted mean of the input pixels its
 * footprint overlaps — the same weights as OpenCV's INTER_AREA); along an
 * axis that grows it is bilinear with half-pixel centres.  Pixel centres sit
 * at integer coordinates (see nn/geom/camera.h), so intrinsics follow
 * nj_camera_resize: fx' = fx·sx, cx' = (cx + 0.5)·sx − 0.5.
 *
 * PNG writers are atomic (data/atomic.h).
 */
#ifndef NJ_IMAGE_H
#define NJ_IMAGE_H
#include "nn/geom/camera.h"
#include <stddef.h>
#include <math.h>
#include <stdint.h>

#define NJ_IMAGE_MAX_SIDE 16384
#define NJ_IMAGE_MAX_PIXELS (64L * 1000 * 1000)
/* Upper bound of pixels per file byte for PNG and JPEG (deflate's 1032:1
 * at 1 bit per pixel, rounded up); headers claiming more are refused. */
#define NJ_IMAGE_PIXELS_PER_BYTE 8300.0

typedef struct nj_image {
    int w, h;
    float *data;     /* 3*h*w floats, planar RGB */
} nj_image;

/* Allocates a w×h image (contents undefined).  Returns 0 or -1. */
int nj_image_alloc(nj_image *im, int w, int h);
void nj_image_free(nj_image *im);

/* Reads only the header: size into *w, *h.  Returns 0, or -1 with
 * "PATH: why" in err (missing, not PNG/JPEG, or beyond the size limits). */
int nj_image_probe(const char *path, int *w, int *h, char *err, size_t errlen);
/* Decodes PATH into *im (allocated here).  Returns 0 or -1 with "PATH: why". */
int nj_image_load(const char *path, nj_image *im, char *err, size_t errlen);

/* Resamples one float plane sw×sh → dw×dh (area when shrinking, bilinear
 * when enlarging, per axis).  Returns 0, or -1 when out of memory. */
int nj_resize_plane(const float *src, int sw, int sh, float *dst, int dw, int dh);
/* Resizes all three planes into *dst (allocated here).  Returns 0 or -1. */
int nj_image_resize(const nj_image *src, int dw, int dh, nj_image *dst);
/* Resize plus the matching intrinsics: *cam_out = nj_camera_resize(cam, ...). */
int nj_image_resize_camera(const nj_image *src, nj_camera cam, int dw, int dh,
                           nj_image *dst, nj_camera *cam_out);

/* 8-bit RGB PNG from a float image (values clamped to [0,1], rounded). */
int nj_png_write_rgb(const char *path, const nj_image *im, char *err, size_t errlen);
/* 16-bit greyscale PNG from w*h values (row-major). */
int nj_png_write_grey16(const char *path, const uint16_t *v, int w, int h,
                        char *err, size_t errlen);

/* Bilinear sample of plane p (w×h) at (x, y), positions clamped to the image
 * (so edge pixels repeat outside it): the one clamped sampler of the data
 * module (undistortion, the turn augmentation). */
static inline float nj_plane_bilinear(const float *p, int w, int h, float x, float y)
{
    x = fminf(fmaxf(x, 0.0f), (float)(w - 1));
    y = fminf(fmaxf(y, 0.0f), (float)(h - 1));
    int x0 = (int)x, y0 = (int)y;
    if (x0 > w - 2) x0 = w > 1 ? w - 2 : 0;
    if (y0 > h - 2) y0 = h > 1 ? h - 2 : 0;
    float ax = x - (float)x0, ay = y - (float)y0;
    int x1 = w > 1 ? x0 + 1 : x0, y1 = h > 1 ? y0 + 1 : y0;
    const float *r0 = p + (size_t)y0 * w, *r1 = p + (size_t)y1 * w;
    float top = r0[x0] + ax * (r0[x1] - r0[x0]), bot = r1[x0] + ax * (r1[x1] - r1[x0]);
    return top + ay * (bot - top);
}

#endif

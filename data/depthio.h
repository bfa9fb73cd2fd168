/* data/depthio.h — ground-truth depth maps on disk.
 *
 * In memory a depth map is w*h floats, row-major, metres along the optical
 * axis; 0 means unknown.  Formats (the dataset JSON's "depth.format"):
 *   png16  16-bit greyscale PNG, metres = value / scale, 0 = unknown;
 *   npy    float32 NumPy array of shape (H, W) (also (1,H,W) or (H,W,1)), metres;
 *   pfm    greyscale "Pf" portable float map, metres (rows stored bottom-up).
 * A frame's depth file has the frame's name with the extension replaced by
 * .png, .npy or .pfm.  All writers are atomic (data/atomic.h).
 */
#ifndef NJ_DEPTHIO_H
#define NJ_DEPTHIO_H
#include <stddef.h>

typedef enum { NJ_DEPTH_NONE = 0, NJ_DEPTH_PNG16, NJ_DEPTH_NPY, NJ_DEPTH_PFM } nj_depth_format;

/* "png16" | "npy" | "pfm" → format; returns 0, or -1 for anything else. */
int nj_depth_format_parse(const char *s, nj_depth_format *f);
const char *nj_depth_format_name(nj_depth_format f);
/* ".png", ".npy", ".pfm". */
const char *nj_depth_extension(nj_depth_format f);

/* Reads a depth map of any format (scale is used by png16 only).  *data is
 * malloc'd.  Returns 0, or -1 with "PATH: why" in err. */
int nj_depth_read(const char *path, nj_depth_format f, float scale,
                  float **data, int *w, int *h, char *err, size_t errlen);
/* Writes a depth map in any format.  png16 stores round(d·scale); values
 * that are not finite, ≤ 0, or above 65535/scale are stored as 0 (unknown). */
int nj_depth_write(const char *path, nj_depth_format f, float scale,
                   const float *data, int w, int h, char *err, size_t errlen);

int nj_pfm_read(const char *path, float **data, int *w, int *h, char *err, size_t errlen);
int nj_pfm_write(const char *path, const float *data, int w, int h, char *err, size_t errlen);
int nj_png16_depth_read(const char *path, float scale, float **data, int *w, int *h,
                        char *err, size_t errlen);
int nj_png16_depth_write(const char *path, float scale, const float *data, int w, int h,
                         char *err, size_t errlen);

#endif

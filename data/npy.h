/* data/npy.h — NumPy .npy files (format version 1.0) for float arrays.
 *
 * Written files are little-endian float32 ('<f4'), C order, rank 1..4, with
 * the standard header: magic "\x93NUMPY", version 1.0, a 2-byte header length
 * and a Python dict literal padded with spaces to a multiple of 64 bytes and
 * ended by '\n'.  Writes are atomic (data/atomic.h): the data goes to a
 * unique temporary file beside PATH, is flushed and fsync'ed, then renamed
 * over PATH, so readers never see a partial file.
 *
 * The reader accepts versions 1.0, 2.0 and 3.0 (they differ only in the
 * header-length field), dtype '<f4' or '<f8' (converted to float), C order,
 * rank 1..4 with positive dimensions.  It treats the file as untrusted: every
 * field is validated, the element count must be at most 2^31 and must match
 * the file's length exactly.  Failures return a negative code and a one-line
 * message naming the file and the problem; nothing is allocated then.
 */
#ifndef NJ_NPY_H
#define NJ_NPY_H
#include <stddef.h>

#define NJ_NPY_MAX_DIMS 4

enum {
    NJ_NPY_OK = 0,
    NJ_NPY_EIO = -1,      /* cannot open/read/write/rename the file */
    NJ_NPY_EFORMAT = -2,  /* not a valid .npy file, or not one we support */
    NJ_NPY_ENOMEM = -3,   /* out of memory */
    NJ_NPY_EARG = -4      /* bad arguments (NULL pointers, bad shape) */
};

/* Reads `path`.  On success returns NJ_NPY_OK, *data is a malloc'd array of
 * the elements in C order (free() it), shape[0..*ndim-1] the dimensions
 * (shape must have room for NJ_NPY_MAX_DIMS ints).  On failure returns a
 * negative code, *data is NULL and err (if non-NULL) holds the message. */
int nj_npy_read(const char *path, float **data, int *shape, int *ndim,
                char *err, size_t errlen);

/* Writes data (product of shape[0..ndim-1] floats) to `path` atomically.
 * Returns NJ_NPY_OK or a negative code with the message in err. */
int nj_npy_write(const char *path, const float *data, const int *shape, int ndim,
                 char *err, size_t errlen);

/* Number of elements of a shape (product of the dimensions). */
size_t nj_npy_numel(const int *shape, int ndim);

#endif

/* data/poses.h — ground-truth camera poses files: one line per frame with
 * 12 numbers, the row-major 3×4 camera-to-world matrix [R | t] (metres).
 * Blank lines and lines starting with '#' are ignored. */
#ifndef NJ_POSES_H
#define NJ_POSES_H
#include <stddef.h>

/* Reads all poses: *out is malloc'd with 12·n doubles.  Returns n, or -1
 * with "PATH:LINE: why" (or "PATH: why") in err. */
int nj_poses_read(const char *path, double **out, char *err, size_t errlen);
/* Writes n poses atomically (%.9g per number). */
int nj_poses_write(const char *path, const double *poses, int n, char *err, size_t errlen);
/* Keeps poses 0, k, 2k, ... of n in place, at the front; returns their count
 * (n − 1)/k + 1 (n when k ≤ 1, 0 when n ≤ 0). */
int nj_poses_keep_every(double *poses, int n, int k);

#endif

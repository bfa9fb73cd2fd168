/* data/atomic.h — atomic file replacement: write to a unique temporary file
 * in the destination's folder, fflush + fsync it, then rename() it over the
 * destination (and fsync the folder), so readers see either the old file or
 * the complete new one, never a partial write. */
#ifndef NJ_ATOMIC_H
#define NJ_ATOMIC_H
#include <stdio.h>
#include <stddef.h>

typedef struct nj_atomic_file {
    FILE *f;            /* write the content here */
    char *tmp;          /* temporary path (malloc'd) */
    const char *path;   /* final destination */
} nj_atomic_file;

/* Creates the temporary file next to `path`.  Returns 0, or -1 with a
 * one-line message "PATH: why" in err. */
int nj_atomic_open(nj_atomic_file *a, const char *path, char *err, size_t errlen);
/* Flushes, fsyncs, closes and renames into place.  `ok` = 0 means the
 * caller's writing failed: the temporary file is removed instead.  Returns 0
 * on success, -1 (message in err, temporary removed) otherwise. */
int nj_atomic_close(nj_atomic_file *a, int ok, char *err, size_t errlen);

/* Test hook for the kill-at-random test (tests/test_kill_random.c): when the
 * hook write_pause_ms=MS (nn/testhook.h) is set to a positive number, flushes
 * `f` and sleeps that long, so a test can kill the process while a partly or
 * completely written temporary file is not yet renamed into place.  Called
 * by nj_atomic_close before fsync and by the checkpoint writer half-way
 * through.  Does nothing otherwise. */
void nj_atomic_test_pause(FILE *f);

#endif

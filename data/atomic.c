/* data/atomic.c — temp file + fsync + rename (see atomic.h). */
#include "data/atomic.h"
#include "nn/testhook.h"
#include <errno.h>
#include <fcntl.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

int nj_atomic_open(nj_atomic_file *a, const char *path, char *err, size_t errlen)
{
    a->f = NULL;
    a->path = path;
    size_t n = strlen(path) + 16;
    a->tmp = malloc(n);
    if (!a->tmp) {
        snprintf(err, errlen, "%s: out of memory", path);
        return -1;
    }
    snprintf(a->tmp, n, "%s.XXXXXX.tmp", path);
    int fd = mkstemps(a->tmp, 4);
    if (fd < 0) {
        snprintf(err, errlen, "%s: cannot create a temporary file: %s", path, strerror(errno));
        free(a->tmp);
        a->tmp = NULL;
        return -1;
    }
    fchmod(fd, 0644);
    a->f = fdopen(fd, "wb");
    if (!a->f) {
        snprintf(err, errlen, "%s: fdopen failed: %s", path, strerror(errno));
        close(fd);
        unlink(a->tmp);
        free(a->tmp);
        a->tmp = NULL;
        return -1;
    }
    errno = 0;
    return 0;
}

/* fsync of the folder holding `path`, so the rename itself is durable. */
static void sync_parent(const char *path)
{
    const char *slash = strrchr(path, '/');
    char dir[4096];
    if (!slash) snprintf(dir, sizeof dir, ".");
    else if (slash == path) snprintf(dir, sizeof dir, "/");
    else snprintf(dir, sizeof dir, "%.*s", (int)(slash - path), path);
    int fd = open(dir, O_RDONLY | O_DIRECTORY);
    if (fd >= 0) {
        fsync(fd);
        close(fd);
    }
}

void nj_atomic_test_pause(FILE *f)
{
    long v[2], ms = nj_test_hook("write_pause_ms", v) == 1 ? v[0] : 0;
    if (ms <= 0) return;
    if (f) fflush(f);
    struct timespec ts = {ms / 1000, (ms % 1000) * 1000000L};
    nanosleep(&ts, NULL);
}

int nj_atomic_close(nj_atomic_file *a, int ok, char *err, size_t errlen)
{
    /* a caller reporting failure (ok = 0) after a failed stdio write leaves
     * the reason in errno (stdio sets it; nj_atomic_open cleared it) */
    int caller_failed = !ok, e = ok ? 0 : errno;
    if (ok && fflush(a->f) != 0) { ok = 0; e = errno; }
    if (ok) nj_atomic_test_pause(NULL);
    if (ok && fsync(fileno(a->f)) != 0) { ok = 0; e = errno; }
    if (fclose(a->f) != 0 && ok) { ok = 0; e = errno; }
    a->f = NULL;
    if (ok && rename(a->tmp, a->path) != 0) { ok = 0; e = errno; }
    if (!ok) {
        unlink(a->tmp);
        int keep = caller_failed && err && errlen && err[0];   /* the caller's own message */
        if (!keep && e) snprintf(err, errlen, "%s: write failed: %s", a->path, strerror(e));
        else if (!keep) snprintf(err, errlen, "%s: write failed", a->path);
    } else {
        sync_parent(a->path);
    }
    free(a->tmp);
    a->tmp = NULL;
    return ok ? 0 : -1;
}

/* data/framestore_build.c — writing a frame store (framestore.h): the size
 * said and the room checked first, frames prepared in parallel chunks (or
 * copied from the old store when still valid), written in order through a
 * temporary file that is renamed into place only when complete. */
#include "data/framestore_format.h"
#include "data/atomic.h"
#include "data/crc32.h"
#include "data/loader_item.h"
#include <dirent.h>
#include <errno.h>
#include <omp.h>
#include <stdarg.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/statvfs.h>
#include <time.h>
#include <unistd.h>

#define CHUNK_BYTES (64u << 20)    /* frames prepared between two writes */
#define STALE_SECONDS 60           /* a temporary file untouched this long is an interrupted build's */
#define PROGRESS_SECONDS 30.0      /* a progress line this often while building */

static void put(unsigned char **p, const void *v, size_t n)
{
    memcpy(*p, v, n);
    *p += n;
}

static void put32(unsigned char **p, uint32_t v) { put(p, &v, 4); }
static void put64(unsigned char **p, uint64_t v) { put(p, &v, 8); }

unsigned char *njfs_header(const njfs_entry *const *e, int n, int w, int h, size_t *len, uint64_t *data_off)
{
    size_t bytes = NJFS_FIXED + 4;
    for (int i = 0; i < n; i++) bytes += 4 + strlen(e[i]->path) + NJFS_ENTRY_FIXED;
    uint64_t off = (bytes + NJFS_ALIGN - 1) / NJFS_ALIGN * NJFS_ALIGN;
    unsigned char *buf = calloc(off, 1), *p = buf;
    if (!buf) return NULL;
    put(&p, NJFS_MAGIC, 8);
    put32(&p, NJFS_ORDER);
    put32(&p, NJFS_VERSION);
    put32(&p, (uint32_t)w);
    put32(&p, (uint32_t)h);
    put32(&p, (uint32_t)n);
    put32(&p, 0);
    put64(&p, off);
    for (int i = 0; i < n; i++) {
        uint32_t plen = (uint32_t)strlen(e[i]->path);
        put32(&p, plen);
        put(&p, e[i]->path, plen);
        put64(&p, e[i]->pixkey);
        put64(&p, e[i]->size);
        put64(&p, (uint64_t)e[i]->mtime_s);
        put64(&p, (uint64_t)e[i]->mtime_ns);
        put32(&p, e[i]->src_w);
        put32(&p, e[i]->src_h);
        put32(&p, e[i]->crc);
    }
    put32(&p, nj_crc32(buf, (size_t)(p - buf)));
    *len = (size_t)off;
    *data_off = off;
    return buf;
}

/* The folder of `path` into dir ("." when none). */
static void folder_of(const char *path, char *dir, size_t n)
{
    const char *slash = strrchr(path, '/');
    if (!slash) snprintf(dir, n, ".");
    else if (slash == path) snprintf(dir, n, "/");
    else snprintf(dir, n, "%.*s", (int)(slash - path), path);
}

int njfs_remove_stale_temps(const char *path)
{
    char dir[4096];
    folder_of(path, dir, sizeof dir);
    const char *slash = strrchr(path, '/'), *base = slash ? slash + 1 : path;
    size_t nb = strlen(base);
    DIR *d = opendir(dir);
    if (!d) return 0;
    int removed = 0;
    time_t now = time(NULL);
    for (struct dirent *e; (e = readdir(d));) {
        size_t n = strlen(e->d_name);   /* BASE.XXXXXX.tmp (data/atomic.c) */
        if (n != nb + 11 || strncmp(e->d_name, base, nb) || e->d_name[nb] != '.' || strcmp(e->d_name + n - 4, ".tmp"))
            continue;
        char p[8192];
        struct stat st;
        snprintf(p, sizeof p, "%s/%s", dir, e->d_name);
        if (stat(p, &st) == 0 && now - st.st_mtime > STALE_SECONDS && unlink(p) == 0) removed++;
    }
    closedir(d);
    return removed;
}

void njfs_say(const nj_framestore_config *c, const char *fmt, ...)
{
    if (!c->say) return;
    va_list ap;
    va_start(ap, fmt);
    vfprintf(c->say, fmt, ap);
    va_end(ap);
    fflush(c->say);
}

/* States the size, then refuses when the folder has not the room for it. */
static int room_for(const char *path, uint64_t bytes, int reused, int n, int w, int h,
                    const nj_framestore_config *c, char *err, size_t errlen)
{
    char dir[4096];
    folder_of(path, dir, sizeof dir);
    struct statvfs v;
    double avail = statvfs(dir, &v) == 0 ? (double)v.f_bavail * v.f_frsize : -1;
    njfs_say(c, "frame store %s: writing %d frames at %dx%d, %.1f MB (%d from the old store, %d to decode)%s", path, n, w,
        h, bytes / 1e6, reused, n - reused, avail >= 0 ? "" : "\n");
    if (avail >= 0) njfs_say(c, "; %.1f MB free there\n", avail / 1e6);
    if (avail >= 0 && avail < (double)bytes) {
        snprintf(err, errlen, "%s: the frame store needs %.1f MB, only %.1f MB free in %s", path, bytes / 1e6,
                 avail / 1e6, dir);
        return -1;
    }
    return 0;
}

/* Frame i into dst: copied from the old store when its checksum holds, else
 * prepared from the source.  0, or -1 with the message in e. */
static int one_frame(const nj_dataset *ds, njfs_want *x, int old_fd, const njfs_entry *old, uint64_t old_data_off,
                     int w, int h, float *dst, char *e, size_t elen)
{
    uint64_t fb = (uint64_t)12 * w * h;
    if (x->old >= 0 && old_fd >= 0 && pread(old_fd, dst, fb, (off_t)(old_data_off + fb * (uint64_t)x->old)) == (ssize_t)fb &&
        nj_crc32(dst, fb) == old[x->old].crc) {
        x->e.src_w = old[x->old].src_w;
        x->e.src_h = old[x->old].src_h;
        x->e.crc = old[x->old].crc;
        return 0;
    }
    int sw, sh;
    if (nj_loader_frame(&ds->seq[x->seq], x->right, x->frame, w, h, dst, &sw, &sh, e, elen)) return -1;
    x->e.src_w = (uint32_t)sw;
    x->e.src_h = (uint32_t)sh;
    x->e.crc = nj_crc32(dst, fb);
    return 0;
}

/* Prepares frames [i0, i0 + m) into buf in parallel.  0, or -1 with the
 * message of the lowest failing frame. */
static int prepare_chunk(const nj_dataset *ds, njfs_want *w, int i0, int m, int old_fd, const njfs_entry *old,
                         uint64_t old_data_off, int fw, int fh, float *buf, int threads, char *err, size_t errlen)
{
    size_t per = (size_t)3 * fw * fh;
    int bad = m;
#pragma omp parallel for schedule(dynamic, 1) num_threads(threads)
    for (int j = 0; j < m; j++) {
        char e[512];
        if (one_frame(ds, &w[i0 + j], old_fd, old, old_data_off, fw, fh, buf + per * j, e, sizeof e)) {
#pragma omp critical(njfs_build_err)
            if (j < bad) {
                bad = j;
                snprintf(err, errlen, "%s", e);
            }
        }
    }
    return bad < m ? -1 : 0;
}

static int write_frames(nj_framestore *fs, const nj_dataset *ds, njfs_want *w, int n, int old_fd,
                        const njfs_entry *old, uint64_t old_data_off, int threads, const nj_framestore_config *c,
                        FILE *f, char *err, size_t errlen)
{
    uint64_t fb = fs->frame_bytes;
    int k = (int)(CHUNK_BYTES / fb);
    if (k < threads) k = threads;
    if (k > n) k = n;
    float *buf = malloc(fb * (uint64_t)k);
    if (!buf) { snprintf(err, errlen, "%s: out of memory for %d frames", fs->path, k); return -1; }
    double t0 = omp_get_wtime(), next = t0 + PROGRESS_SECONDS;
    int rc = 0;
    for (int i0 = 0; i0 < n && !rc; i0 += k) {
        int m = n - i0 < k ? n - i0 : k;
        rc = prepare_chunk(ds, w, i0, m, old_fd, old, old_data_off, fs->w, fs->h, buf, threads, err, errlen);
        if (!rc && fwrite(buf, fb, (size_t)m, f) != (size_t)m) rc = -1;   /* atomic close names errno */
        if (!rc && omp_get_wtime() > next) {
            njfs_say(c, "frame store %s: %d of %d frames\n", fs->path, i0 + m, n);
            next = omp_get_wtime() + PROGRESS_SECONDS;
        }
    }
    free(buf);
    return rc;
}

int njfs_build(nj_framestore *fs, const nj_dataset *ds, njfs_want *w, int n, int old_fd,
               const njfs_entry *old, uint64_t old_data_off, const nj_framestore_config *c,
               char *err, size_t errlen)
{
    const njfs_entry **ep = malloc(((size_t)n + 1) * sizeof *ep);
    if (!ep) { snprintf(err, errlen, "%s: out of memory", fs->path); return -1; }
    int reused = 0, threads = c->threads > 0 ? c->threads : omp_get_max_threads();
    for (int i = 0; i < n; i++) {
        ep[i] = &w[i].e;
        reused += w[i].old >= 0 && old_fd >= 0;
    }
    size_t hlen;
    unsigned char *hdr = njfs_header(ep, n, fs->w, fs->h, &hlen, &fs->data_off);   /* sizes and CRCs still 0 */
    uint64_t total = fs->data_off + fs->frame_bytes * (uint64_t)n;
    nj_atomic_file a;
    double t0 = omp_get_wtime();
    err[0] = 0;
    int rc = hdr ? room_for(fs->path, total, reused, n, fs->w, fs->h, c, err, errlen) : -1;
    if (!hdr) snprintf(err, errlen, "%s: out of memory", fs->path);
    if (!rc) rc = nj_atomic_open(&a, fs->path, err, errlen);
    if (rc) { free(hdr); free(ep); return -1; }
    int ok = fwrite(hdr, 1, hlen, a.f) == hlen;
    ok = ok && !write_frames(fs, ds, w, n, old_fd, old, old_data_off, threads, c, a.f, err, errlen);
    free(hdr);
    hdr = ok ? njfs_header(ep, n, fs->w, fs->h, &hlen, &fs->data_off) : NULL;   /* now with them */
    if (ok && !hdr) snprintf(err, errlen, "%s: out of memory", fs->path);
    ok = ok && hdr && fseek(a.f, 0, SEEK_SET) == 0 && fwrite(hdr, 1, hlen, a.f) == hlen;
    free(hdr);
    free(ep);
    if (nj_atomic_close(&a, ok, err, errlen)) return -1;
    double dt = omp_get_wtime() - t0;
    njfs_say(c, "frame store %s: written in %.1f s (%.0f frames/s)\n", fs->path, dt, dt > 0 ? n / dt : 0.0);
    return 0;
}

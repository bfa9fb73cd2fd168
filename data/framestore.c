/* data/framestore.c — the frame store (framestore.h): which frames a run
 * needs, checking an existing store against their sources, and reading
 * frames back.  Writing is in framestore_build.c. */
#include "data/framestore_format.h"
#include "data/crc32.h"
#include "data/loader_item.h"
#include <errno.h>
#include <fcntl.h>
#include <limits.h>
#include <omp.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

static uint64_t fnv(uint64_t h, const void *p, size_t n)
{
    const unsigned char *c = p;
    for (size_t i = 0; i < n; i++) h = (h ^ c[i]) * 0x100000001b3ull;
    return h;
}

#define FNV0 0xcbf29ce484222325ull

char *nj_framestore_file(const char *dir, const char *dataset_path, int width, int height)
{
    char *real = realpath(dataset_path, NULL);
    const char *p = real ? real : dataset_path;
    uint64_t h = fnv(FNV0, p, strlen(p));
    free(real);
    char name[96];
    snprintf(name, sizeof name, "frames-%dx%d-%08x.njfs", width, height, (unsigned)(h ^ (h >> 32)));
    return nj_path_join(dir, name);
}

/* The pixel key of a sequence's frames at w×h (framestore.h). */
static uint64_t pixel_key(const nj_sequence *q, int w, int h)
{
    char head[64];
    int n = snprintf(head, sizeof head, "nightjar frame pixels v%d %dx%d camera ", NJ_FRAME_PIXELS_VERSION, w, h);
    uint64_t k = fnv(FNV0, head, (size_t)n);
    if (q->camera_text) k = fnv(k, q->camera_text, strlen(q->camera_text));
    /* the resampling of a lens or a raw rig (both sides: the right camera's
     * block is not in camera_text) */
    for (int side = 0; side < 2; side++) {
        const nj_undistort *u = nj_sequence_undistort(q, side);
        if (u) k = fnv(k, &u->key, sizeof u->key);
    }
    return k;
}

/* ---- the frames a run needs ------------------------------------------------ */

static void free_wants(njfs_want *w, int n)
{
    for (int i = 0; w && i < n; i++) free(w[i].e.path);
    free(w);
}

static int stat_source(njfs_want *w, char *err, size_t errlen)
{
    struct stat st;
    if (stat(w->e.path, &st) != 0) {
        snprintf(err, errlen, "%s: cannot read: %s", w->e.path, strerror(errno));
        return -1;
    }
    w->e.size = (uint64_t)st.st_size;
    w->e.mtime_s = (int64_t)st.st_mtim.tv_sec;
    w->e.mtime_ns = (int64_t)st.st_mtim.tv_nsec;
    return 0;
}

/* need[s][right·nframes + f] = 1 for every frame the samples use. */
static unsigned char **mark_needed(const nj_dataset *ds, const nj_sample *samples, int n)
{
    unsigned char **need = calloc((size_t)ds->nseq, sizeof *need);
    for (int s = 0; need && s < ds->nseq; s++)
        if (!(need[s] = calloc(2 * (size_t)ds->seq[s].nframes + 1, 1))) {
            for (int k = 0; k < s; k++) free(need[k]);
            free(need);
            need = NULL;
        }
    for (int i = 0; need && i < n; i++) {
        const nj_sample *p = &samples[i];
        int nf = ds->seq[p->seq].nframes;
        need[p->seq][p->target] = 1;
        for (int k = 0; k < p->nsrc; k++) need[p->seq][p->src[k]] = 1;
        if (p->stereo && ds->seq[p->seq].right_images) need[p->seq][nf + p->target] = 1;
    }
    return need;
}

/* The wanted frames, in (sequence, side, frame) order, with their sources'
 * stat.  Returns the count, or -1 with a message. */
static int collect(const nj_dataset *ds, const nj_sample *samples, int n, int w, int h, njfs_want **out,
                   char *err, size_t errlen)
{
    unsigned char **need = mark_needed(ds, samples, n);
    long count = 0;
    for (int s = 0; need && s < ds->nseq; s++)
        for (int f = 0; f < 2 * ds->seq[s].nframes; f++) count += need[s][f];
    njfs_want *list = need && count <= NJFS_MAX_FRAMES ? calloc((size_t)count + 1, sizeof *list) : NULL;
    int k = 0, rc = list ? 0 : -1;
    if (!list) snprintf(err, errlen, "frame store: out of memory for the list of %ld frames", count);
    for (int s = 0; !rc && s < ds->nseq; s++) {
        const nj_sequence *q = &ds->seq[s];
        uint64_t key = pixel_key(q, w, h);
        for (int f = 0; !rc && f < 2 * q->nframes; f++) {
            if (!need[s][f]) continue;
            njfs_want *x = &list[k++];
            x->seq = s;
            x->right = f >= q->nframes;
            x->frame = f % q->nframes;
            x->old = -1;
            x->e.pixkey = key;
            x->e.path = nj_path_join(x->right ? q->right_images : q->images, q->frames[x->frame]);
            rc = !x->e.path ? -1 : stat_source(x, err, errlen);
            if (!x->e.path) snprintf(err, errlen, "frame store: out of memory");
        }
    }
    for (int s = 0; need && s < ds->nseq; s++) free(need[s]);
    free(need);
    if (rc) { free_wants(list, k); return -1; }
    *out = list;
    return k;
}

/* ---- reading an existing store --------------------------------------------- */

typedef struct old_store {
    int fd;
    int n;
    njfs_entry *e;
    uint64_t data_off;
    const njfs_entry **by_path;   /* the entries sorted by path */
} old_store;

static void old_free(old_store *o)
{
    if (o->fd >= 0) close(o->fd);
    for (int i = 0; o->e && i < o->n; i++) free(o->e[i].path);
    free(o->e);
    free(o->by_path);
    memset(o, 0, sizeof *o);
    o->fd = -1;
}

typedef struct cursor {
    const unsigned char *p, *end;
    int bad;
} cursor;

static void take(cursor *c, void *dst, size_t n)
{
    if (c->bad || (size_t)(c->end - c->p) < n) { c->bad = 1; memset(dst, 0, n); return; }
    memcpy(dst, c->p, n);
    c->p += n;
}

static uint32_t u32(cursor *c) { uint32_t v; take(c, &v, 4); return v; }
static uint64_t u64(cursor *c) { uint64_t v; take(c, &v, 8); return v; }

static int pread_all(int fd, void *buf, size_t n, uint64_t off)
{
    unsigned char *p = buf;
    while (n) {
        ssize_t k = pread(fd, p, n, (off_t)off);
        if (k < 0 && errno == EINTR) continue;
        if (k <= 0) return -1;
        p += k;
        n -= (size_t)k;
        off += (uint64_t)k;
    }
    return 0;
}

/* The entries of header bytes [NJFS_FIXED, len − 4) into o.  0 or -1. */
static int parse_entries(const unsigned char *hdr, size_t len, old_store *o)
{
    cursor c = {hdr + NJFS_FIXED, hdr + len - 4, 0};
    if (!(o->e = calloc((size_t)o->n + 1, sizeof *o->e))) return -1;
    for (int i = 0; i < o->n && !c.bad; i++) {
        njfs_entry *e = &o->e[i];
        uint32_t plen = u32(&c);
        if (c.bad || plen == 0 || plen > NJFS_MAX_PATH || (size_t)(c.end - c.p) < plen) return -1;
        if (!(e->path = malloc(plen + 1))) return -1;
        take(&c, e->path, plen);
        e->path[plen] = 0;
        e->pixkey = u64(&c);
        e->size = u64(&c);
        e->mtime_s = (int64_t)u64(&c);
        e->mtime_ns = (int64_t)u64(&c);
        e->src_w = u32(&c);
        e->src_h = u32(&c);
        e->crc = u32(&c);
    }
    return c.bad ? -1 : 0;
}

static int by_path(const void *a, const void *b)
{
    return strcmp((*(const njfs_entry *const *)a)->path, (*(const njfs_entry *const *)b)->path);
}

/* Opens the store at `path` made for w×h and reads its index.  0 usable,
 * 1 there is none, -1 unusable (why says what is wrong). */
static int old_read(const char *path, int w, int h, old_store *o, char *why, size_t n)
{
    memset(o, 0, sizeof *o);
    if ((o->fd = open(path, O_RDONLY)) < 0) {
        if (errno == ENOENT) return 1;
        snprintf(why, n, "cannot be opened: %s", strerror(errno));
        return -1;
    }
    struct stat st;
    unsigned char fixed[NJFS_FIXED];
    if (fstat(o->fd, &st) || st.st_size < NJFS_FIXED || pread_all(o->fd, fixed, NJFS_FIXED, 0)) {
        snprintf(why, n, "truncated: %lld bytes, shorter than its header", (long long)st.st_size);
        return -1;
    }
    cursor c = {fixed + 8, fixed + NJFS_FIXED, 0};
    uint32_t order = u32(&c), version = u32(&c), fw = u32(&c), fh = u32(&c), cnt = u32(&c);
    u32(&c);
    o->data_off = u64(&c);
    if (memcmp(fixed, NJFS_MAGIC, 8)) { snprintf(why, n, "not a frame store"); return -1; }
    if (order != NJFS_ORDER) { snprintf(why, n, "written with another byte order"); return -1; }
    if (version != NJFS_VERSION) { snprintf(why, n, "format version %u (this build writes %u)", version, NJFS_VERSION); return -1; }
    if ((int)fw != w || (int)fh != h) { snprintf(why, n, "made for %ux%u frames", fw, fh); return -1; }
    uint64_t fb = (uint64_t)12 * w * h, size = (uint64_t)st.st_size;
    if (cnt > NJFS_MAX_FRAMES || o->data_off < NJFS_FIXED + 4 || o->data_off % NJFS_ALIGN || o->data_off > (1ull << 40)) {
        snprintf(why, n, "damaged: its header is not one this program writes");
        return -1;
    }
    o->n = (int)cnt;
    uint64_t want = o->data_off + fb * cnt;   /* < 2^63: both terms are bounded above */
    if (size != want) {
        if (size < want) snprintf(why, n, "truncated: %llu of %llu bytes", (unsigned long long)size, (unsigned long long)want);
        else snprintf(why, n, "damaged: %llu bytes where its header says %llu", (unsigned long long)size,
                      (unsigned long long)want);
        return -1;
    }
    unsigned char *hdr = malloc(o->data_off);
    int ok = hdr && !pread_all(o->fd, hdr, o->data_off, 0);
    /* the header's own CRC sits after the last entry: find it by parsing */
    size_t end = 0;
    if (ok) {
        cursor e = {hdr + NJFS_FIXED, hdr + o->data_off, 0};
        for (int i = 0; i < o->n && !e.bad; i++) {
            uint32_t plen = u32(&e);
            if (plen > NJFS_MAX_PATH || (size_t)(e.end - e.p) < plen + NJFS_ENTRY_FIXED) e.bad = 1;
            else e.p += plen + NJFS_ENTRY_FIXED;
        }
        end = e.bad || (size_t)(e.end - e.p) < 4 ? 0 : (size_t)(e.p - hdr) + 4;
    }
    uint32_t stored = 0;
    if (end) memcpy(&stored, hdr + end - 4, 4);
    ok = ok && end && nj_crc32(hdr, end - 4) == stored && !parse_entries(hdr, end, o);
    free(hdr);
    if (!ok) { snprintf(why, n, "damaged: the checksum of its index does not match"); return -1; }
    if (!(o->by_path = malloc(((size_t)o->n + 1) * sizeof *o->by_path))) { snprintf(why, n, "out of memory"); return -1; }
    for (int i = 0; i < o->n; i++) o->by_path[i] = &o->e[i];
    qsort(o->by_path, (size_t)o->n, sizeof *o->by_path, by_path);
    return 0;
}

static long old_find(const old_store *o, const char *path)
{
    long lo = 0, hi = o->n - 1;
    while (lo <= hi) {
        long mid = (lo + hi) / 2;
        int c = strcmp(o->by_path[mid]->path, path);
        if (!c) return (long)(o->by_path[mid] - o->e);
        if (c < 0) lo = mid + 1;
        else hi = mid - 1;
    }
    return -1;
}

/* Marks reusable old frames (same source path, size, mtime and pixel key);
 * says in `why` what keeps the store from serving as it is (empty: nothing). */
static void match(njfs_want *w, int n, const old_store *o, char *why, size_t len)
{
    int changed = 0, missing = 0;
    const char *first_changed = NULL, *first_missing = NULL;
    for (int i = 0; i < n; i++) {
        long k = old_find(o, w[i].e.path);
        const njfs_entry *e = k >= 0 ? &o->e[k] : NULL;
        if (e && e->pixkey == w[i].e.pixkey && e->size == w[i].e.size && e->mtime_s == w[i].e.mtime_s &&
            e->mtime_ns == w[i].e.mtime_ns) {
            w[i].old = k;
            continue;
        }
        if (e && e->pixkey == w[i].e.pixkey) { if (!changed++) first_changed = w[i].e.path; }
        else if (!missing++) first_missing = w[i].e.path;
    }
    why[0] = 0;
    if (changed)
        snprintf(why, len, "%d source frame%s changed since it was written (first: %s)", changed,
                 changed == 1 ? "" : "s", first_changed);
    else if (missing)
        snprintf(why, len, "%d frame%s not in it, or made with other camera settings (first: %s)", missing,
                 missing == 1 ? "" : "s", first_missing);
}

/* The CRC of every reused frame; the first mismatch goes into why (and is
 * no longer reused). */
static void check_frames(njfs_want *w, int n, const old_store *o, uint64_t fb, int threads, char *why, size_t len)
{
    long bad = -1;
    int nt = threads > 0 ? threads : omp_get_max_threads();
#pragma omp parallel num_threads(nt)
    {
        unsigned char *buf = malloc(fb);
#pragma omp for schedule(dynamic, 4)
        for (int i = 0; i < n; i++) {
            if (w[i].old < 0) continue;
            const njfs_entry *e = &o->e[w[i].old];
            if (buf && !pread_all(o->fd, buf, fb, o->data_off + fb * (uint64_t)w[i].old) && nj_crc32(buf, fb) == e->crc)
                continue;
#pragma omp critical(njfs_bad)
            if (bad < 0 || i < bad) bad = i;
            w[i].old = -1;
        }
        free(buf);
    }
    if (bad >= 0 && !why[0])
        snprintf(why, len, "damaged: the checksum of the frame of %s does not match", w[bad].e.path);
}

/* ---- the store ---------------------------------------------------------------- */

static void store_free(nj_framestore *fs)
{
    if (!fs) return;
    if (fs->fd >= 0) close(fs->fd);
    for (int i = 0; fs->e && i < fs->nframes; i++) free(fs->e[i].path);
    for (int s = 0; fs->map && s < fs->nseq; s++) free(fs->map[s]);
    free(fs->map);
    free(fs->seq_frames);
    free(fs->e);
    free(fs->at);
    free(fs->path);
    free(fs);
}

/* Moves the wanted frames' entries into fs (paths included) and builds the
 * frame → entry maps. */
static int adopt(nj_framestore *fs, const nj_dataset *ds, njfs_want *w, int n)
{
    fs->nseq = ds->nseq;
    fs->e = calloc((size_t)n + 1, sizeof *fs->e);
    fs->map = calloc((size_t)ds->nseq, sizeof *fs->map);
    fs->seq_frames = calloc((size_t)ds->nseq + 1, sizeof(int));
    if (!fs->e || !fs->map || !fs->seq_frames) return -1;
    for (int s = 0; s < ds->nseq; s++) {
        fs->seq_frames[s] = ds->seq[s].nframes;
        if (!(fs->map[s] = malloc((2 * (size_t)ds->seq[s].nframes + 1) * sizeof(int)))) return -1;
        for (int f = 0; f < 2 * ds->seq[s].nframes; f++) fs->map[s][f] = -1;
    }
    for (int i = 0; i < n; i++) {
        fs->e[i] = w[i].e;
        w[i].e.path = NULL;
        fs->nframes = i + 1;
        fs->map[w[i].seq][w[i].right * fs->seq_frames[w[i].seq] + w[i].frame] = i;
    }
    return 0;
}

static int make_dirs(const char *dir, char *err, size_t errlen)
{
    char p[PATH_MAX];
    snprintf(p, sizeof p, "%s", dir);
    for (char *s = p + 1;; s++) {
        int end = !*s;
        if (*s == '/' || end) {
            *s = 0;
            if (mkdir(p, 0755) != 0 && errno != EEXIST) {
                snprintf(err, errlen, "%s: cannot create the frame store's folder: %s", p, strerror(errno));
                return -1;
            }
            if (end) return 0;
            *s = '/';
        }
    }
}

/* An existing store serves as it is: its positions, sizes, checksums and
 * descriptor. */
static void use_old(nj_framestore *fs, njfs_want *w, int n, old_store *o)
{
    for (int i = 0; i < n; i++) {
        fs->at[i] = w[i].old;
        w[i].e.src_w = o->e[w[i].old].src_w;
        w[i].e.src_h = o->e[w[i].old].src_h;
        w[i].e.crc = o->e[w[i].old].crc;
    }
    fs->data_off = o->data_off;
    fs->fd = o->fd;
    o->fd = -1;
}

/* Checks the store at fs->path; uses it as it is, or rebuilds it.  Fills
 * fs->at, data_off and fd, and each want's size in pixels and crc.  0 or -1. */
static int open_or_build(nj_framestore *fs, const nj_dataset *ds, njfs_want *w, int n,
                         const nj_framestore_config *c, char *err, size_t errlen)
{
    old_store o;
    char why[1024] = "";
    double t0 = omp_get_wtime();
    int r = old_read(fs->path, fs->w, fs->h, &o, why, sizeof why);
    if (r == 0) {
        match(w, n, &o, why, sizeof why);
        /* a rebuild checks each frame it copies anyway */
        if (!why[0]) check_frames(w, n, &o, fs->frame_bytes, c->threads, why, sizeof why);
    }
    int rc = 0;
    if (r == 0 && !why[0]) {
        use_old(fs, w, n, &o);
        njfs_say(c, "frame store %s: %d frames at %dx%d, %.1f MB, checked in %.1f s\n", fs->path, n, fs->w, fs->h,
            (o.data_off + fs->frame_bytes * (uint64_t)n) / 1e6, omp_get_wtime() - t0);
    } else if (!c->build) {
        snprintf(err, errlen, "%s: %s", fs->path, r == 1 ? "no frame store there" : why);
        rc = -1;
    } else {
        if (r != 1) njfs_say(c, "frame store %s: %s; rebuilding it\n", fs->path, why);
        rc = njfs_build(fs, ds, w, n, o.fd, o.e, o.data_off, c, err, errlen);
        if (!rc && (fs->fd = open(fs->path, O_RDONLY)) < 0) {
            snprintf(err, errlen, "%s: cannot open the frame store just written: %s", fs->path, strerror(errno));
            rc = -1;
        }
        for (int i = 0; i < n; i++) fs->at[i] = i;
    }
    old_free(&o);
    return rc;
}

nj_framestore *nj_framestore_open(const nj_dataset *ds, const nj_sample *samples, int n,
                                  const nj_framestore_config *c, char *err, size_t errlen)
{
    if (c->width <= 0 || c->height <= 0 || !c->dir || !c->dir[0] || n <= 0) {
        snprintf(err, errlen, "frame store: needs a training size, a folder and samples");
        return NULL;
    }
    nj_framestore *fs = calloc(1, sizeof *fs);
    if (!fs) { snprintf(err, errlen, "frame store: out of memory"); return NULL; }
    fs->fd = -1;
    fs->w = c->width;
    fs->h = c->height;
    fs->frame_bytes = (uint64_t)12 * c->width * c->height;
    njfs_want *w = NULL;
    int k = 0, rc = c->build ? make_dirs(c->dir, err, errlen) : 0;
    if (!rc && !(fs->path = nj_framestore_file(c->dir, ds->path, c->width, c->height))) {
        snprintf(err, errlen, "frame store: out of memory");
        rc = -1;
    }
    if (!rc && c->build) {
        int stale = njfs_remove_stale_temps(fs->path);
        if (stale) njfs_say(c, "frame store %s: removed %d unfinished temporary file%s of an interrupted build\n",
                       fs->path, stale, stale == 1 ? "" : "s");
    }
    if (!rc && (k = collect(ds, samples, n, c->width, c->height, &w, err, errlen)) < 0) {
        k = 0;
        rc = -1;
    }
    if (!rc && !(fs->at = calloc((size_t)k + 1, sizeof *fs->at))) {
        snprintf(err, errlen, "frame store: out of memory");
        rc = -1;
    }
    if (!rc) rc = open_or_build(fs, ds, w, k, c, err, errlen);
    if (!rc && adopt(fs, ds, w, k)) {
        snprintf(err, errlen, "frame store: out of memory");
        rc = -1;
    }
    free_wants(w, k);
    if (rc) { store_free(fs); return NULL; }
    return fs;
}

int nj_framestore_read(const nj_framestore *fs, int seq, int right, int frame, float *dst, int *sw, int *sh,
                       char *err, size_t errlen)
{
    if (seq < 0 || seq >= fs->nseq || frame < 0 || frame >= fs->seq_frames[seq]) return 1;
    int i = fs->map[seq][(right ? fs->seq_frames[seq] : 0) + frame];
    if (i < 0) return 1;
    if (pread_all(fs->fd, dst, fs->frame_bytes, fs->data_off + fs->frame_bytes * (uint64_t)fs->at[i])) {
        snprintf(err, errlen, "%s: cannot read the frame of %s (the store was truncated while in use?)", fs->path,
                 fs->e[i].path);
        return -1;
    }
    if (nj_crc32(dst, fs->frame_bytes) != fs->e[i].crc) {
        snprintf(err, errlen, "%s: damaged: the checksum of the frame of %s does not match (it is rebuilt at the "
                 "next start)", fs->path, fs->e[i].path);
        return -1;
    }
    *sw = (int)fs->e[i].src_w;
    *sh = (int)fs->e[i].src_h;
    return 0;
}

const char *nj_framestore_path(const nj_framestore *fs) { return fs->path; }
int nj_framestore_frames(const nj_framestore *fs) { return fs->nframes; }
uint64_t nj_framestore_bytes(const nj_framestore *fs) { return fs->data_off + fs->frame_bytes * (uint64_t)fs->nframes; }
void nj_framestore_close(nj_framestore *fs) { store_free(fs); }

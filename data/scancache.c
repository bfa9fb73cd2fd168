/* data/scancache.c — the scan cache (see scancache.h).
 *
 * Entry layout (native byte order; a file from another machine fails the key
 * or the checksum and is a miss):
 *   "NJSCAN01", u32 key length, key bytes, u64 identity,
 *   i32 nframes, width, height, nkept, duplicates, i32 kept[nkept],
 *   u64 FNV-1a of everything before. */
#include "data/scancache.h"
#include "data/atomic.h"
#include "data/image.h"
#include <dirent.h>
#include <errno.h>
#include <fcntl.h>
#include <limits.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

#define MAGIC "NJSCAN01"
/* Bump when the stop filter or the checks of data/validate.c change what a
 * scan decides: older entries then miss. */
#define RULE_VERSION 1
#define KEEP_DAYS 30
#define FNV0 0xcbf29ce484222325ull

_Static_assert(sizeof(int) == 4, "kept indices are stored as 32-bit integers");

static uint64_t fnv(uint64_t h, const void *p, size_t n)
{
    const unsigned char *c = p;
    for (size_t i = 0; i < n; i++) h = (h ^ c[i]) * 0x100000001b3ull;
    return h;
}

int nj_scan_cache_dir(char *out, size_t n)
{
    const char *xdg = getenv("XDG_CACHE_HOME"), *home = getenv("HOME");
    int k = -1;
    if (xdg && xdg[0] == '/') k = snprintf(out, n, "%s/nightjar/scan", xdg);
    else if (home && home[0]) k = snprintf(out, n, "%s/.cache/nightjar/scan", home);
    return k > 0 && (size_t)k < n ? 0 : -1;
}

static uint64_t stat_hash(uint64_t h, const char *name, const struct stat *st)
{
    int64_t v[7] = {(int64_t)st->st_dev, (int64_t)st->st_ino, (int64_t)st->st_size, (int64_t)st->st_mtim.tv_sec,
                    st->st_mtim.tv_nsec, (int64_t)st->st_ctim.tv_sec, st->st_ctim.tv_nsec};
    h = fnv(h, name, strlen(name) + 1);
    return fnv(h, v, sizeof v);
}

static int folder_identity(const char *dir, char **names, int n, uint64_t *h)
{
    char path[PATH_MAX];
    struct stat st;
    for (int i = 0; i < n; i++) {
        int k = snprintf(path, sizeof path, "%s/%s", dir, names[i]);
        if (k < 0 || (size_t)k >= sizeof path || stat(path, &st) != 0) return -1;
        *h = stat_hash(*h, names[i], &st);
    }
    return 0;
}

int nj_scan_identity(const nj_sequence *s, int stereo, uint64_t *id)
{
    uint64_t h = FNV0;
    if (folder_identity(s->images, s->frames, s->nframes, &h)) return -1;
    if (stereo && folder_identity(s->right_images, s->frames, s->nframes, &h)) return -1;
    *id = h;
    return 0;
}

/* The key (malloc'd): rule version, real paths of the folders, threshold. */
static char *make_key(const nj_sequence *s, int stereo, float threshold)
{
    char *a = realpath(s->images, NULL), *b = stereo ? realpath(s->right_images, NULL) : NULL;
    char *key = NULL;
    if (a && (b || !stereo)) {
        size_t n = strlen(a) + (b ? strlen(b) : 0) + 96;
        key = malloc(n);
        if (key) snprintf(key, n, "nightjar-scan %d|%s|%s|%a", RULE_VERSION, a, b ? b : "-", (double)threshold);
    }
    free(a);
    free(b);
    return key;
}

static int entry_path(const char *dir, const char *key, char *out, size_t n)
{
    int k = snprintf(out, n, "%s/%016llx.scan", dir, (unsigned long long)fnv(FNV0, key, strlen(key)));
    return k > 0 && (size_t)k < n ? 0 : -1;
}

/* Reads the whole entry if it is no larger than `max` bytes. */
static unsigned char *slurp(const char *path, size_t max, size_t *len)
{
    FILE *f = fopen(path, "rb");
    struct stat st;
    if (!f) return NULL;
    unsigned char *buf = NULL;
    if (fstat(fileno(f), &st) == 0 && st.st_size > 0 && (size_t)st.st_size <= max &&
        (buf = malloc((size_t)st.st_size)) && fread(buf, 1, (size_t)st.st_size, f) != (size_t)st.st_size) {
        free(buf);
        buf = NULL;
    }
    fclose(f);
    *len = buf ? (size_t)st.st_size : 0;
    return buf;
}

/* Checks an entry against the key, identity and frame count; fills s. */
static int parse_entry(const unsigned char *b, size_t len, const char *key, uint64_t id, nj_sequence *s)
{
    size_t klen = strlen(key), at = 8 + 4 + klen;
    uint32_t stored_klen;
    uint64_t stored_id, sum;
    int32_t v[5];
    if (len < at + 8 + sizeof v + 8 || memcmp(b, MAGIC, 8)) return 0;
    memcpy(&stored_klen, b + 8, 4);
    if (stored_klen != klen || memcmp(b + 12, key, klen)) return 0;
    memcpy(&stored_id, b + at, 8);
    memcpy(v, b + at + 8, sizeof v);
    at += 8 + sizeof v;
    if (stored_id != id || v[0] != s->nframes || v[1] <= 0 || v[2] <= 0 || v[1] > NJ_IMAGE_MAX_SIDE ||
        v[2] > NJ_IMAGE_MAX_SIDE || v[3] < 0 || v[3] > v[0] || v[4] < 0 ||
        len != at + 4 * (size_t)v[3] + 8)
        return 0;
    memcpy(&sum, b + len - 8, 8);
    if (sum != fnv(FNV0, b, len - 8)) return 0;
    int *kept = malloc((size_t)(v[0] ? v[0] : 1) * sizeof(int));
    if (!kept) return 0;
    memcpy(kept, b + at, 4 * (size_t)v[3]);
    for (int i = 0; i < v[3]; i++)
        if (kept[i] < 0 || kept[i] >= v[0] || (i && kept[i] <= kept[i - 1])) { free(kept); return 0; }
    free(s->kept);
    s->kept = kept;
    s->width = v[1];
    s->height = v[2];
    s->nkept = v[3];
    s->duplicates = v[4];
    return 1;
}

int nj_scan_cache_load(const char *dir, nj_sequence *s, int stereo, float threshold, uint64_t id)
{
    char path[PATH_MAX];
    char *key = make_key(s, stereo, threshold);
    if (!key || entry_path(dir, key, path, sizeof path)) { free(key); return 0; }
    size_t len, max = 64 + strlen(key) + 4 * (size_t)s->nframes;
    unsigned char *b = slurp(path, max, &len);
    int hit = b && parse_entry(b, len, key, id, s);
    if (hit) utimensat(AT_FDCWD, path, NULL, 0);   /* used: kept from pruning */
    free(b);
    free(key);
    return hit;
}

static int mkdirs(const char *dir)
{
    char p[PATH_MAX];
    snprintf(p, sizeof p, "%s", dir);
    for (char *c = p + 1; *c; c++) {
        if (*c != '/') continue;
        *c = 0;
        if (mkdir(p, 0755) != 0 && errno != EEXIST) return -1;
        *c = '/';
    }
    return mkdir(p, 0755) != 0 && errno != EEXIST ? -1 : 0;
}

/* Removes entries unused for KEEP_DAYS and temporaries of interrupted writes
 * older than a day (a run killed while writing one), at most once a day: the
 * stamp file "pruned" holds the time of the last sweep, so a start storing
 * 100 sequences does not list the folder 100 times. */
static void prune(const char *dir)
{
    time_t now = time(NULL);
    char path[PATH_MAX];
    struct stat st;
    int k = snprintf(path, sizeof path, "%s/pruned", dir);
    if (k < 0 || (size_t)k >= sizeof path || (stat(path, &st) == 0 && now - st.st_mtime < 86400L)) return;
    int fd = open(path, O_WRONLY | O_CREAT, 0644);
    if (fd >= 0) {
        futimens(fd, NULL);
        close(fd);
    }
    DIR *d = opendir(dir);
    if (!d) return;
    for (struct dirent *e; (e = readdir(d));) {
        size_t n = strlen(e->d_name);
        int entry = n > 5 && !strcmp(e->d_name + n - 5, ".scan"), tmp = n > 4 && !strcmp(e->d_name + n - 4, ".tmp");
        if (!entry && !tmp) continue;
        int m = snprintf(path, sizeof path, "%s/%s", dir, e->d_name);
        if (m < 0 || (size_t)m >= sizeof path || stat(path, &st) != 0) continue;
        if (now - st.st_mtime > (entry ? KEEP_DAYS : 1) * 86400L) unlink(path);
    }
    closedir(d);
}

int nj_scan_cache_store(const char *dir, const nj_sequence *s, int stereo, float threshold, uint64_t id,
                        char *err, size_t errlen)
{
    char path[PATH_MAX];
    char *key = make_key(s, stereo, threshold);
    if (!key || entry_path(dir, key, path, sizeof path)) {
        snprintf(err, errlen, "%s: cannot name the scan cache entry of %s", dir, s->images);
        free(key);
        return -1;
    }
    if (mkdirs(dir)) {
        snprintf(err, errlen, "%s: cannot create the scan cache folder: %s", dir, strerror(errno));
        free(key);
        return -1;
    }
    prune(dir);
    size_t klen = strlen(key), len = 8 + 4 + klen + 8 + 20 + 4 * (size_t)s->nkept + 8;
    unsigned char *b = malloc(len);
    if (!b) { snprintf(err, errlen, "%s: out of memory", path); free(key); return -1; }
    uint32_t k32 = (uint32_t)klen;
    int32_t v[5] = {s->nframes, s->width, s->height, s->nkept, s->duplicates};
    size_t at = 0;
    memcpy(b, MAGIC, 8); at = 8;
    memcpy(b + at, &k32, 4); at += 4;
    memcpy(b + at, key, klen); at += klen;
    memcpy(b + at, &id, 8); at += 8;
    memcpy(b + at, v, sizeof v); at += sizeof v;
    memcpy(b + at, s->kept, 4 * (size_t)s->nkept); at += 4 * (size_t)s->nkept;
    uint64_t sum = fnv(FNV0, b, at);
    memcpy(b + at, &sum, 8);
    nj_atomic_file a;
    int rc = nj_atomic_open(&a, path, err, errlen);
    if (!rc) rc = nj_atomic_close(&a, fwrite(b, 1, len, a.f) == len, err, errlen);
    free(b);
    free(key);
    return rc;
}

/* data/framestore_format.h — the frame store's file layout and in-memory
 * index, shared by framestore.c (open, check, read) and framestore_build.c
 * (write).  Internal to data/framestore*.c; the layout is described in
 * data/framestore.h. */
#ifndef NJ_FRAMESTORE_FORMAT_H
#define NJ_FRAMESTORE_FORMAT_H
#include "data/framestore.h"
#include <stddef.h>
#include <stdint.h>

#define NJFS_MAGIC "NJFRAMES"
#define NJFS_ORDER 0x01020304u
#define NJFS_VERSION 1u
#define NJFS_ALIGN 4096u
#define NJFS_FIXED 40            /* bytes before the first entry */
#define NJFS_ENTRY_FIXED 44      /* bytes of an entry after its path (key, stat, size, crc) */
#define NJFS_MAX_PATH 4096
#define NJFS_MAX_FRAMES (1 << 24)

typedef struct njfs_entry {
    char *path;              /* the source file */
    uint64_t pixkey;         /* settings that shape its pixels (framestore.h) */
    uint64_t size;           /* the source's size in bytes */
    int64_t mtime_s, mtime_ns;
    uint32_t src_w, src_h;   /* the source's size in pixels */
    uint32_t crc;            /* of the stored frame's bytes */
} njfs_entry;

/* One frame the run uses: where it comes from and where it sits. */
typedef struct njfs_want {
    njfs_entry e;            /* path, key and source stat filled; size in pixels and crc once stored */
    int seq, right, frame;
    long old;                /* index of a reusable frame in the old file, or -1 */
} njfs_want;

struct nj_framestore {
    char *path;
    int fd;
    int w, h;
    uint64_t frame_bytes, data_off;
    int nframes;             /* frames the run uses */
    njfs_entry *e;           /* their entries (nframes) */
    long *at;                /* their positions in the file (nframes) */
    int nseq;
    int **map;               /* per sequence: map[s][right·nframes + frame] = index into e, or -1 */
    int *seq_frames;         /* nframes of each sequence */
};

/* The header of n entries: its bytes (malloc'd, *len set; D = *data_off).
 * NULL when out of memory. */
unsigned char *njfs_header(const njfs_entry *const *e, int n, int w, int h, size_t *len, uint64_t *data_off);
/* "DIR/NAME.XXXXXX.tmp" files of an interrupted build of `path` untouched
 * for over a minute are removed (a build in progress rewrites its file all
 * the time); returns how many. */
int njfs_remove_stale_temps(const char *path);
/* One line (printf-style) on c->say, flushed; nothing when it is NULL. */
void njfs_say(const nj_framestore_config *c, const char *fmt, ...) __attribute__((format(printf, 2, 3)));
/* Builds the store at fs->path from the wanted frames, copying those with
 * w[i].old ≥ 0 from old_fd (after their CRC check) and preparing the others
 * with nj_loader_frame; fills each entry's size and crc.  Prints the size
 * before writing and refuses when the folder lacks the room.  0, or -1 with
 * "PATH: why" (nothing left behind). */
int njfs_build(nj_framestore *fs, const nj_dataset *ds, njfs_want *w, int n, int old_fd,
               const njfs_entry *old, uint64_t old_data_off, const nj_framestore_config *c,
               char *err, size_t errlen);

#endif

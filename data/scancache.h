/* data/scancache.h — the result of a sequence's full image scan, kept between
 * runs so that training on 100,000 frames does not decode every frame at each
 * start (measured: ~4 ms of CPU per 320x240 PNG frame, so 100k frames took
 * minutes before the first step; DEVELOPERS.md "Large datasets").
 *
 * A full scan (data/validate.c) decodes every frame and its stereo partner,
 * checks sizes and decides which frames the stop filter keeps.  When it finds
 * no image problem, its result — the frame size, the kept frame indices and
 * the duplicate count — is written to one file per sequence in the cache
 * folder, under a name made from the sequence's folders (real paths), the
 * duplicate threshold and the scan rule's version.  The file also holds the
 * frames' identity: a 64-bit FNV-1a hash over every frame's (and partner's)
 * name, device, inode, size, modification and status-change times, taken by
 * stat() before the scan.  A later scan with the cache on stats the frames
 * again (no decoding) and uses the stored result only when the identity, the
 * key and the file's checksum all match; anything else is a miss and the
 * frames are decoded.  Changing, adding, removing, renaming or re-linking a
 * frame therefore misses; pixel corruption that leaves size and both times
 * alone (bit rot) does not — `nightjar check-data` without --quick never
 * reads the cache, and the loader still reports a frame that fails to decode.
 *
 * The folder is $XDG_CACHE_HOME/nightjar/scan, else $HOME/.cache/nightjar/scan.
 * Files are written atomically (data/atomic.h); entries unused for 30 days
 * (a hit refreshes an entry's time) are removed when a new one is written, at
 * most once a day.  A cache that cannot be read or
 * written only costs time. */
#ifndef NJ_SCANCACHE_H
#define NJ_SCANCACHE_H
#include "data/dataset.h"
#include <stdint.h>

/* The default cache folder into out (see above).  Returns 0, or -1 when
 * neither variable is set or the path does not fit. */
int nj_scan_cache_dir(char *out, size_t n);

/* Identity hash of the sequence's frames (left and, when `stereo`, the
 * partners).  Returns 0, or -1 when a file cannot be stat'ed. */
int nj_scan_identity(const nj_sequence *s, int stereo, uint64_t *id);

/* Fills s->width, s->height, s->kept, s->nkept and s->duplicates from a
 * matching entry.  Returns 1 on a hit, 0 on a miss (s untouched). */
int nj_scan_cache_load(const char *dir, nj_sequence *s, int stereo, float threshold, uint64_t id);

/* Writes the entry of a clean scan.  Returns 0, or -1 with "PATH: why" in err. */
int nj_scan_cache_store(const char *dir, const nj_sequence *s, int stereo, float threshold, uint64_t id,
                        char *err, size_t errlen);

#endif

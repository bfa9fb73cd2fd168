/* data/framestore.h — the frame store: every frame the training samples use,
 * prepared once at the training size (decoded and resized by
 * nj_loader_frame, data/loader_item.h — the same function the loader calls
 * otherwise, so the pixels are bit-identical) and kept in one file, from
 * which the loader then reads a frame with one pread instead of decoding a
 * full-size image.  With large source frames (1280×720, 1920×1080 JPEG) the
 * decode and resize cost several times the training step; read back from the
 * store a frame costs about a copy, whatever its source size.
 *
 * File "frames-WxH-HHHHHHHH.njfs" (H: FNV-1a of the dataset file's real path,
 * so stores of several datasets can share a folder), native byte order:
 *   "NJFRAMES", u32 0x01020304 (byte order), u32 version, u32 W, u32 H,
 *   u32 frame count N, u32 0, u64 D (offset of the first frame);
 *   N entries: u32 path length, the source path, u64 pixel key, u64 source
 *   size, i64 mtime seconds, i64 mtime nanoseconds, u32 source width,
 *   u32 source height, u32 CRC-32 of the frame's bytes;
 *   u32 CRC-32 of everything before it; zeros up to D (a multiple of 4096);
 *   N frames of 3×H×W float32 (planar RGB, the batch's layout).
 * The pixel key is FNV-1a over NJ_FRAME_PIXELS_VERSION, W×H and the
 * sequence's "camera" block as written in the dataset file: whatever changes
 * a frame's pixels changes its key.
 *
 * Validation at open: the layout (magic, byte order, version, size), the
 * file length (a truncated store is caught here), the header's CRC, then per
 * frame the source's size and modification time (nanoseconds) and the pixel
 * key; then the CRC of every frame the run uses (a damaged frame).  Sources
 * are checked by size + mtime, not by a hash of their content: hashing would
 * read every source file at every start (gigabytes for 1080p video), most of
 * the I/O the store saves; any ordinary rewrite (an editor, a converter, a copy
 * without preserving times) changes the mtime.  Not caught: a rewrite of the
 * same size whose mtime is set back to the old value to the nanosecond.
 * Anything wrong → the store is rebuilt (frames still valid are copied from
 * the old file, after their CRC check), with a one-line message naming the
 * file and the reason.  Writing goes through a temporary file and rename
 * (data/atomic.h), so a killed run leaves the old store or none, never half
 * of one; the size is printed before writing, and a folder without the room
 * is refused.  Reads check the frame's CRC again (a store damaged while
 * training gives an error naming the file; the loader's step is skipped).
 */
#ifndef NJ_FRAMESTORE_H
#define NJ_FRAMESTORE_H
#include "data/dataset.h"
#include <stdint.h>
#include <stdio.h>

typedef struct nj_framestore nj_framestore;

typedef struct nj_framestore_config {
    int width, height;       /* training size */
    const char *dir;         /* folder of the store file (created if missing) */
    int threads;             /* decoding threads while building (≤ 0: OpenMP's default) */
    int build;               /* 0: use a valid store as it is, never write one */
    FILE *say;               /* one line when a store is checked, rebuilt or written; NULL: quiet */
} nj_framestore_config;

/* Opens the store of `ds` at the configured size for the frames of
 * samples[0..n) (targets, temporal sources, stereo partners), checking it
 * against the sources, and builds or rebuilds it when needed.  NULL with
 * "PATH: why" in err when there is no usable store (cannot write, no room,
 * an unreadable source, or build = 0 and the store is missing or stale). */
nj_framestore *nj_framestore_open(const nj_dataset *ds, const nj_sample *samples, int n,
                                  const nj_framestore_config *c, char *err, size_t errlen);
/* Frame `frame` of sequence `seq` (right = 1: its stereo partner) into dst
 * (3×H×W floats); *sw, *sh get the source's size.  0 done, 1 not in the store
 * (the caller prepares it itself), -1 read error or checksum mismatch
 * ("PATH: why" in err).  Safe to call from several threads. */
int nj_framestore_read(const nj_framestore *fs, int seq, int right, int frame, float *dst, int *sw, int *sh,
                       char *err, size_t errlen);
/* The store's file, its frame count and its size in bytes. */
const char *nj_framestore_path(const nj_framestore *fs);
int nj_framestore_frames(const nj_framestore *fs);
uint64_t nj_framestore_bytes(const nj_framestore *fs);
void nj_framestore_close(nj_framestore *fs);

/* "DIR/frames-WxH-HHHHHHHH.njfs" for the dataset file (malloc'd; NULL when out
 * of memory). */
char *nj_framestore_file(const char *dir, const char *dataset_path, int width, int height);

#endif

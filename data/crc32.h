/* data/crc32.h — CRC-32 with the IEEE 802.3 polynomial (reflected form
 * 0xEDB88320, initial value and final xor 0xFFFFFFFF), the checksum of
 * zlib, PNG and gzip.  Slicing-by-8 (Kounavis & Berry 2005: eight 256-entry
 * tables, eight bytes per round), built once per process; the same values as
 * the bytewise table method, several times faster.  Used to detect damaged or
 * truncated files: checkpoints (train/loop/) and the frame store
 * (data/framestore.h), which is why it lives in data/. */
#ifndef NJ_CRC32_H
#define NJ_CRC32_H
#include <stddef.h>
#include <stdint.h>

typedef struct nj_crc32_ctx {
    uint32_t state;          /* running register (inverted) */
} nj_crc32_ctx;

void nj_crc32_init(nj_crc32_ctx *c);
void nj_crc32_update(nj_crc32_ctx *c, const void *data, size_t n);
/* The checksum of everything passed to update so far. */
uint32_t nj_crc32_value(const nj_crc32_ctx *c);
/* One-shot checksum of a buffer. */
uint32_t nj_crc32(const void *data, size_t n);

#endif

/* train/loop/crc32.h — CRC-32 with the IEEE 802.3 polynomial (reflected form
 * 0xEDB88320, initial value and final xor 0xFFFFFFFF), the checksum of
 * zlib, PNG and gzip; table-driven (one 256-entry table per running sum).
 * Used to detect damaged or truncated checkpoint files. */
#ifndef NJ_CRC32_H
#define NJ_CRC32_H
#include <stddef.h>
#include <stdint.h>

typedef struct nj_crc32_ctx {
    uint32_t table[256];
    uint32_t state;          /* running register (inverted) */
} nj_crc32_ctx;

void nj_crc32_init(nj_crc32_ctx *c);
void nj_crc32_update(nj_crc32_ctx *c, const void *data, size_t n);
/* The checksum of everything passed to update so far. */
uint32_t nj_crc32_value(const nj_crc32_ctx *c);
/* One-shot checksum of a buffer. */
uint32_t nj_crc32(const void *data, size_t n);

#endif

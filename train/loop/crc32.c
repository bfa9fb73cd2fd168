/* train/loop/crc32.c — table-driven CRC-32, IEEE polynomial (see crc32.h). */
#include "train/loop/crc32.h"

void nj_crc32_init(nj_crc32_ctx *c)
{
    for (uint32_t i = 0; i < 256; i++) {
        uint32_t r = i;
        for (int k = 0; k < 8; k++) r = (r >> 1) ^ (0xEDB88320u & (0u - (r & 1u)));
        c->table[i] = r;
    }
    c->state = 0xFFFFFFFFu;
}

void nj_crc32_update(nj_crc32_ctx *c, const void *data, size_t n)
{
    const unsigned char *p = data;
    uint32_t r = c->state;
    for (size_t i = 0; i < n; i++) r = c->table[(r ^ p[i]) & 0xFFu] ^ (r >> 8);
    c->state = r;
}

uint32_t nj_crc32_value(const nj_crc32_ctx *c) { return c->state ^ 0xFFFFFFFFu; }

uint32_t nj_crc32(const void *data, size_t n)
{
    nj_crc32_ctx c;
    nj_crc32_init(&c);
    nj_crc32_update(&c, data, n);
    return nj_crc32_value(&c);
}

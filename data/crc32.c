/* data/crc32.c — CRC-32, IEEE polynomial, slicing-by-8 (see crc32.h). */
#include "data/crc32.h"
#include <pthread.h>

static uint32_t table[8][256];
static pthread_once_t table_once = PTHREAD_ONCE_INIT;

/* table[0] is the bytewise table; table[k][b] advances table[k-1][b] by one
 * more zero byte, so eight lookups fold eight input bytes at once. */
static void build_tables(void)
{
    for (uint32_t i = 0; i < 256; i++) {
        uint32_t r = i;
        for (int k = 0; k < 8; k++) r = (r >> 1) ^ (0xEDB88320u & (0u - (r & 1u)));
        table[0][i] = r;
    }
    for (int k = 1; k < 8; k++)
        for (int i = 0; i < 256; i++) table[k][i] = (table[k - 1][i] >> 8) ^ table[0][table[k - 1][i] & 0xFFu];
}

void nj_crc32_init(nj_crc32_ctx *c)
{
    pthread_once(&table_once, build_tables);
    c->state = 0xFFFFFFFFu;
}

/* Little-endian 32-bit load from any alignment. */
static uint32_t le32(const unsigned char *p)
{
    return (uint32_t)p[0] | (uint32_t)p[1] << 8 | (uint32_t)p[2] << 16 | (uint32_t)p[3] << 24;
}

void nj_crc32_update(nj_crc32_ctx *c, const void *data, size_t n)
{
    const unsigned char *p = data;
    uint32_t r = c->state;
    for (; n >= 8; n -= 8, p += 8) {
        uint32_t a = le32(p) ^ r, b = le32(p + 4);
        r = table[7][a & 0xFFu] ^ table[6][(a >> 8) & 0xFFu] ^ table[5][(a >> 16) & 0xFFu] ^ table[4][a >> 24] ^
            table[3][b & 0xFFu] ^ table[2][(b >> 8) & 0xFFu] ^ table[1][(b >> 16) & 0xFFu] ^ table[0][b >> 24];
    }
    for (; n; n--, p++) r = table[0][(r ^ *p) & 0xFFu] ^ (r >> 8);
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

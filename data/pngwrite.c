/* data/pngwrite.c — atomic PNG writers: 8-bit RGB through stb_image_write,
 * 16-bit greyscale with our own chunk writer (stb_image_write has no 16-bit
 * PNG) around stb's zlib compressor.  PNG layout per the PNG specification
 * (W3C, 2003): signature, IHDR, IDAT, IEND; each chunk is length, type, data
 * and a CRC-32 of type+data. */
#include "data/atomic.h"
#include "data/image.h"
#include <stb_image_write.h>
#include <stdlib.h>
#include <string.h>

/* Exported by libstb's stb_image_write implementation (not in the header
 * unless the implementation is compiled in). Result is freed with free(). */
unsigned char *stbi_zlib_compress(unsigned char *data, int data_len, int *out_len, int quality);

typedef struct sink { FILE *f; int ok; } sink;

static void sink_write(void *ctx, void *data, int size)
{
    sink *s = ctx;
    if (s->ok && fwrite(data, 1, (size_t)size, s->f) != (size_t)size) s->ok = 0;
}

static unsigned char to_u8(float v)
{
    if (!(v > 0)) return 0;
    if (v >= 1) return 255;
    return (unsigned char)(v * 255.0f + 0.5f);
}

int nj_png_write_rgb(const char *path, const nj_image *im, char *err, size_t errlen)
{
    if (err && errlen) err[0] = 0;
    size_t n = (size_t)im->w * im->h;
    unsigned char *px = malloc(3 * n);
    if (!px) {
        snprintf(err, errlen, "%s: out of memory", path);
        return -1;
    }
    for (size_t i = 0; i < n; i++)
        for (int c = 0; c < 3; c++) px[3 * i + c] = to_u8(im->data[c * n + i]);
    nj_atomic_file a;
    if (nj_atomic_open(&a, path, err, errlen)) {
        free(px);
        return -1;
    }
    sink s = {a.f, 1};
    int ok = stbi_write_png_to_func(sink_write, &s, im->w, im->h, 3, px, 3 * im->w) && s.ok;
    free(px);
    return nj_atomic_close(&a, ok, err, errlen);
}

static uint32_t crc32_update(uint32_t crc, const unsigned char *p, size_t n)
{
    for (size_t i = 0; i < n; i++) {
        crc ^= p[i];
        for (int k = 0; k < 8; k++) crc = (crc >> 1) ^ (0xEDB88320u & (0u - (crc & 1u)));
    }
    return crc;
}

static void put_be32(unsigned char *p, uint32_t v)
{
    p[0] = (unsigned char)(v >> 24);
    p[1] = (unsigned char)(v >> 16);
    p[2] = (unsigned char)(v >> 8);
    p[3] = (unsigned char)v;
}

static int write_chunk(FILE *f, const char *type, const unsigned char *data, size_t n)
{
    unsigned char head[8], tail[4];
    put_be32(head, (uint32_t)n);
    memcpy(head + 4, type, 4);
    uint32_t crc = crc32_update(0xFFFFFFFFu, head + 4, 4);
    crc = crc32_update(crc, data, n) ^ 0xFFFFFFFFu;
    put_be32(tail, crc);
    return fwrite(head, 1, 8, f) == 8 && (n == 0 || fwrite(data, 1, n, f) == n) &&
           fwrite(tail, 1, 4, f) == 4;
}

/* Filtered scanlines: each row is filter byte 1 (Sub, bpp 2) + big-endian
 * differences to the sample two bytes to the left. */
static unsigned char *scanlines(const uint16_t *v, int w, int h, size_t *len)
{
    size_t stride = 1 + 2 * (size_t)w;
    unsigned char *raw = malloc(stride * h), *row = malloc(2 * (size_t)w);
    if (!raw || !row) {
        free(raw);
        free(row);
        return NULL;
    }
    for (int y = 0; y < h; y++) {
        unsigned char *out = raw + y * stride;
        for (int x = 0; x < w; x++) {
            row[2 * x] = (unsigned char)(v[(size_t)y * w + x] >> 8);
            row[2 * x + 1] = (unsigned char)v[(size_t)y * w + x];
        }
        out[0] = 1;
        for (int i = 0; i < 2 * w; i++) out[1 + i] = (unsigned char)(row[i] - (i >= 2 ? row[i - 2] : 0));
    }
    free(row);
    *len = stride * h;
    return raw;
}

static int write_png16(FILE *f, const uint16_t *v, int w, int h)
{
    static const unsigned char sig[8] = {0x89, 'P', 'N', 'G', '\r', '\n', 0x1a, '\n'};
    unsigned char ihdr[13];
    put_be32(ihdr, (uint32_t)w);
    put_be32(ihdr + 4, (uint32_t)h);
    ihdr[8] = 16;                       /* bit depth */
    ihdr[9] = 0;                        /* greyscale */
    ihdr[10] = ihdr[11] = ihdr[12] = 0; /* deflate, adaptive filtering, no interlace */
    size_t rawlen;
    unsigned char *raw = scanlines(v, w, h, &rawlen);
    if (!raw) return 0;
    int zlen = 0;
    unsigned char *z = stbi_zlib_compress(raw, (int)rawlen, &zlen, 6);
    free(raw);
    if (!z) return 0;
    int ok = fwrite(sig, 1, 8, f) == 8 && write_chunk(f, "IHDR", ihdr, 13) &&
             write_chunk(f, "IDAT", z, (size_t)zlen) && write_chunk(f, "IEND", NULL, 0);
    free(z);
    return ok;
}

int nj_png_write_grey16(const char *path, const uint16_t *v, int w, int h,
                        char *err, size_t errlen)
{
    if (err && errlen) err[0] = 0;
    if (w <= 0 || h <= 0 || (long)w * h > NJ_IMAGE_MAX_PIXELS) {
        snprintf(err, errlen, "%s: bad image size %dx%d", path, w, h);
        return -1;
    }
    nj_atomic_file a;
    if (nj_atomic_open(&a, path, err, errlen)) return -1;
    int ok = write_png16(a.f, v, w, h);
    if (!ok) snprintf(err, errlen, "%s: cannot encode or write the 16-bit PNG", path);
    return nj_atomic_close(&a, ok, err, errlen);
}

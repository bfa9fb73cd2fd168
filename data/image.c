/* data/image.c — decoding PNG/JPEG into planar float RGB with size limits. */
#include "data/image.h"
#include <errno.h>
#include <limits.h>
#include <stdint.h>
#include <stb_image.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

int nj_image_alloc(nj_image *im, int w, int h)
{
    im->w = w;
    im->h = h;
    im->data = malloc((size_t)3 * (size_t)w * (size_t)h * sizeof(float));
    return im->data ? 0 : -1;
}

void nj_image_free(nj_image *im)
{
    if (!im) return;
    free(im->data);
    im->data = NULL;
    im->w = im->h = 0;
}

/* PNG or JPEG by content: stb_image would also decode GIF, BMP, PSD, TGA,
 * HDR, PIC and PNM, which nightjar never reads; refusing them keeps those
 * decoders away from untrusted files.  For a PNG, *w and *h receive the
 * IHDR size (checked by us before stb_image parses anything); -1 for JPEG. */
static int check_signature(FILE *f, const char *path, int *w, int *h, char *err, size_t errlen)
{
    static const unsigned char png[8] = {0x89, 'P', 'N', 'G', '\r', '\n', 0x1a, '\n'};
    unsigned char b[24] = {0};
    size_t n = f ? fread(b, 1, sizeof b, f) : 0;
    *w = *h = -1;
    if (n >= 3 && b[0] == 0xff && b[1] == 0xd8 && b[2] == 0xff) return 0;
    if (n == sizeof b && !memcmp(b, png, 8) && !memcmp(b + 12, "IHDR", 4)) {
        uint32_t pw = (uint32_t)b[16] << 24 | (uint32_t)b[17] << 16 | (uint32_t)b[18] << 8 | b[19];
        uint32_t ph = (uint32_t)b[20] << 24 | (uint32_t)b[21] << 16 | (uint32_t)b[22] << 8 | b[23];
        *w = pw > INT_MAX ? INT_MAX : (int)pw;
        *h = ph > INT_MAX ? INT_MAX : (int)ph;
        return 0;
    }
    snprintf(err, errlen, "%s: unreadable image (not a PNG or JPEG file)", path);
    return -1;
}

/* Every PNG chunk must fit inside the file: stb_image grows its buffer to a
 * chunk's claimed length before reading it, so a 159-byte file claiming a
 * 2 GB IDAT made it allocate 2 GB (found by fuzz_png16). */
static int check_png_chunks(FILE *f, const char *path, long long size, char *err, size_t errlen)
{
    if (fseek(f, 8, SEEK_SET)) {
        snprintf(err, errlen, "%s: cannot read the PNG chunks", path);
        return -1;
    }
    long long at = 8;
    unsigned char b[8];
    int rc = 0;
    while (at + 8 <= size && fread(b, 1, 8, f) == 8) {
        long long len = (long long)b[0] << 24 | b[1] << 16 | b[2] << 8 | b[3];
        if (at + 12 + len > size) {
            snprintf(err, errlen, "%s: corrupt image (PNG chunk '%.4s' claims %lld bytes, past the end of the file)", path,
                     (const char *)b + 4, len);
            rc = -1;
            break;
        }
        if (!memcmp(b + 4, "IEND", 4)) break;
        at += 12 + len;
        if (fseek(f, (long)at, SEEK_SET)) break;
    }
    return rc;
}

static int check_limits(const char *path, int w, int h, long long bytes, char *err, size_t errlen)
{
    if (w <= 0 || h <= 0) {
        snprintf(err, errlen, "%s: image has an empty size %dx%d", path, w, h);
        return -1;
    }
    if (w > NJ_IMAGE_MAX_SIDE || h > NJ_IMAGE_MAX_SIDE) {
        snprintf(err, errlen, "%s: image is %dx%d; refusing sides above %d pixels",
                 path, w, h, NJ_IMAGE_MAX_SIDE);
        return -1;
    }
    if ((long)w * (long)h > NJ_IMAGE_MAX_PIXELS) {
        snprintf(err, errlen, "%s: image is %dx%d (%.1f MP); refusing more than %ld MP",
                 path, w, h, (double)w * h / 1e6, NJ_IMAGE_MAX_PIXELS / 1000000);
        return -1;
    }
    /* deflate expands at most 1032:1 and a PNG pixel takes at least 1 bit, so
     * no PNG (nor JPEG) of `bytes` bytes decodes to more than ~8256·bytes
     * pixels: a larger header is a lie, refused before anything is allocated. */
    if ((double)w * h > NJ_IMAGE_PIXELS_PER_BYTE * (double)bytes + (1 << 20)) {
        snprintf(err, errlen, "%s: header claims %dx%d pixels, more than a %lld-byte file can hold",
                 path, w, h, bytes);
        return -1;
    }
    return 0;
}

int nj_image_probe(const char *path, int *w, int *h, char *err, size_t errlen)
{
    struct stat st;
    if (stat(path, &st) != 0) {
        snprintf(err, errlen, "%s: cannot open image: %s", path, strerror(errno));
        return -1;
    }
    if (!S_ISREG(st.st_mode)) {
        snprintf(err, errlen, "%s: not a regular file", path);
        return -1;
    }
    /* one open for the signature, the chunk walk and stb_image's header read
     * (three opens before: 100,000 headers took 3.3 s of system time) */
    FILE *f = fopen(path, "rb");
    int rc = check_signature(f, path, w, h, err, errlen), comp = 0;
    if (!rc && *w >= 0) rc = check_limits(path, *w, *h, (long long)st.st_size, err, errlen);
    if (!rc && *w >= 0) rc = check_png_chunks(f, path, (long long)st.st_size, err, errlen);
    if (!rc && (fseek(f, 0, SEEK_SET) || !stbi_info_from_file(f, w, h, &comp))) {
        snprintf(err, errlen, "%s: unreadable image (%s)", path, stbi_failure_reason());
        rc = -1;
    }
    if (f) fclose(f);
    return rc ? -1 : check_limits(path, *w, *h, (long long)st.st_size, err, errlen);
}

/* Interleaved 8-bit RGB → planar float in [0,1]. */
static void to_planar(const unsigned char *px, nj_image *im)
{
    size_t n = (size_t)im->w * (size_t)im->h;
    float *r = im->data, *g = r + n, *b = g + n;
    for (size_t i = 0; i < n; i++) {
        r[i] = px[3 * i] / 255.0f;
        g[i] = px[3 * i + 1] / 255.0f;
        b[i] = px[3 * i + 2] / 255.0f;
    }
}

int nj_image_load(const char *path, nj_image *im, char *err, size_t errlen)
{
    im->data = NULL;
    im->w = im->h = 0;
    int w, h, comp;
    if (nj_image_probe(path, &w, &h, err, errlen)) return -1;
    unsigned char *px = stbi_load(path, &w, &h, &comp, 3);
    if (!px) {
        snprintf(err, errlen, "%s: corrupt image (%s)", path, stbi_failure_reason());
        return -1;
    }
    if (nj_image_alloc(im, w, h)) {
        stbi_image_free(px);
        snprintf(err, errlen, "%s: out of memory for %dx%d", path, w, h);
        return -1;
    }
    to_planar(px, im);
    stbi_image_free(px);
    return 0;
}

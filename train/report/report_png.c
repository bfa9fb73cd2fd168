/* train/report/report_png.c — embedding pictures and text in the report: 8-bit
 * PNG (stb_image_write) as a base64 data URI (RFC 4648 alphabet, padded),
 * and HTML escaping. */
#include "train/report/report_parts.h"
#include <stb_image_write.h>
#include <stdlib.h>
#include <string.h>

static void base64(FILE *f, const unsigned char *p, size_t n)
{
    static const char A[] = "ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789+/";
    for (size_t i = 0; i < n; i += 3) {
        unsigned v = (unsigned)p[i] << 16;
        if (i + 1 < n) v |= (unsigned)p[i + 1] << 8;
        if (i + 2 < n) v |= p[i + 2];
        fputc(A[(v >> 18) & 63], f);
        fputc(A[(v >> 12) & 63], f);
        fputc(i + 1 < n ? A[(v >> 6) & 63] : '=', f);
        fputc(i + 2 < n ? A[v & 63] : '=', f);
    }
}

typedef struct png_buf {
    unsigned char *p;
    size_t n, cap;
    int ok;
} png_buf;

static void png_sink(void *ctx, void *data, int size)
{
    png_buf *b = ctx;
    if (!b->ok || size <= 0) return;
    if (b->n + (size_t)size > b->cap) {
        size_t cap = (b->n + (size_t)size) * 2;
        unsigned char *q = realloc(b->p, cap);
        if (!q) { b->ok = 0; return; }
        b->p = q;
        b->cap = cap;
    }
    memcpy(b->p + b->n, data, (size_t)size);
    b->n += (size_t)size;
}

int nj_png_data_uri(FILE *f, const unsigned char *rgb, int w, int h)
{
    png_buf b = {NULL, 0, 0, 1};
    int ok = stbi_write_png_to_func(png_sink, &b, w, h, 3, rgb, 3 * w) && b.ok;
    if (ok) nj_data_uri(f, "image/png", b.p, b.n);
    free(b.p);
    return ok ? 0 : -1;
}

char *nj_report_slurp(const char *path, size_t *len)
{
    FILE *f = path ? fopen(path, "rb") : NULL;
    if (!f) return NULL;
    char *text = NULL;
    long n = -1;
    if (fseek(f, 0, SEEK_END) == 0 && (n = ftell(f)) >= 0 && fseek(f, 0, SEEK_SET) == 0 &&
        (text = malloc((size_t)n + 1)) && fread(text, 1, (size_t)n, f) == (size_t)n) {
        text[n] = 0;
    } else {
        free(text);
        text = NULL;
    }
    fclose(f);
    if (text && len) *len = (size_t)n;
    return text;
}

void nj_data_uri(FILE *f, const char *mime, const unsigned char *p, size_t n)
{
    fprintf(f, "data:%s;base64,", mime);
    base64(f, p, n);
}

void nj_html_text(FILE *f, const char *s)
{
    for (; s && *s; s++) {
        switch (*s) {
        case '<': fputs("&lt;", f); break;
        case '>': fputs("&gt;", f); break;
        case '&': fputs("&amp;", f); break;
        case '"': fputs("&quot;", f); break;
        default: fputc(*s, f);
        }
    }
}

/* train/export/export_pb.c — minimal Protocol Buffers encoder (see export_pb.h). */
#include "train/export/export_pb.h"
#include <stdlib.h>
#include <string.h>

enum { WIRE_VARINT = 0, WIRE_LEN = 2, WIRE_FIXED32 = 5 };

void nj_pb_init(nj_pb *b)
{
    memset(b, 0, sizeof *b);
}

void nj_pb_free(nj_pb *b)
{
    free(b->data);
    memset(b, 0, sizeof *b);
}

static int reserve(nj_pb *b, size_t extra)
{
    if (b->failed) return -1;
    if (b->len + extra <= b->cap) return 0;
    size_t cap = b->cap ? b->cap : 256;
    while (cap < b->len + extra) cap *= 2;
    unsigned char *d = realloc(b->data, cap);
    if (!d) {
        b->failed = 1;
        return -1;
    }
    b->data = d;
    b->cap = cap;
    return 0;
}

static void put(nj_pb *b, const void *p, size_t n)
{
    if (reserve(b, n)) return;
    if (n) memcpy(b->data + b->len, p, n);
    b->len += n;
}

static void varint(nj_pb *b, uint64_t v)
{
    unsigned char t[10];
    size_t n = 0;
    do {
        t[n] = (unsigned char)(v & 0x7f);
        v >>= 7;
        if (v) t[n] |= 0x80;
        n++;
    } while (v);
    put(b, t, n);
}

static void tag(nj_pb *b, int field, int wire)
{
    varint(b, ((uint64_t)field << 3) | (uint64_t)wire);
}

void nj_pb_int(nj_pb *b, int field, int64_t v)
{
    tag(b, field, WIRE_VARINT);
    varint(b, (uint64_t)v);   /* negative values: ten-byte two's complement, as protobuf does */
}

void nj_pb_float(nj_pb *b, int field, float v)
{
    uint32_t u;
    memcpy(&u, &v, sizeof u);
    unsigned char t[4] = {(unsigned char)u, (unsigned char)(u >> 8), (unsigned char)(u >> 16),
                          (unsigned char)(u >> 24)};
    tag(b, field, WIRE_FIXED32);
    put(b, t, 4);
}

void nj_pb_bytes(nj_pb *b, int field, const void *data, size_t n)
{
    tag(b, field, WIRE_LEN);
    varint(b, n);
    put(b, data, n);
}

void nj_pb_string(nj_pb *b, int field, const char *s)
{
    nj_pb_bytes(b, field, s, strlen(s));
}

void nj_pb_message(nj_pb *b, int field, const nj_pb *sub)
{
    if (sub->failed) b->failed = 1;
    nj_pb_bytes(b, field, sub->data, sub->len);
}

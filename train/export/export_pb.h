/* train/export/export_pb.h — a minimal Protocol Buffers encoder (the published wire
 * format: varint, 32-bit and length-delimited fields) for the ONNX export.
 *
 * Messages are built bottom-up: fill a sub-message in its own nj_pb, then
 * embed it as a length-delimited field of the parent with nj_pb_message.
 * Repeated scalar fields are written unpacked (one tag per value), which
 * every proto2/proto3 parser accepts.  Out-of-memory is sticky: `failed` is
 * set and later calls do nothing. */
#ifndef NJ_EXPORT_PB_H
#define NJ_EXPORT_PB_H
#include <stddef.h>
#include <stdint.h>

typedef struct nj_pb {
    unsigned char *data;
    size_t len, cap;
    int failed;
} nj_pb;

void nj_pb_init(nj_pb *b);
void nj_pb_free(nj_pb *b);
/* Field `field` as a varint (wire type 0): int32/int64/enum/bool. */
void nj_pb_int(nj_pb *b, int field, int64_t v);
/* Field as a 32-bit float (wire type 5, little-endian). */
void nj_pb_float(nj_pb *b, int field, float v);
/* Field as bytes / string / embedded message (wire type 2). */
void nj_pb_bytes(nj_pb *b, int field, const void *data, size_t n);
void nj_pb_string(nj_pb *b, int field, const char *s);
void nj_pb_message(nj_pb *b, int field, const nj_pb *sub);

#endif

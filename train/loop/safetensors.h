/* train/loop/safetensors.h — reading safetensors files (the layout written by
 * `nightjar export --format safetensors`, see export_safetensors.c).
 *
 * The file is untrusted.  nj_safetensors_parse checks, before trusting any
 * number: the 8-byte header length against the bytes present (and a 100 MB
 * limit), that the header is one JSON object (nesting is bounded by cJSON),
 * every tensor entry has exactly "dtype" (a known safetensors dtype),
 * "shape" (at most 8 non-negative integers) and "data_offsets" ([begin, end]
 * inside the data section, end − begin = element count × dtype size), names
 * are unique, and the tensors cover the data section exactly (no holes, no
 * overlaps, nothing after the last one).  "__metadata__" must map strings
 * to strings.  Errors are one line "FILE: what is wrong".
 *
 * nj_safetensors_init_model loads an export into a model of the same
 * architecture (`nightjar train --init FILE.safetensors`): every unit needs
 * NAME.weight (F32, or I8 with NAME.weight_scale) and NAME.bias, group-norm
 * units NAME.norm_gamma/norm_beta; the file may hold nothing else.  Batch
 * norm was folded into the conv at export, so batch-norm units get the
 * folded weights and an identity normalisation (gamma 1, beta 0, running
 * mean 0, running variance 1 − eps): exporting the model again gives the
 * same tensors.  Training then renormalises with batch statistics.
 */
#ifndef NJ_SAFETENSORS_H
#define NJ_SAFETENSORS_H
#include "train/model/model.h"
#include <stddef.h>
#include <stdint.h>

#define NJ_ST_MAX_HEADER (100u << 20)   /* the format's own limit */
#define NJ_ST_MAX_DIMS 8
#define NJ_ST_NAME_MAX 127

typedef struct nj_st_tensor {
    char name[NJ_ST_NAME_MAX + 1];
    char dtype[8];                 /* "F32", "I8", ... */
    int dtype_size;                /* bytes per element */
    int ndim;
    uint64_t shape[NJ_ST_MAX_DIMS];
    uint64_t numel;
    uint64_t begin, end;           /* byte range inside the data section */
} nj_st_tensor;

typedef struct nj_safetensors {
    uint8_t *owned;                /* the whole file when read by nj_safetensors_read */
    const uint8_t *data;           /* the data section */
    uint64_t data_len;
    nj_st_tensor *t;
    int n;
} nj_safetensors;

/* Parses bytes[0..len-1] (borrowed: they must outlive *st).  `name` labels
 * the messages.  Returns 0, or -1 with "NAME: why" in err. */
int nj_safetensors_parse(nj_safetensors *st, const uint8_t *bytes, size_t len, const char *name,
                         char *err, size_t errlen);
/* Reads and parses PATH (at most 2 GiB; nothing larger than the file is
 * allocated).  Returns 0 or -1 with a message. */
int nj_safetensors_read(nj_safetensors *st, const char *path, char *err, size_t errlen);
void nj_safetensors_free(nj_safetensors *st);
/* The tensor called `name`, or NULL. */
const nj_st_tensor *nj_safetensors_find(const nj_safetensors *st, const char *name);
/* Element i of a F32 or I8 tensor as float (little-endian in the file). */
float nj_safetensors_value(const nj_safetensors *st, const nj_st_tensor *t, uint64_t i);

/* Loads an exported model into *m (already built with the architecture the
 * file must match).  Returns 0 or -1 with a message naming PATH. */
int nj_safetensors_init_model(const char *path, nj_model *m, char *err, size_t errlen);

#endif

/* tests/hostile_files.h — building hostile input files for the tests
 * (test_hostile, test_fuzz_regress): NPY headers, PNG headers, tiny
 * checkpoints and safetensors files with chosen claims. */
#ifndef NJ_HOSTILE_FILES_H
#define NJ_HOSTILE_FILES_H
#include <stddef.h>
#include <stdint.h>

/* Writes n bytes to path; 0 or -1. */
int hf_write(const char *path, const void *data, size_t n);
/* A version-1.0 NPY file with the header dict `dict` (padded as NumPy does)
 * followed by `data_bytes` zero bytes. */
int hf_npy(const char *path, const char *dict, size_t data_bytes);
/* A PNG with only an IHDR claiming w×h (8-bit, colour type ctype), one small
 * IDAT and IEND; chunk CRCs are correct. */
int hf_png_header(const char *path, uint32_t w, uint32_t h, int bit_depth, int ctype);
/* A valid checkpoint of a tiny model (1 stage, width 0.25, 1 scale, batch
 * norm, no pose net) into *buf (malloc'd), *len bytes.  0 or -1. */
int hf_tiny_checkpoint(const char *tmp_path, uint8_t **buf, size_t *len);
/* Offset of the tensor table (the u32 tensor count) in a checkpoint image. */
size_t hf_ckpt_table(const uint8_t *buf);
/* Recomputes the trailing CRC-32 of a checkpoint image. */
void hf_ckpt_fix_crc(uint8_t *buf, size_t len);
/* A safetensors file: the 8-byte header length `claimed` (the real length
 * of `json` when claimed is UINT64_MAX), the JSON text, then `data_bytes`
 * zero bytes. */
int hf_safetensors(const char *path, const char *json, uint64_t claimed, size_t data_bytes);
/* "{\"sequences\": " + depth '[' + depth ']' + "}" style text (malloc'd):
 * prefix, depth opening brackets, depth closing ones, suffix. */
char *hf_deep_json(const char *prefix, int depth, const char *suffix);

/* The readers of outside input as one function type: 0 when the file was
 * read (everything is freed again), -1 with the reader's message in err. */
typedef int (*hf_reader)(const char *path, char *err, size_t errlen);
int hf_read_npy(const char *path, char *err, size_t errlen);
int hf_read_pfm(const char *path, char *err, size_t errlen);
int hf_read_png16(const char *path, char *err, size_t errlen);     /* depth, scale 1000 */
int hf_read_image(const char *path, char *err, size_t errlen);     /* probe + decode */
int hf_read_checkpoint(const char *path, char *err, size_t errlen);
int hf_read_safetensors(const char *path, char *err, size_t errlen);
/* nj_safetensors_read, then loading into the tiny model of hf_tiny_checkpoint. */
int hf_read_safetensors_init(const char *path, char *err, size_t errlen);
int hf_read_dataset(const char *path, char *err, size_t errlen);   /* first problem line */
int hf_read_config(const char *path, char *err, size_t errlen);
/* The reader a fuzz target exercises ("fuzz_npy" → hf_read_npy, ...), or NULL. */
hf_reader hf_reader_for(const char *fuzz_target);

#endif

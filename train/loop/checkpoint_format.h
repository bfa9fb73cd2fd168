/* train/loop/checkpoint_format.h — the byte layout of a ".ckpt" file (format 01),
 * shared by the writer (checkpoint.c) and the reader (checkpoint_load.c).
 * All integers and floats are little-endian.
 *
 *   8 bytes   magic "NJCKPT01" ("NJCKPT" + two-digit format version)
 *   u32       C = length of the configuration text
 *   C bytes   the configuration as JSON (nj_train_config_to_json, no terminator)
 *   u32       S = length of the state block (NJ_CKPT_STATE_BYTES; the reader also
 *             accepts NJ_CKPT_STATE_BYTES_V1, the block before `ranks` existed)
 *   S bytes   state: i64 step, i64 epoch, u64 rng[0], u64 rng[1], u64 loader_seed,
 *             i64 loader_cursor, f64 best_val, i64 adam_step, f64 elapsed_seconds,
 *             u64 dataset_hash, i64 schedule_steps, i32 nan_recoveries,
 *             i32 resumes, f32 lr_scale, i32 ranks (processes of a data-parallel
 *             run; 1 when absent)
 *   u32       T = number of tensors
 *   T entries u8 name length L (1..63), L bytes name, u8 kind (nj_ckpt_kind),
 *             u8 group, u32 n, u32 c, u32 h, u32 w
 *   data      for every entry in table order, n·c·h·w float32 values
 *   u32       CRC-32 (IEEE) of every byte before it
 *
 * The writer lists all parameters, then all buffers, then the Adam first
 * moments, then the second moments; the reader accepts any order.
 */
#ifndef NJ_CHECKPOINT_FORMAT_H
#define NJ_CHECKPOINT_FORMAT_H
#include <stdint.h>

#define NJ_CKPT_MAGIC "NJCKPT"          /* followed by the version digits */
#define NJ_CKPT_VERSION "01"
#define NJ_CKPT_STATE_BYTES 104
#define NJ_CKPT_STATE_BYTES_V1 100
#define NJ_CKPT_ENTRY_MIN 20            /* entry with a one-byte name */
#define NJ_CKPT_MAX_CONFIG (1u << 20)
#define NJ_CKPT_MAX_TENSORS 65536u
#define NJ_CKPT_NAME_MAX 63

typedef enum { NJ_CKPT_PARAM = 0, NJ_CKPT_BUFFER = 1, NJ_CKPT_ADAM_M = 2, NJ_CKPT_ADAM_V = 3 } nj_ckpt_kind;

static inline void nj_le_put32(uint8_t *p, uint32_t v)
{
    for (int i = 0; i < 4; i++) p[i] = (uint8_t)(v >> (8 * i));
}

static inline void nj_le_put64(uint8_t *p, uint64_t v)
{
    for (int i = 0; i < 8; i++) p[i] = (uint8_t)(v >> (8 * i));
}

static inline uint32_t nj_le_get32(const uint8_t *p)
{
    uint32_t v = 0;
    for (int i = 3; i >= 0; i--) v = (v << 8) | p[i];
    return v;
}

static inline uint64_t nj_le_get64(const uint8_t *p)
{
    uint64_t v = 0;
    for (int i = 7; i >= 0; i--) v = (v << 8) | p[i];
    return v;
}

static inline const char *nj_ckpt_kind_name(int kind)
{
    static const char *const names[4] = {"parameter", "buffer", "adam_m", "adam_v"};
    return kind >= 0 && kind < 4 ? names[kind] : "unknown";
}

#endif

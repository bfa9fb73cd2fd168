/* tests/hostile_files.c — hostile input files for the tests (hostile_files.h). */
#include "tests/hostile_files.h"
#include "data/dataset.h"
#include "data/depthio.h"
#include "data/image.h"
#include "data/npy.h"
#include "train/loop/safetensors.h"
#include "train/loop/checkpoint.h"
#include "train/loop/checkpoint_format.h"
#include "data/crc32.h"
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

int hf_write(const char *path, const void *data, size_t n)
{
    FILE *f = fopen(path, "wb");
    if (!f) return -1;
    int ok = fwrite(data, 1, n, f) == n;
    return fclose(f) == 0 && ok ? 0 : -1;
}

int hf_npy(const char *path, const char *dict, size_t data_bytes)
{
    size_t dl = strlen(dict), total = (10 + dl + 1 + 63) / 64 * 64, hlen = total - 10;
    uint8_t *b = calloc(total + data_bytes, 1);
    if (!b) return -1;
    memcpy(b, "\x93NUMPY\x01\x00", 8);
    b[8] = (uint8_t)(hlen & 0xff);
    b[9] = (uint8_t)(hlen >> 8);
    memcpy(b + 10, dict, dl);
    memset(b + 10 + dl, ' ', total - 10 - dl - 1);
    b[total - 1] = '\n';
    int rc = hf_write(path, b, total + data_bytes);
    free(b);
    return rc;
}

static size_t chunk(uint8_t *out, const char *type, const uint8_t *data, uint32_t n)
{
    for (int i = 0; i < 4; i++) out[i] = (uint8_t)(n >> (24 - 8 * i));
    memcpy(out + 4, type, 4);
    if (n) memcpy(out + 8, data, n);
    uint32_t crc = nj_crc32(out + 4, 4 + n);
    for (int i = 0; i < 4; i++) out[8 + n + i] = (uint8_t)(crc >> (24 - 8 * i));
    return 12 + n;
}

int hf_png_header(const char *path, uint32_t w, uint32_t h, int bit_depth, int ctype)
{
    uint8_t b[128], ihdr[13] = {0};
    /* a zlib stream of 16 zero bytes */
    static const uint8_t idat[] = {0x78, 0x9c, 0x63, 0x60, 0x40, 0x05, 0x00, 0x00, 0x10, 0x00, 0x01};
    for (int i = 0; i < 4; i++) {
        ihdr[i] = (uint8_t)(w >> (24 - 8 * i));
        ihdr[4 + i] = (uint8_t)(h >> (24 - 8 * i));
    }
    ihdr[8] = (uint8_t)bit_depth;
    ihdr[9] = (uint8_t)ctype;
    memcpy(b, "\x89PNG\r\n\x1a\n", 8);
    size_t n = 8;
    n += chunk(b + n, "IHDR", ihdr, 13);
    n += chunk(b + n, "IDAT", idat, sizeof idat);
    n += chunk(b + n, "IEND", NULL, 0);
    return hf_write(path, b, n);
}

int hf_tiny_checkpoint(const char *tmp_path, uint8_t **buf, size_t *len)
{
    nj_train_config c;
    nj_train_config_default(&c);
    c.width = c.height = 32;
    c.model.stages = 1;
    c.model.width = 0.25f;
    c.model.scales = 1;
    c.model.pose = 0;
    c.video = 0;
    c.stereo = 1;
    nj_model m;
    char err[512];
    if (nj_model_init(&m, &c.model, err, sizeof err)) return -1;
    nj_train_state st;
    memset(&st, 0, sizeof st);
    st.best_val = INFINITY;
    st.lr_scale = 1;
    int rc = nj_checkpoint_save(tmp_path, &m, &c, &st, err, sizeof err);
    nj_model_free(&m);
    if (rc) return -1;
    FILE *f = fopen(tmp_path, "rb");
    if (!f) return -1;
    fseek(f, 0, SEEK_END);
    long n = ftell(f);
    fseek(f, 0, SEEK_SET);
    *buf = malloc((size_t)n);
    rc = *buf && fread(*buf, 1, (size_t)n, f) == (size_t)n ? 0 : -1;
    fclose(f);
    *len = (size_t)n;
    return rc;
}

size_t hf_ckpt_table(const uint8_t *buf)
{
    return 8 + 4 + nj_le_get32(buf + 8) + 4 + NJ_CKPT_STATE_BYTES;
}

void hf_ckpt_fix_crc(uint8_t *buf, size_t len)
{
    nj_le_put32(buf + len - 4, nj_crc32(buf, len - 4));
}

int hf_safetensors(const char *path, const char *json, uint64_t claimed, size_t data_bytes)
{
    size_t jl = strlen(json);
    uint8_t *b = calloc(8 + jl + data_bytes, 1);
    if (!b) return -1;
    uint64_t n = claimed == UINT64_MAX ? jl : claimed;
    nj_le_put64(b, n);
    memcpy(b + 8, json, jl);
    int rc = hf_write(path, b, 8 + jl + data_bytes);
    free(b);
    return rc;
}

char *hf_deep_json(const char *prefix, int depth, const char *suffix)
{
    size_t pl = strlen(prefix), sl = strlen(suffix);
    char *s = malloc(pl + 2 * (size_t)depth + sl + 1);
    if (!s) return NULL;
    memcpy(s, prefix, pl);
    memset(s + pl, '[', (size_t)depth);
    memset(s + pl + depth, ']', (size_t)depth);
    memcpy(s + pl + 2 * (size_t)depth, suffix, sl + 1);
    return s;
}

/* ---- the readers ---------------------------------------------------------- */

int hf_read_npy(const char *p, char *err, size_t n)
{
    float *v;
    int shape[NJ_NPY_MAX_DIMS], nd;
    int rc = nj_npy_read(p, &v, shape, &nd, err, n);
    if (!rc) free(v);
    return rc ? -1 : 0;
}

static int read_depth(const char *p, nj_depth_format f, char *err, size_t n)
{
    float *v;
    int w, h;
    int rc = nj_depth_read(p, f, 1000.0f, &v, &w, &h, err, n);
    if (!rc) free(v);
    return rc;
}
int hf_read_pfm(const char *p, char *err, size_t n) { return read_depth(p, NJ_DEPTH_PFM, err, n); }
int hf_read_png16(const char *p, char *err, size_t n) { return read_depth(p, NJ_DEPTH_PNG16, err, n); }

int hf_read_image(const char *p, char *err, size_t n)
{
    nj_image im;
    int rc = nj_image_load(p, &im, err, n);
    if (!rc) nj_image_free(&im);
    return rc;
}

int hf_read_checkpoint(const char *p, char *err, size_t n)
{
    nj_model m;
    int rc = nj_checkpoint_load(p, &m, NULL, NULL, err, n);
    if (!rc) nj_model_free(&m);
    return rc;
}

int hf_read_safetensors(const char *p, char *err, size_t n)
{
    nj_safetensors st;
    int rc = nj_safetensors_read(&st, p, err, n);
    if (!rc) nj_safetensors_free(&st);
    return rc;
}

int hf_read_safetensors_init(const char *p, char *err, size_t n)
{
    if (hf_read_safetensors(p, err, n)) return -1;
    nj_model_config c;
    nj_model_config_default(&c);
    c.stages = 1;
    c.width = 0.25f;
    c.scales = 1;
    c.pose = 0;
    nj_model m;
    if (nj_model_init(&m, &c, err, n)) return -1;
    int rc = nj_safetensors_init_model(p, &m, err, n);
    nj_model_free(&m);
    return rc;
}

int hf_read_dataset(const char *p, char *err, size_t n)
{
    nj_problems pr;
    nj_problems_init(&pr);
    nj_dataset ds;
    int probs = nj_dataset_parse(p, &ds, &pr);
    if (probs) snprintf(err, n, "%s", pr.msg[0]);
    nj_dataset_free(&ds);
    nj_problems_free(&pr);
    return probs ? -1 : 0;
}

int hf_read_config(const char *p, char *err, size_t n)
{
    nj_train_config c;
    nj_train_config_default(&c);
    return nj_train_config_load(&c, p, err, n);
}

hf_reader hf_reader_for(const char *t)
{
    static const struct { const char *name; hf_reader fn; } map[] = {
        {"fuzz_npy", hf_read_npy}, {"fuzz_pfm", hf_read_pfm}, {"fuzz_png16", hf_read_png16},
        {"fuzz_image", hf_read_image}, {"fuzz_checkpoint", hf_read_checkpoint},
        {"fuzz_safetensors", hf_read_safetensors_init}, {"fuzz_dataset_json", hf_read_dataset},
        {"fuzz_config_json", hf_read_config}};
    for (size_t i = 0; i < sizeof map / sizeof map[0]; i++)
        if (!strcmp(map[i].name, t)) return map[i].fn;
    return NULL;
}

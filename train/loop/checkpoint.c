/* train/loop/checkpoint.c — writing checkpoints (layout in checkpoint_format.h)
 * through a temporary file, fsync and rename (data/atomic.h), and --init:
 * copying the weights of a checkpoint into a model of the same
 * architecture.  Reading is in checkpoint_load.c. */
#include "train/loop/checkpoint.h"
#include "data/atomic.h"
#include "train/loop/checkpoint_format.h"
#include "data/crc32.h"
#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

typedef struct writer {
    FILE *f;
    nj_crc32_ctx crc;
    int ok;
    int err;                 /* errno of the first failed write */
} writer;

static void put(writer *w, const void *p, size_t n)
{
    if (!w->ok || n == 0) return;
    if (fwrite(p, 1, n, w->f) != n) {
        w->ok = 0;
        w->err = errno ? errno : EIO;
        return;
    }
    nj_crc32_update(&w->crc, p, n);
}

static void put_u8(writer *w, unsigned v)
{
    uint8_t b = (uint8_t)v;
    put(w, &b, 1);
}

static void put_u32(writer *w, uint32_t v)
{
    uint8_t b[4];
    nj_le_put32(b, v);
    put(w, b, 4);
}

static void put_floats(writer *w, const float *x, size_t n)
{
    uint8_t buf[4096];
    while (n > 0) {
        size_t k = n < sizeof buf / 4 ? n : sizeof buf / 4;
        for (size_t i = 0; i < k; i++) {
            uint32_t u;
            memcpy(&u, &x[i], 4);
            nj_le_put32(buf + 4 * i, u);
        }
        put(w, buf, 4 * k);
        x += k;
        n -= k;
    }
}

static uint64_t f64_bits(double d)
{
    uint64_t u;
    memcpy(&u, &d, 8);
    return u;
}

static void encode_state(const nj_train_state *st, uint8_t *b)
{
    uint32_t lr_bits;
    memcpy(&lr_bits, &st->lr_scale, 4);
    uint64_t q[11] = {(uint64_t)st->step, (uint64_t)st->epoch, st->rng[0], st->rng[1], st->loader_seed,
                      (uint64_t)st->loader_cursor, f64_bits(st->best_val), (uint64_t)st->adam_step,
                      f64_bits(st->elapsed_seconds), st->dataset_hash, (uint64_t)st->schedule_steps};
    for (int i = 0; i < 11; i++) nj_le_put64(b + 8 * i, q[i]);
    nj_le_put32(b + 88, (uint32_t)st->nan_recoveries);
    nj_le_put32(b + 92, (uint32_t)st->resumes);
    nj_le_put32(b + 96, lr_bits);
    nj_le_put32(b + 100, (uint32_t)(st->ranks > 0 ? st->ranks : 1));
}

static void put_entry(writer *w, const nj_param *p, nj_ckpt_kind kind)
{
    size_t len = strlen(p->name);
    put_u8(w, (unsigned)len);
    put(w, p->name, len);
    put_u8(w, kind);
    put_u8(w, (unsigned)p->group);
    put_u32(w, (uint32_t)p->n);
    put_u32(w, (uint32_t)p->c);
    put_u32(w, (uint32_t)p->h);
    put_u32(w, (uint32_t)p->w);
}

static const float *kind_data(const nj_param *p, nj_ckpt_kind kind)
{
    return kind == NJ_CKPT_ADAM_M ? p->m : kind == NJ_CKPT_ADAM_V ? p->v : p->data;
}

/* The tensors in file order: params, buffers, Adam m, Adam v. */
static void put_tensors(writer *w, const nj_model *m, int data)
{
    static const nj_ckpt_kind order[4] = {NJ_CKPT_PARAM, NJ_CKPT_BUFFER, NJ_CKPT_ADAM_M, NJ_CKPT_ADAM_V};
    for (int k = 0; k < 4; k++) {
        const nj_params *ps = order[k] == NJ_CKPT_BUFFER ? &m->buffers : &m->params;
        for (int i = 0; i < ps->count; i++) {
            if (data) put_floats(w, kind_data(ps->items[i], order[k]), nj_param_numel(ps->items[i]));
            else put_entry(w, ps->items[i], order[k]);
        }
    }
}

/* A checkpoint must never carry NaN/Inf weights or moments. */
static const nj_param *non_finite(const nj_params *ps, int with_moments)
{
    for (int i = 0; i < ps->count; i++) {
        const nj_param *p = ps->items[i];
        for (size_t j = 0, n = nj_param_numel(p); j < n; j++)
            if (!isfinite(p->data[j]) || (with_moments && (!isfinite(p->m[j]) || !isfinite(p->v[j])))) return p;
    }
    return NULL;
}

static void write_all(writer *w, const char *json, const nj_model *m, const nj_train_state *st)
{
    uint8_t state[NJ_CKPT_STATE_BYTES];
    encode_state(st, state);
    put(w, NJ_CKPT_MAGIC NJ_CKPT_VERSION, 8);
    put_u32(w, (uint32_t)strlen(json));
    put(w, json, strlen(json));
    put_u32(w, NJ_CKPT_STATE_BYTES);
    put(w, state, sizeof state);
    put_u32(w, (uint32_t)(3 * m->params.count + m->buffers.count));
    put_tensors(w, m, 0);
    nj_atomic_test_pause(w->f);       /* tests only: a half-written temporary file */
    put_tensors(w, m, 1);
    uint8_t crc[4];
    nj_le_put32(crc, nj_crc32_value(&w->crc));
    w->ok = w->ok && fwrite(crc, 1, 4, w->f) == 4;
}

int nj_checkpoint_save(const char *path, const nj_model *m, const nj_train_config *cfg,
                       const nj_train_state *st, char *err, size_t errlen)
{
    const nj_param *bad = non_finite(&m->params, 1);
    if (!bad) bad = non_finite(&m->buffers, 0);
    if (bad) {
        snprintf(err, errlen, "%s: not saved: tensor \"%s\" holds NaN or infinite values", path, bad->name);
        return -1;
    }
    nj_train_config c = *cfg;
    c.model = m->cfg;                 /* the architecture actually built */
    char *json = nj_train_config_to_json(&c);
    if (!json || strlen(json) > NJ_CKPT_MAX_CONFIG) {
        snprintf(err, errlen, "%s: cannot encode the configuration", path);
        free(json);
        return -1;
    }
    nj_atomic_file a;
    if (nj_atomic_open(&a, path, err, errlen)) {
        free(json);
        return -1;
    }
    writer w = {.f = a.f, .ok = 1};
    nj_crc32_init(&w.crc);
    errno = 0;
    write_all(&w, json, m, st);
    free(json);
    if (err && errlen) err[0] = 0;
    if (!w.ok) snprintf(err, errlen, "%s: write failed: %s", path, strerror(w.err ? w.err : EIO));
    return nj_atomic_close(&a, w.ok, err, errlen);
}

/* First tensor of `want` that `have` lacks or holds with another shape. */
static int compare_params(const nj_params *want, const nj_params *have, const char *path, const char *want_name,
                          const char *have_name, char *err, size_t errlen)
{
    for (int i = 0; i < want->count; i++) {
        const nj_param *p = want->items[i], *q = nj_params_find(have, p->name);
        if (!q) {
            snprintf(err, errlen, "%s: tensor \"%s\" of the %s is missing from the %s: the architectures differ",
                     path, p->name, want_name, have_name);
            return -1;
        }
        if (p->n != q->n || p->c != q->c || p->h != q->h || p->w != q->w) {
            snprintf(err, errlen,
                     "%s: tensor \"%s\" is %dx%dx%dx%d in the %s but %dx%dx%dx%d in the %s: the architectures differ",
                     path, p->name, q->n, q->c, q->h, q->w, have_name, p->n, p->c, p->h, p->w, want_name);
            return -1;
        }
    }
    return 0;
}

static void copy_values(nj_params *dst, const nj_params *src)
{
    for (int i = 0; i < dst->count; i++) {
        nj_param *p = dst->items[i];
        memcpy(p->data, nj_params_find(src, p->name)->data, nj_param_numel(p) * sizeof(float));
    }
}

int nj_checkpoint_init_from(const char *path, nj_model *m, char *err, size_t errlen)
{
    nj_model src;
    if (nj_checkpoint_load(path, &src, NULL, NULL, err, errlen)) return -1;
    int rc = -1;
    /* said before the tensor shapes, which would only name a pose tensor */
    const char *key = NULL;
    int was = 0;
    if (m->cfg.pose && src.cfg.pose && m->cfg.pose_rays != src.cfg.pose_rays) key = "pose_rays", was = src.cfg.pose_rays;
    else if (m->cfg.pose && src.cfg.pose && m->cfg.pose_norm != src.cfg.pose_norm) key = "pose_norm", was = src.cfg.pose_norm;
    if (key) {
        snprintf(err, errlen, "%s: its pose net was trained with model.%s %s; the config says %s", path, key,
                 was ? "true" : "false", was ? "false" : "true");
        nj_model_free(&src);
        return -1;
    }
    if (!compare_params(&m->params, &src.params, path, "model", "checkpoint", err, errlen) &&
        !compare_params(&src.params, &m->params, path, "checkpoint", "model", err, errlen) &&
        !compare_params(&m->buffers, &src.buffers, path, "model", "checkpoint", err, errlen) &&
        !compare_params(&src.buffers, &m->buffers, path, "checkpoint", "model", err, errlen)) {
        copy_values(&m->params, &src.params);
        copy_values(&m->buffers, &src.buffers);
        /* the pose net's weights were trained for their output scale */
        if (m->cfg.pose && src.cfg.pose) {
            m->cfg.pose_scale = src.cfg.pose_scale;
            m->cfg.rotation_scale = src.cfg.rotation_scale;
        }
        rc = 0;
    }
    nj_model_free(&src);
    return rc;
}

/* train/loop/checkpoint_load.c — reading a checkpoint (layout in
 * checkpoint_format.h).  Everything is validated before anything big is
 * allocated: magic and version, then the CRC-32 over the whole file, then
 * every claimed length against the bytes actually left in the file, then
 * the data size against the architecture the stored configuration describes
 * (counted by nj_model_count, not built: a small file cannot make the reader
 * allocate a huge model), then the tensor table against the architecture
 * rebuilt from it; only then are the tensor values read. */
#include "train/loop/checkpoint.h"
#include "train/loop/checkpoint_format.h"
#include "data/crc32.h"
#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

typedef struct reader {
    FILE *f;
    const char *path;
    uint64_t left;           /* bytes not yet read before the trailing CRC */
    char *err;
    size_t errlen;
} reader;

typedef struct entry {
    char name[NJ_CKPT_NAME_MAX + 1];
    int kind, group;
    uint32_t dim[4];
    uint64_t numel;
    float *dst;              /* where its values go in the rebuilt model */
} entry;

static int fail(reader *r, const char *fmt, ...) __attribute__((format(printf, 2, 3)));
static int fail(reader *r, const char *fmt, ...)
{
    char msg[512];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(msg, sizeof msg, fmt, ap);
    va_end(ap);
    snprintf(r->err, r->errlen, "%s: %s", r->path, msg);
    return -1;
}

static int get(reader *r, void *p, uint64_t n, const char *what)
{
    if (n > r->left) return fail(r, "%s runs past the end of the data", what);
    if (n && fread(p, 1, (size_t)n, r->f) != (size_t)n) return fail(r, "read error in %s", what);
    r->left -= n;
    return 0;
}

static int get_u8(reader *r, unsigned *v, const char *what)
{
    uint8_t b;
    if (get(r, &b, 1, what)) return -1;
    *v = b;
    return 0;
}

static int get_u32(reader *r, uint32_t *v, const char *what)
{
    uint8_t b[4];
    if (get(r, b, 4, what)) return -1;
    *v = nj_le_get32(b);
    return 0;
}

/* CRC-32 of the first `n` bytes of the file, from the start. */
static int file_crc(reader *r, uint64_t n, uint32_t *crc)
{
    unsigned char buf[16384];
    nj_crc32_ctx c;
    nj_crc32_init(&c);
    if (fseek(r->f, 0, SEEK_SET)) return fail(r, "cannot seek: %s", strerror(errno));
    while (n > 0) {
        size_t k = n < sizeof buf ? (size_t)n : sizeof buf;
        if (fread(buf, 1, k, r->f) != k) return fail(r, "read error while checking the checksum");
        nj_crc32_update(&c, buf, k);
        n -= k;
    }
    *crc = nj_crc32_value(&c);
    return 0;
}

/* Magic, version, minimum size and checksum; leaves the file at byte 8. */
static int check_envelope(reader *r)
{
    struct stat sb;
    if (fstat(fileno(r->f), &sb) || !S_ISREG(sb.st_mode)) return fail(r, "not a regular file");
    uint64_t size = (uint64_t)sb.st_size;
    const uint64_t min = 8 + 4 + 4 + NJ_CKPT_STATE_BYTES_V1 + 4 + 4;
    char magic[8];
    if (size < 8 || fread(magic, 1, 8, r->f) != 8)
        return fail(r, "too short to be a nightjar checkpoint (%llu bytes)", (unsigned long long)size);
    if (memcmp(magic, NJ_CKPT_MAGIC, 6)) return fail(r, "not a nightjar checkpoint (wrong magic bytes)");
    if (memcmp(magic + 6, NJ_CKPT_VERSION, 2))
        return fail(r, "checkpoint format \"%.2s\" is not supported (this nightjar reads format %s)", magic + 6,
                    NJ_CKPT_VERSION);
    if (size < min)
        return fail(r, "truncated: %llu bytes, a checkpoint has at least %llu", (unsigned long long)size,
                    (unsigned long long)min);
    uint32_t got = 0;
    uint8_t tail[4];
    if (file_crc(r, size - 4, &got)) return -1;
    if (fread(tail, 1, 4, r->f) != 4) return fail(r, "read error at the checksum");
    uint32_t want = nj_le_get32(tail);
    if (want != got)
        return fail(r, "checksum mismatch (stored %08x, computed %08x): the file is damaged or truncated", want, got);
    if (fseek(r->f, 8, SEEK_SET)) return fail(r, "cannot seek: %s", strerror(errno));
    r->left = size - 8 - 4;
    return 0;
}

static int read_config(reader *r, nj_train_config *c)
{
    uint32_t n;
    if (get_u32(r, &n, "the configuration length")) return -1;
    if (n == 0 || n > NJ_CKPT_MAX_CONFIG || n > r->left)
        return fail(r, "the configuration block claims %u bytes (the file has %llu left, the limit is %u)", n,
                    (unsigned long long)r->left, NJ_CKPT_MAX_CONFIG);
    char *text = malloc((size_t)n + 1);
    if (!text) return fail(r, "out of memory");
    int rc = get(r, text, n, "the configuration");
    text[n] = 0;
    if (!rc && strlen(text) != n) rc = fail(r, "the stored configuration contains a NUL byte");
    if (!rc) {
        char origin[NJ_PATH_MAX + 32];
        snprintf(origin, sizeof origin, "%s (stored configuration)", r->path);
        nj_train_config_default(c);
        rc = nj_train_config_load_text(c, text, origin, r->err, r->errlen);
    }
    free(text);
    return rc;
}

static double f64_of(uint64_t u)
{
    double d;
    memcpy(&d, &u, 8);
    return d;
}

static int read_state(reader *r, nj_train_state *st)
{
    uint32_t n;
    uint8_t b[NJ_CKPT_STATE_BYTES];
    if (get_u32(r, &n, "the state length")) return -1;
    if (n != NJ_CKPT_STATE_BYTES && n != NJ_CKPT_STATE_BYTES_V1)
        return fail(r, "the state block claims %u bytes, format %s has %d (or %d)", n, NJ_CKPT_VERSION,
                    NJ_CKPT_STATE_BYTES, NJ_CKPT_STATE_BYTES_V1);
    if (get(r, b, n, "the state")) return -1;
    uint64_t q[11];
    for (int i = 0; i < 11; i++) q[i] = nj_le_get64(b + 8 * i);
    st->step = (long)q[0];
    st->epoch = (long)q[1];
    st->rng[0] = q[2];
    st->rng[1] = q[3];
    st->loader_seed = q[4];
    st->loader_cursor = (long)q[5];
    st->best_val = f64_of(q[6]);
    st->adam_step = (long)q[7];
    st->elapsed_seconds = f64_of(q[8]);
    st->dataset_hash = q[9];
    st->schedule_steps = (long)q[10];
    st->nan_recoveries = (int)nj_le_get32(b + 88);
    st->resumes = (int)nj_le_get32(b + 92);
    uint32_t lr_bits = nj_le_get32(b + 96);
    memcpy(&st->lr_scale, &lr_bits, 4);
    st->ranks = n >= NJ_CKPT_STATE_BYTES ? (int)nj_le_get32(b + 100) : 1;
    if (st->ranks < 1 || st->ranks > 1 << 20) return fail(r, "the state claims %d processes", st->ranks);
    return 0;
}

static int read_entry(reader *r, int i, entry *e, uint64_t *bytes)
{
    unsigned len, kind, group;
    if (get_u8(r, &len, "the tensor table")) return -1;
    if (len == 0 || len > NJ_CKPT_NAME_MAX)
        return fail(r, "tensor %d has a name of %u bytes (1 to %d allowed)", i, len, NJ_CKPT_NAME_MAX);
    if (get(r, e->name, len, "the tensor table")) return -1;
    e->name[len] = 0;
    for (unsigned k = 0; k < len; k++)
        if (e->name[k] < 0x21 || e->name[k] > 0x7e) return fail(r, "tensor %d has an unreadable name", i);
    if (get_u8(r, &kind, "the tensor table") || get_u8(r, &group, "the tensor table")) return -1;
    if (kind > NJ_CKPT_ADAM_V) return fail(r, "tensor \"%s\" has an unknown kind %u", e->name, kind);
    if (group >= NJ_MAX_GROUPS) return fail(r, "tensor \"%s\" has an invalid group %u", e->name, group);
    e->kind = (int)kind;
    e->group = (int)group;
    e->numel = 1;
    for (int d = 0; d < 4; d++) {
        if (get_u32(r, &e->dim[d], "the tensor table")) return -1;
        e->numel *= e->dim[d];     /* ≤ 2^31 × (left/4): no overflow */
        if (e->dim[d] == 0) return fail(r, "tensor \"%s\" has size 0 in dimension %d", e->name, d);
        if (e->dim[d] > 0x7fffffffu || e->numel > r->left / 4)
            return fail(r, "tensor \"%s\" claims a size (dimension %d = %u) larger than the file", e->name, d,
                        e->dim[d]);
    }
    *bytes += 4 * e->numel;
    if (*bytes > r->left)
        return fail(r, "the tensors claim more data than the file holds (from tensor \"%s\" on)", e->name);
    return 0;
}

static int read_table(reader *r, entry **out, uint32_t *count)
{
    uint32_t n;
    if (get_u32(r, &n, "the tensor count")) return -1;
    if (n == 0 || n > NJ_CKPT_MAX_TENSORS || n > r->left / NJ_CKPT_ENTRY_MIN)
        return fail(r, "the file claims %u tensors, more than it can hold", n);
    entry *e = calloc(n, sizeof *e);
    if (!e) return fail(r, "out of memory");
    uint64_t bytes = 0;
    for (uint32_t i = 0; i < n; i++)
        if (read_entry(r, (int)i, &e[i], &bytes)) { free(e); return -1; }
    if (bytes != r->left) {
        free(e);
        return fail(r, "the tensors hold %llu bytes of data but %llu bytes follow the table",
                    (unsigned long long)bytes, (unsigned long long)r->left);
    }
    *out = e;
    *count = n;
    return 0;
}

static int find_index(const nj_params *ps, const char *name)
{
    for (int i = 0; i < ps->count; i++)
        if (!strcmp(ps->items[i]->name, name)) return i;
    return -1;
}

/* Points e->dst into the model; `seen` counts (tensor, kind) pairs. */
static int match_entry(reader *r, entry *e, nj_model *m, unsigned char *seen)
{
    const nj_params *ps = e->kind == NJ_CKPT_BUFFER ? &m->buffers : &m->params;
    const char *kind = nj_ckpt_kind_name(e->kind);
    int i = find_index(ps, e->name);
    if (i < 0) return fail(r, "tensor \"%s\" (%s) is not part of the stored architecture", e->name, kind);
    nj_param *p = ps->items[i];
    if ((int)e->dim[0] != p->n || (int)e->dim[1] != p->c || (int)e->dim[2] != p->h || (int)e->dim[3] != p->w)
        return fail(r, "tensor \"%s\" (%s) is %ux%ux%ux%u in the file but %dx%dx%dx%d in the stored architecture",
                    e->name, kind, e->dim[0], e->dim[1], e->dim[2], e->dim[3], p->n, p->c, p->h, p->w);
    if (e->group != p->group)
        return fail(r, "tensor \"%s\" (%s) is in group %d in the file but %d in the stored architecture", e->name,
                    kind, e->group, p->group);
    int slot = e->kind == NJ_CKPT_BUFFER ? 3 * m->params.count + i
                                         : 3 * i + (e->kind == NJ_CKPT_PARAM ? 0 : e->kind - 1);
    if (seen[slot]++) return fail(r, "tensor \"%s\" (%s) appears twice", e->name, kind);
    e->dst = e->kind == NJ_CKPT_ADAM_M ? p->m : e->kind == NJ_CKPT_ADAM_V ? p->v : p->data;
    return 0;
}

static int match_all(reader *r, entry *e, uint32_t n, nj_model *m)
{
    int np = m->params.count, total = 3 * np + m->buffers.count;
    unsigned char *seen = calloc((size_t)total + 1, 1);
    if (!seen) return fail(r, "out of memory");
    int rc = 0;
    for (uint32_t i = 0; i < n && !rc; i++) rc = match_entry(r, &e[i], m, seen);
    for (int s = 0; s < total && !rc; s++) {
        if (seen[s]) continue;
        const nj_param *p = s < 3 * np ? m->params.items[s / 3] : m->buffers.items[s - 3 * np];
        int kind = s < 3 * np ? (s % 3 == 0 ? NJ_CKPT_PARAM : s % 3 + 1) : NJ_CKPT_BUFFER;
        rc = fail(r, "tensor \"%s\" (%s) is missing", p->name, nj_ckpt_kind_name(kind));
    }
    free(seen);
    return rc;
}

static int read_values(reader *r, const entry *e)
{
    uint8_t buf[16384];
    float *dst = e->dst;
    for (uint64_t n = e->numel; n > 0;) {
        size_t k = n < sizeof buf / 4 ? (size_t)n : sizeof buf / 4;
        if (get(r, buf, 4 * k, "the tensor data")) return -1;
        for (size_t i = 0; i < k; i++) {
            uint32_t u = nj_le_get32(buf + 4 * i);
            memcpy(&dst[i], &u, 4);
            if (!isfinite(dst[i]))
                return fail(r, "tensor \"%s\" (%s) holds NaN or infinite values", e->name, nj_ckpt_kind_name(e->kind));
        }
        dst += k;
        n -= k;
    }
    return 0;
}

/* Everything after the envelope; builds *m on success. */
static int read_body(reader *r, nj_model *m, nj_train_config *cfg, nj_train_state *st)
{
    entry *e = NULL;
    uint32_t n = 0;
    if (read_config(r, cfg) || read_state(r, st) || read_table(r, &e, &n)) return -1;
    char why[256];
    uint64_t np, nb;
    nj_model_count(&cfg->model, &np, &nb);
    if (r->left != 4 * (3 * np + nb)) {   /* before allocating what the config claims */
        free(e);
        return fail(r, "the stored architecture needs %llu bytes of tensors but the file holds %llu",
                    (unsigned long long)(4 * (3 * np + nb)), (unsigned long long)r->left);
    }
    if (nj_model_init(m, &cfg->model, why, sizeof why)) {
        free(e);
        return fail(r, "stored architecture: %s", why);
    }
    int rc = match_all(r, e, n, m);
    for (uint32_t i = 0; i < n && !rc; i++) rc = read_values(r, &e[i]);
    free(e);
    if (rc) nj_model_free(m);
    return rc;
}

int nj_checkpoint_load(const char *path, nj_model *m, nj_train_config *cfg,
                       nj_train_state *st, char *err, size_t errlen)
{
    reader r = {.path = path, .err = err, .errlen = errlen};
    r.f = fopen(path, "rb");
    if (!r.f) {
        snprintf(err, errlen, "%s: cannot open the checkpoint: %s", path, strerror(errno));
        return -1;
    }
    nj_model model;
    nj_train_config c;
    nj_train_state s;
    memset(&s, 0, sizeof s);
    int rc = check_envelope(&r) || read_body(&r, &model, &c, &s) ? -1 : 0;
    fclose(r.f);
    if (rc) return -1;
    if (m) *m = model;
    else nj_model_free(&model);
    if (cfg) *cfg = c;
    if (st) *st = s;
    return 0;
}

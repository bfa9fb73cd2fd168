/* data/loader.c — the batch loader: step → samples order, a ring of batch
 * slots, and pthread workers that fill the slots of upcoming steps while the
 * trainer uses the current one; optionally only one shard of each batch
 * (data-parallel training) — see loader.h.  The unit of work is one item of
 * a slot, not a whole slot: with more workers than items per batch they
 * spread over the next steps, and a few workers fill one batch together
 * (shorter wait at the start and after a slow item). */
#include "data/loader.h"
#include "data/image.h"
#include "data/loader_item.h"
#include "data/augment.h"
#include "nn/rng.h"
#include <pthread.h>
#include <stdlib.h>
#include <string.h>

enum { SLOT_FREE, SLOT_FILLING, SLOT_READY };

/* A slot's items are prepared by whichever workers are free: item k of a
 * slot is handed out once (next_item), and the slot is ready when all its
 * items are done.  An item's pixels depend only on (seed, step, item), so
 * which worker prepares it changes nothing. */
typedef struct slot {
    nj_batch b;
    int state, rc;
    int next_item;           /* items handed out so far */
    int done;                /* items finished */
    int err_item;            /* item whose message err holds (the lowest that failed) */
    char err[512];
} slot;

struct nj_loader {
    const nj_dataset *ds;
    nj_sample *samples;
    int nsamples;
    nj_loader_config cfg;
    int nslots;
    slot *slots;
    pthread_t *threads;
    int nthreads;
    pthread_mutex_t mu;
    pthread_cond_t cv;
    long next_assign;        /* the step whose items workers take now (or start next) */
    long next_consume;       /* step the trainer receives next */
    int held;                /* slot handed out by the last nj_loader_next, or −1 */
    int stop;
};

void nj_loader_config_default(nj_loader_config *c)
{
    memset(c, 0, sizeof *c);
    c->width = 320;
    c->height = 240;
    c->batch = 4;
    c->seed = 1;
    c->workers = 1;
    c->prefetch = 2;
    c->jitter = 1;
    c->brightness = c->contrast = c->saturation = 0.2f;
    c->hue = 0.05f;
    c->flip_prob = 0.5f;
}

static void shuffle(uint64_t seed, long epoch, int n, int *perm)
{
    nj_rng r;
    nj_rng_seed(&r, nj_loader_item_seed(seed ^ 0x5EEDull, epoch, -1));
    for (int i = 0; i < n; i++) perm[i] = i;
    for (int i = n - 1; i > 0; i--) {
        int j = (int)nj_rng_below(&r, (uint32_t)(i + 1)), t = perm[i];
        perm[i] = perm[j];
        perm[j] = t;
    }
}

void nj_loader_step_samples(uint64_t seed, long step, int batch, int nsamples, int *out)
{
    int *perm = malloc((size_t)nsamples * sizeof(int));
    long have = -1;
    for (int i = 0; i < batch; i++) {
        long p = step * batch + i, e = p / nsamples;
        if (!perm) { out[i] = (int)(p % nsamples); continue; }   /* out of memory: unshuffled */
        if (e != have) shuffle(seed, e, nsamples, perm);
        have = e;
        out[i] = perm[p % nsamples];
    }
    free(perm);
}

/* ---- workers ------------------------------------------------------------ */

/* The sample indices of this loader's items of step `step` (its shard). */
static int step_samples(const nj_loader *L, long step, int *out)
{
    const nj_loader_config *c = &L->cfg;
    if (c->shard_count <= 0) {
        nj_loader_step_samples(c->seed, step, c->batch, L->nsamples, out);
        return 0;
    }
    int *all = malloc((size_t)c->batch * sizeof(int));
    if (!all) return -1;
    nj_loader_step_samples(c->seed, step, c->batch, L->nsamples, all);
    memcpy(out, all + c->shard_first, (size_t)c->shard_count * sizeof(int));
    free(all);
    return 0;
}

/* Opens the slot for step `step`: its sample indices (under the lock; the
 * decoding happens outside it, item by item). */
static void begin_step(nj_loader *L, slot *sl, long step)
{
    nj_batch *b = &sl->b;
    b->step = step;
    sl->state = SLOT_FILLING;
    sl->rc = 0;
    sl->err[0] = 0;
    sl->err_item = b->n;
    sl->next_item = sl->done = 0;
    if (step_samples(L, step, b->sample)) {
        sl->rc = -1;
        sl->err_item = 0;
        snprintf(sl->err, sizeof sl->err, "loader: out of memory");
        sl->next_item = sl->done = b->n;   /* nothing to prepare: ready, failed */
        sl->state = SLOT_READY;
        L->next_assign++;
    }
}

static void *worker(void *arg)
{
    nj_loader *L = arg;
    char err[512];
    pthread_mutex_lock(&L->mu);
    for (;;) {
        if (L->stop) break;
        long step = L->next_assign;
        slot *sl = &L->slots[step % L->nslots];
        if (sl->state == SLOT_FREE) {
            begin_step(L, sl, step);
            if (sl->state == SLOT_READY) { pthread_cond_broadcast(&L->cv); continue; }
        }
        if (sl->state != SLOT_FILLING || sl->b.step != step) {   /* the ring is full: wait for the trainer */
            pthread_cond_wait(&L->cv, &L->mu);
            continue;
        }
        int i = sl->next_item++;
        if (sl->next_item == sl->b.n) L->next_assign++;
        pthread_mutex_unlock(&L->mu);
        int rc = nj_loader_item(L->ds, &L->samples[sl->b.sample[i]], &L->cfg, step, i, &sl->b, err, sizeof err);
        pthread_mutex_lock(&L->mu);
        if (rc && i < sl->err_item) {      /* the same message whatever the finishing order */
            sl->rc = rc;
            sl->err_item = i;
            snprintf(sl->err, sizeof sl->err, "%s", err);
        }
        if (++sl->done == sl->b.n) {
            sl->state = SLOT_READY;
            pthread_cond_broadcast(&L->cv);
        }
    }
    pthread_mutex_unlock(&L->mu);
    return NULL;
}

/* ---- public ------------------------------------------------------------- */

static int check_config(const nj_loader_config *c, int nsamples, char *err, size_t errlen)
{
    const char *why = NULL;
    if (nsamples <= 0) why = "no samples to load";
    else if (c->width <= 0 || c->height <= 0 || c->width > NJ_IMAGE_MAX_SIDE || c->height > NJ_IMAGE_MAX_SIDE)
        why = "training size must be positive and at most 16384";
    else if (c->batch <= 0) why = "batch must be positive";
    else if (c->workers <= 0 || c->workers > 64) why = "workers must be in 1..64";
    else if (c->shard_count < 0 || c->shard_first < 0 || (c->shard_count > 0 &&
             c->shard_first + c->shard_count > c->batch))
        why = "the shard must lie within the batch";
    else if (c->prefetch <= 0 || c->prefetch > 64) why = "prefetch must be in 1..64";
    else if (c->start_step < 0) why = "start step must be non-negative";
    else if (!(c->turn_deg >= 0 && c->turn_deg <= NJ_TURN_MAX_DEG && c->roll_deg >= 0 && c->roll_deg <= NJ_TURN_MAX_DEG &&
               c->rotated_deg >= 0 && c->rotated_deg <= NJ_TURN_MAX_DEG)) {
        snprintf(err, errlen, "loader: turn, roll and the rotated copy's turn must be between 0 and %g degrees",
                 (double)NJ_TURN_MAX_DEG);
        return -1;
    }
    if (why) snprintf(err, errlen, "loader: %s", why);
    return why ? -1 : 0;
}

static void loader_free(nj_loader *L)
{
    for (int i = 0; L->slots && i < L->nslots; i++) nj_batch_free(&L->slots[i].b);
    free(L->slots);
    free(L->samples);
    free(L->threads);
    free(L);
}

static int setup(nj_loader *L, const nj_sample *samples, int nsamples)
{
    int nsrc = samples[0].nsrc, stereo = 0;
    for (int i = 0; i < nsamples; i++) stereo |= samples[i].stereo;
    L->samples = malloc((size_t)nsamples * sizeof(nj_sample));
    L->nslots = L->cfg.prefetch + 1;
    L->slots = calloc((size_t)L->nslots, sizeof(slot));
    L->threads = calloc((size_t)L->cfg.workers, sizeof(pthread_t));
    if (!L->samples || !L->slots || !L->threads) return -1;
    memcpy(L->samples, samples, (size_t)nsamples * sizeof(nj_sample));
    for (int i = 0; i < L->nslots; i++)
        if (nj_batch_alloc(&L->slots[i].b, L->cfg.shard_count > 0 ? L->cfg.shard_count : L->cfg.batch,
                           L->cfg.height, L->cfg.width, nsrc, stereo, L->cfg.jitter,
                           L->cfg.turn_deg > 0 || L->cfg.roll_deg > 0, L->cfg.rotated))
            return -1;
    return 0;
}

nj_loader *nj_loader_create(const nj_dataset *ds, const nj_sample *samples, int nsamples,
                            const nj_loader_config *c, char *err, size_t errlen)
{
    if (check_config(c, nsamples, err, errlen)) return NULL;
    nj_loader *L = calloc(1, sizeof *L);
    if (!L) { snprintf(err, errlen, "loader: out of memory"); return NULL; }
    L->ds = ds;
    L->nsamples = nsamples;
    L->cfg = *c;
    L->next_assign = L->next_consume = c->start_step;
    L->held = -1;
    if (setup(L, samples, nsamples)) {
        snprintf(err, errlen, "loader: out of memory for %d batch slots", L->nslots);
        loader_free(L);
        return NULL;
    }
    pthread_mutex_init(&L->mu, NULL);
    pthread_cond_init(&L->cv, NULL);
    for (int i = 0; i < c->workers; i++)
        if (pthread_create(&L->threads[i], NULL, worker, L) == 0) L->nthreads++;
    if (!L->nthreads) {
        snprintf(err, errlen, "loader: cannot start worker threads");
        nj_loader_destroy(L);
        return NULL;
    }
    return L;
}

const nj_batch *nj_loader_next(nj_loader *L, char *err, size_t errlen)
{
    pthread_mutex_lock(&L->mu);
    if (L->held >= 0) {
        L->slots[L->held].state = SLOT_FREE;
        L->held = -1;
        pthread_cond_broadcast(&L->cv);
    }
    long step = L->next_consume++;
    slot *sl = &L->slots[step % L->nslots];
    while (!(sl->state == SLOT_READY && sl->b.step == step)) pthread_cond_wait(&L->cv, &L->mu);
    L->held = (int)(step % L->nslots);
    pthread_mutex_unlock(&L->mu);
    if (sl->rc) {
        snprintf(err, errlen, "%s", sl->err);
        return NULL;
    }
    return &sl->b;
}

void nj_loader_destroy(nj_loader *L)
{
    if (!L) return;
    pthread_mutex_lock(&L->mu);
    L->stop = 1;
    pthread_cond_broadcast(&L->cv);
    pthread_mutex_unlock(&L->mu);
    for (int i = 0; i < L->nthreads; i++) pthread_join(L->threads[i], NULL);
    pthread_mutex_destroy(&L->mu);
    pthread_cond_destroy(&L->cv);
    loader_free(L);
}

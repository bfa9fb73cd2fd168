/* train/loop/step_replicas.c — the training step as in-process data-parallel
 * replicas (see step_replicas.h). */
#include "train/loop/step_replicas.h"
#include <omp.h>
#include <pthread.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define MAX_REPLICAS 64
#define BLOCK_FLOATS 65536 /* gradient-combine work item */
#define SPIN 20000          /* pause instructions before a waiting replica sleeps */

/* Barrier with an abort: a replica whose step fails releases the others
 * (their pending and later sums fail) instead of leaving them waiting.  A
 * waiting replica spins briefly on the generation count before it sleeps on
 * the condition variable (measured: ~8 → ~2.5 ms of waiting per 2-thread
 * step at 320x96 b4, with 64 barriers; publish_sum then halved the barriers
 * and the waits fell to ~0.5-1.5 ms). */
typedef struct hub {
    pthread_mutex_t mu;
    pthread_cond_t cv;
    int count, waiting, aborted, first_failed;
    unsigned long gen;
    double *slot[MAX_REPLICAS];
    int len[MAX_REPLICAS];
    double *result;          /* the sum (written by replica 0) */
    int cap, result_rc;
    /* one-barrier sums: replica r publishes its partial sums in stage[p][r],
     * p alternating from sum to sum (see publish_sum) */
    double *stage[2][MAX_REPLICAS];
    int stage_cap[2][MAX_REPLICAS], stage_len[2][MAX_REPLICAS];
    nj_replicas outer;       /* the step graph's own replicas (processes); count 1: none */
} hub;

/* One replica's side of the sums (the hook's context). */
typedef struct member {
    hub *h;
    int rank;
    unsigned sums;           /* sums taken part in this step (its parity picks the stage) */
} member;

typedef struct replica {
    nj_graph *g;             /* own graph (rank ≥ 1; rank 0 runs in the caller's) */
    nj_model_twin tw;        /* rank ≥ 1: the model with private gradients and BN buffers */
    member mem;
    nj_rng rng;
    nj_step_result res;
} replica;

typedef struct grad_block {
    int param;               /* index into real[] */
    size_t start, len;
} grad_block;

struct nj_step_replicas {
    int T;                   /* threads */
    int R;                   /* replicas the records below are for */
    size_t arena_chunk;
    int npairs, nblocks;
    int dirty;               /* the private gradients may hold values (a step failed before its combine) */
    hub h;
    replica rep[MAX_REPLICAS];
    nj_param **real;         /* the model's parameters in unit order ... */
    nj_param ***twin;        /* ... and their records in replica r: twin[r][i] */
    grad_block *blocks;
};

/* ---- the hub ------------------------------------------------------------ */

static int hub_wait(hub *h)
{
    pthread_mutex_lock(&h->mu);
    unsigned long gen = h->gen;
    if (!h->aborted && ++h->waiting == h->count) {
        __atomic_store_n(&h->gen, gen + 1, __ATOMIC_RELEASE);
        h->waiting = 0;
        pthread_cond_broadcast(&h->cv);
        pthread_mutex_unlock(&h->mu);
        return 0;
    }
    pthread_mutex_unlock(&h->mu);
    /* the others are usually microseconds away: spin a little before sleeping */
    for (int i = 0; i < SPIN && __atomic_load_n(&h->gen, __ATOMIC_ACQUIRE) == gen &&
                    !__atomic_load_n(&h->aborted, __ATOMIC_ACQUIRE); i++)
        __builtin_ia32_pause();
    pthread_mutex_lock(&h->mu);
    while (!h->aborted && gen == h->gen) pthread_cond_wait(&h->cv, &h->mu);
    int rc = h->aborted ? -1 : 0;
    pthread_mutex_unlock(&h->mu);
    return rc;
}

static void hub_abort(hub *h, int rank)
{
    pthread_mutex_lock(&h->mu);
    if (!h->aborted) h->first_failed = rank;
    __atomic_store_n(&h->aborted, 1, __ATOMIC_RELEASE);
    pthread_cond_broadcast(&h->cv);
    pthread_mutex_unlock(&h->mu);
}

static void hub_reset(hub *h)
{
    h->waiting = 0;
    h->aborted = 0;
    h->first_failed = -1;
}

/* out[i] ← Σ_r in[r][i], added in replica order (every path sums this way,
 * so the bits do not depend on which one ran). */
static void add_in_order(double *out, double *const *in, int count, int n)
{
    for (int i = 0; i < n; i++) {
        double s = 0;
        for (int r = 0; r < count; r++) s += in[r][i];
        out[i] = s;
    }
}

/* The sum without process replicas, behind one barrier: each replica copies
 * its partials into its own stage, waits for the others, and adds every
 * stage in replica order itself (the same additions in the same order as
 * replica 0's in member_sum, so the same bits).  Stages alternate from one
 * sum to the next: a replica writing stage p of sum k+1 cannot meet one still
 * reading sum k's stage (1 - p), and none can be reading stage p, the one of
 * sum k-1, because all have passed sum k's barrier.  Halves the barriers of
 * a step (64 → 32 at the default sizes) and drops replica 0's serial sum. */
static int publish_sum(member *me, double *buf, int n)
{
    hub *h = me->h;
    int p = me->sums++ & 1, r = me->rank;
    if (n > h->stage_cap[p][r]) {
        double *t = realloc(h->stage[p][r], sizeof(double) * (size_t)n);
        if (t) h->stage[p][r] = t, h->stage_cap[p][r] = n;
    }
    int fits = n <= h->stage_cap[p][r];
    if (fits) memcpy(h->stage[p][r], buf, sizeof(double) * (size_t)n);
    h->stage_len[p][r] = fits ? n : -1;
    if (hub_wait(h)) return -1;
    for (int q = 0; q < h->count; q++)
        if (h->stage_len[p][q] != n) return -1; /* every replica sees the same lengths: all fail */
    add_in_order(buf, h->stage[p], h->count, n);
    return 0;
}

/* nj_replicas.sum: every replica's buf becomes the sum over the replicas,
 * added in replica order.  When the step's graph had replicas of its own
 * (data-parallel processes, train/loop/trainer_dist.h), replica 0, which runs on
 * the thread that called the step (the one MPI allows to communicate), adds
 * the replicas' sums and then the processes', and the others wait for it. */
static int member_sum(double *buf, int n, void *ctx)
{
    member *me = ctx;
    hub *h = me->h;
    if (h->outer.count <= 1) return publish_sum(me, buf, n);
    h->slot[me->rank] = buf;
    h->len[me->rank] = n;
    if (hub_wait(h)) return -1;
    if (me->rank == 0) {
        /* every replica has copied the last result (it is past this call's
         * first barrier): the result buffer may move now */
        int same = 1;
        for (int r = 0; r < h->count; r++) same &= h->len[r] == n;
        if (same && n > h->cap) {
            double *t = realloc(h->result, sizeof(double) * (size_t)n);
            if (t) h->result = t, h->cap = n;
            else same = 0;
        }
        if (same) add_in_order(h->result, h->slot, h->count, n);
        h->result_rc = !same ? -1 : h->outer.sum(h->result, n, h->outer.ctx);
    }
    if (hub_wait(h)) return -1; /* replica 0 has read every slot and written the result */
    if (h->result_rc) return -1;
    memcpy(buf, h->result, sizeof(double) * (size_t)n);
    return 0;
}

/* ---- setting up --------------------------------------------------------- */

/* Replica rank r ≥ 1: a twin of m (train/model/model.h) with its own
 * gradients and BN buffers, and its learned parameters listed in the order
 * of real[]. */
static int make_twin(nj_step_replicas *s, nj_model *m, int r)
{
    replica *p = &s->rep[r];
    s->twin[r] = calloc((size_t)s->npairs, sizeof *s->twin[r]);
    if (!s->twin[r] || nj_model_twin_init(&p->tw, m)) return -1;
    return nj_model_learned(&p->tw.m, s->twin[r], s->npairs) == s->npairs ? 0 : -1;
}

/* The model's learned parameters in unit order, and the combine blocks. */
static int list_params(nj_step_replicas *s, nj_model *m)
{
    int n = nj_model_learned(m, NULL, 0);
    s->real = calloc((size_t)n + 1, sizeof *s->real);
    if (!s->real) return -1;
    s->npairs = nj_model_learned(m, s->real, n);
    size_t blocks = 0;
    for (int i = 0; i < s->npairs; i++) blocks += (nj_param_numel(s->real[i]) + BLOCK_FLOATS - 1) / BLOCK_FLOATS;
    if (s->npairs != m->params.count) return -2;
    s->blocks = calloc(blocks + 1, sizeof *s->blocks);
    if (!s->blocks) return -1;
    for (int i = 0; i < s->npairs; i++)
        for (size_t a = 0, n = nj_param_numel(s->real[i]); a < n; a += BLOCK_FLOATS)
            s->blocks[s->nblocks++] = (grad_block){i, a, n - a < BLOCK_FLOATS ? n - a : BLOCK_FLOATS};
    return 0;
}

/* Drops the parameter lists and the replicas' model records. */
static void unbind(nj_step_replicas *s)
{
    for (int r = 1; r < s->R; r++) {
        nj_model_twin_free(&s->rep[r].tw);
        free(s->twin[r]);
        s->twin[r] = NULL;
    }
    free(s->real);
    free(s->blocks);
    s->real = NULL;
    s->blocks = NULL;
    s->npairs = s->nblocks = 0;
    s->R = 0;
}

/* 1 when the lists describe model m (a reloaded model has new records). */
static int bound_to(const nj_step_replicas *s, nj_model *m)
{
    if (!s->real || nj_model_learned(m, NULL, 0) != s->npairs) return 0;
    nj_param *cur[NJ_MAX_UNITS * 4];
    int n = nj_model_learned(m, cur, NJ_MAX_UNITS * 4);
    for (int k = 0; k < n; k++)
        if (s->real[k] != cur[k]) return 0;
    return 1;
}

/* (Re)builds the lists, model records and graphs of R replicas of m.  0, or
 * -1 with a message. */
static int bind(nj_step_replicas *s, nj_model *m, int R, char *err, size_t errlen)
{
    unbind(s);
    int rc = list_params(s, m);
    if (rc == -2) {
        snprintf(err, errlen, "step replicas: the model's units hold %d parameters, its list %d", s->npairs,
                 m->params.count);
        return -1;
    }
    s->R = R;
    for (int r = 1; !rc && r < R; r++) {
        rc = make_twin(s, m, r);
        if (!rc && !s->rep[r].g && !(s->rep[r].g = nj_graph_new(s->arena_chunk))) rc = -1;
    }
    if (rc) {
        snprintf(err, errlen, "out of memory setting up %d training replicas", R);
        unbind(s);
    }
    s->dirty = 0; /* fresh records: zeroed gradients */
    return rc ? -1 : 0;
}

/* Replicas for a batch of n on T threads: the largest divisor of n up to T
 * (and MAX_REPLICAS); 1: the batch does not split. */
static int replicas_for(int T, int n)
{
    int top = T < n ? T : n;
    for (int r = top < MAX_REPLICAS ? top : MAX_REPLICAS; r >= 2; r--)
        if (n % r == 0) return r;
    return 1;
}

nj_step_replicas *nj_step_replicas_new(int threads, size_t arena_chunk, char *err, size_t errlen)
{
    if (threads < 2) {
        snprintf(err, errlen, "step replicas: %d threads (at least 2)", threads);
        return NULL;
    }
    nj_step_replicas *s = calloc(1, sizeof *s);
    if (!s || !(s->twin = calloc(MAX_REPLICAS, sizeof *s->twin))) {
        free(s);
        snprintf(err, errlen, "out of memory setting up %d training replicas", threads);
        return NULL;
    }
    s->T = threads;
    s->arena_chunk = arena_chunk;
    pthread_mutex_init(&s->h.mu, NULL);
    pthread_cond_init(&s->h.cv, NULL);
    for (int r = 0; r < MAX_REPLICAS; r++) s->rep[r].mem = (member){&s->h, r, 0};
    return s;
}

void nj_step_replicas_free(nj_step_replicas *s)
{
    if (!s) return;
    unbind(s);
    for (int r = 0; r < MAX_REPLICAS; r++)
        if (s->rep[r].g) nj_graph_free(s->rep[r].g);
    free(s->h.result);
    for (int p = 0; p < 2; p++)
        for (int r = 0; r < MAX_REPLICAS; r++) free(s->h.stage[p][r]);
    pthread_mutex_destroy(&s->h.mu);
    pthread_cond_destroy(&s->h.cv);
    free(s->twin);
    free(s);
}

int nj_step_replicas_fit(const nj_step_replicas *s, const nj_batch *b)
{
    return s && replicas_for(s->T, b->n) >= 2;
}

size_t nj_step_replicas_arena_peak(const nj_step_replicas *s)
{
    size_t peak = 0;
    for (int r = 1; s && r < MAX_REPLICAS; r++)
        if (s->rep[r].g) peak += nj_arena_peak(nj_graph_arena(s->rep[r].g));
    return peak;
}

/* ---- one step ----------------------------------------------------------- */

/* Replica r's part of the step, its ops on `inner` threads. */
static void replica_step(nj_step_replicas *s, int r, int inner, nj_graph *g0, nj_model *m,
                         const nj_train_config *cfg, const nj_batch *b)
{
    replica *p = &s->rep[r];
    omp_set_num_threads(inner); /* for this task's ops only (the ICV is per task) */
    nj_graph *g = r ? p->g : g0;
    nj_model *mr = r ? &p->tw.m : m;
    if (r) {
        nj_graph_reset(g);
        memcpy(p->tw.m.params.frozen, m->params.frozen, sizeof m->params.frozen);
        /* zeroed by the last combine, or at allocation */
        for (int i = 0; s->dirty && i < s->npairs; i++)
            memset(s->twin[r][i]->grad, 0, sizeof(float) * nj_param_numel(s->twin[r][i]));
    }
    nj_replicas rp = {s->h.outer.rank * s->R + r, s->h.outer.count * s->R, member_sum, &p->mem};
    nj_graph_set_replicas(g, &rp);
    nj_batch sb;
    nj_batch_view(b, r * (b->n / s->R), b->n / s->R, &sb);
    if (nj_train_step(g, mr, cfg, &sb, &p->rng, 1, &p->res)) hub_abort(&s->h, r);
    nj_graph_set_replicas(g, NULL);
}

/* The model's gradients ← the replicas' mean, block by block on all threads;
 * the private gradients are zeroed on the way (ready for the next step, and
 * off the replicas' own start). */
static void combine_grads(nj_step_replicas *s)
{
    const float scale = 1.0f / (float)s->R;
    #pragma omp parallel for schedule(dynamic, 1)
    for (int i = 0; i < s->nblocks; i++) {
        const grad_block *B = &s->blocks[i];
        float *d = s->real[B->param]->grad + B->start;
        for (int r = 1; r < s->R; r++) {
            float *o = s->twin[r][B->param]->grad + B->start;
            #pragma omp simd
            for (size_t j = 0; j < B->len; j++) {
                d[j] += o[j];
                o[j] = 0.0f;
            }
        }
        #pragma omp simd
        for (size_t j = 0; j < B->len; j++) d[j] *= scale;
    }
}

/* r ← the replicas' mean loss figures, replica 0's tensors. */
static void combine_results(nj_step_replicas *s, nj_step_result *r)
{
    *r = s->rep[0].res;
    float *mean[NJ_STEP_FIGURES];
    nj_step_figures(r, mean);
    for (int i = 0; i < NJ_STEP_FIGURES; i++) {
        double sum = 0;
        for (int k = 0; k < s->R; k++) {
            float *f[NJ_STEP_FIGURES];
            nj_step_figures(&s->rep[k].res, f);
            sum += *f[i];
        }
        *mean[i] = (float)(sum / s->R);
    }
}

int nj_step_replicas_run(nj_step_replicas *s, nj_graph *g, nj_model *m, const nj_train_config *cfg,
                         const nj_batch *b, nj_rng *rng, nj_step_result *r)
{
    int R = s ? replicas_for(s->T, b->n) : 1;
    if (R < 2) return nj_train_step(g, m, cfg, b, rng, 1, r);
    char err[256];
    /* first batch, another replica count, or a reloaded model: new records */
    if ((!bound_to(s, m) || s->R != R) && bind(s, m, R, err, sizeof err)) {
        nj_graph_fail(g, "%s", err);
        return -1;
    }
    /* the caller's graph may have process replicas: this step's replica r is
     * shard rank·R + r of count·R, and replica 0 adds the processes' sums */
    const nj_replicas *o = nj_graph_replicas(g);
    nj_replicas outer = o ? *o : (nj_replicas){0, 1, NULL, NULL};
    hub_reset(&s->h);
    s->h.count = R;
    s->h.outer = outer;
    for (int k = 0; k < R; k++) s->rep[k].rng = *rng, s->rep[k].mem.sums = 0;
    /* threads beyond one per replica run each replica's ops (a nested team) */
    int inner = s->T / R, levels = omp_get_max_active_levels(), short_team = 0;
    if (inner > 1 && levels < 2) omp_set_max_active_levels(2);
    #pragma omp parallel num_threads(R)
    {
        if (omp_get_num_threads() != R) {
            #pragma omp single
            short_team = 1; /* fewer threads than replicas: they would wait for each other forever */
        } else {
            replica_step(s, omp_get_thread_num(), inner, g, m, cfg, b);
        }
    }
    if (inner > 1 && levels < 2) omp_set_max_active_levels(levels);
    nj_graph_set_replicas(g, o ? &outer : NULL);
    if (short_team) return nj_train_step(g, m, cfg, b, rng, 1, r);
    if (s->h.aborted) {
        s->dirty = 1;
        int f = s->h.first_failed;
        if (f > 0) nj_graph_fail_cause(g, nj_graph_error(s->rep[f].g));
        else if (!nj_graph_failed(g)) nj_graph_fail(g, "a training replica failed");
        return -1;
    }
    *rng = s->rep[0].rng;
    combine_grads(s);
    s->dirty = 0;
    combine_results(s, r);
    return 0;
}

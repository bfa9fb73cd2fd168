/* train/loop/trainer_dist.c — the trainer's data-parallel parts (see
 * trainer_dist.h): configuration and state from rank 0, agreement on setup
 * failures and on the data, the fused gradient average, the stop decision. */
#include "train/loop/trainer_dist.h"
#include "train/loop/dist.h"
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

/* Loss figures appended to the gradients in the fused buffer. */
enum { NSTATS = NJ_STEP_FIGURES };

/* Rank 0's note for a signal (see nj_trainer_dist_signal_note). */
static char g_note[NJ_PATH_MAX + 512];
static size_t g_note_len;

void nj_trainer_dist_signal_note(void)
{
    if (g_note_len && write(STDERR_FILENO, g_note, g_note_len) < 0) g_note_len = 0;
}

static void prepare_note(const nj_trainer *t)
{
    int n = snprintf(g_note, sizeof g_note,
                     "\nnightjar train: rank 0: stop signal received (the MPI launcher sends it to every "
                     "process when one of the job's %d processes has died or the job is cancelled); the "
                     "checkpoints in %s stay valid: continue with the same command, --out %s --resume "
                     "and the same process count\n", t->ranks, t->dir, t->dir);
    g_note_len = n > 0 && (size_t)n < sizeof g_note ? (size_t)n : 0;
}

int nj_trainer_dist_begin(nj_trainer *t, char *err, size_t errlen)
{
    t->rank = nj_dist_rank();
    t->ranks = nj_dist_size();
    if (t->ranks <= 1) return 0;
    if (t->rank == 0) prepare_note(t);
    nj_train_config mine = t->cfg;
    if (nj_dist_bcast(&t->cfg, sizeof t->cfg)) {
        snprintf(err, errlen, "rank %d: cannot receive the configuration from rank 0", t->rank);
        return -1;
    }
    memcpy(t->cfg.dataset, mine.dataset, sizeof mine.dataset);
    t->cfg.threads = mine.threads;
    return 0;
}

/* "1, 3" — the ranks whose flag is set. */
static void list_ranks(const unsigned char *flag, int n, char *out, size_t len)
{
    size_t k = 0;
    out[0] = 0;
    for (int r = 0; r < n && k + 16 < len; r++)
        if (flag[r]) k += (size_t)snprintf(out + k, len - k, "%s%d", k ? ", " : "", r);
}

int nj_trainer_dist_agree(nj_trainer *t, int rc, const char *what, char *err, size_t errlen)
{
    if (t->ranks <= 1) return rc ? -1 : 0;
    unsigned char mine = rc != 0, *all = calloc((size_t)t->ranks, 1);
    if (!all || nj_dist_allgather(&mine, all, 1)) {
        free(all);
        snprintf(err, errlen, "rank %d: cannot agree with the other ranks on %s", t->rank, what);
        return -1;
    }
    int failed = 0;
    for (int r = 0; r < t->ranks; r++) failed += all[r];
    if (failed && !rc) {
        char ranks[256];
        list_ranks(all, t->ranks, ranks, sizeof ranks);
        if (t->rank == 0) snprintf(err, errlen, "%s failed on rank %s (see the message above)", what, ranks);
        else if (errlen) err[0] = 0;
    }
    free(all);
    return failed ? -1 : 0;
}

typedef struct data_id {
    uint64_t hash;
    char host[56];
} data_id;

int nj_trainer_dist_check_data(nj_trainer *t, char *err, size_t errlen)
{
    if (t->ranks <= 1) return 0;
    data_id mine, *all = calloc((size_t)t->ranks, sizeof *all);
    memset(&mine, 0, sizeof mine);
    mine.hash = nj_dataset_hash(&t->ds);
    snprintf(mine.host, sizeof mine.host, "%s", nj_dist_host());
    if (!all || nj_dist_allgather(&mine, all, sizeof mine)) {
        free(all);
        snprintf(err, errlen, "rank %d: cannot compare the data with the other ranks", t->rank);
        return -1;
    }
    int bad = -1;
    for (int r = 1; r < t->ranks && bad < 0; r++)
        if (all[r].hash != all[0].hash) bad = r;
    if (bad >= 0)
        snprintf(err, errlen, "%s: the data on rank %d (host %s, file list hash %016llx) differs from rank 0's "
                 "(host %s, %016llx); every rank needs the same dataset — refused",
                 t->cfg.dataset, bad, all[bad].host, (unsigned long long)all[bad].hash, all[0].host,
                 (unsigned long long)all[0].hash);
    free(all);
    return bad >= 0 ? -1 : 0;
}

/* Floats of every parameter (value, Adam m, v) and buffer. */
static size_t model_floats(const nj_model *m)
{
    return 3 * nj_params_numel(&m->params) + nj_params_numel(&m->buffers);
}

/* Copies the model's tensors into buf (out != 0) or back from it. */
static void pack_model(nj_model *m, float *buf, int out)
{
    for (int i = 0; i < m->params.count; i++) {
        nj_param *p = m->params.items[i];
        size_t k = nj_param_numel(p);
        float *part[3] = {p->data, p->m, p->v};
        for (int j = 0; j < 3; j++, buf += k)
            out ? memcpy(buf, part[j], k * sizeof(float)) : memcpy(part[j], buf, k * sizeof(float));
    }
    for (int i = 0; i < m->buffers.count; i++) {
        nj_param *p = m->buffers.items[i];
        size_t k = nj_param_numel(p);
        out ? memcpy(buf, p->data, k * sizeof(float)) : memcpy(p->data, buf, k * sizeof(float));
        buf += k;
    }
}

/* Non-zero ranks: a model of rank 0's architecture. */
static int receive_architecture(nj_trainer *t, char *err, size_t errlen)
{
    nj_model_config mc;
    memset(&mc, 0, sizeof mc);
    if (t->rank == 0) mc = t->model.cfg;
    int rc = nj_dist_bcast(&mc, sizeof mc);
    if (!rc && t->rank != 0 && (!t->model_ready || memcmp(&mc, &t->model.cfg, sizeof mc))) {
        if (t->model_ready) nj_model_free(&t->model);
        t->model_ready = 0;
        rc = nj_model_init(&t->model, &mc, err, errlen);
        t->model_ready = rc == 0;
    }
    return nj_trainer_dist_agree(t, rc, "building the model", err, errlen);
}

int nj_trainer_dist_share(nj_trainer *t, char *err, size_t errlen)
{
    if (t->ranks <= 1) return 0;
    if (receive_architecture(t, err, errlen)) return -1;
    size_t n = model_floats(&t->model);
    float *buf = malloc(n * sizeof(float));
    if (!t->fused) t->fused = malloc((nj_params_numel(&t->model.params) + NSTATS) * sizeof(float));
    if (nj_trainer_dist_agree(t, buf && t->fused ? 0 : -1, "allocating the model copy", err, errlen)) {
        if (!buf || !t->fused) snprintf(err, errlen, "rank %d: out of memory for a model copy", t->rank);
        free(buf);
        return -1;
    }
    if (t->rank == 0) pack_model(&t->model, buf, 1);
    int rc = nj_dist_bcast(buf, n * sizeof(float)) || nj_dist_bcast(&t->st, sizeof t->st);
    if (!rc && t->rank != 0) {
        pack_model(&t->model, buf, 0);
        t->rng.s[0] = t->st.rng[0];
        t->rng.s[1] = t->st.rng[1];
    }
    free(buf);
    if (rc) snprintf(err, errlen, "rank %d: cannot receive the model from rank 0", t->rank);
    return rc ? -1 : 0;
}

static int replica_sum(double *buf, int n, void *ctx)
{
    (void)ctx;
    return nj_dist_sum_f64(buf, n);
}

void nj_trainer_dist_graph(nj_trainer *t)
{
    nj_replicas r = {.rank = t->rank, .count = t->ranks, .sum = replica_sum, .ctx = NULL};
    nj_graph_set_replicas(t->g, t->ranks > 1 ? &r : NULL);
}

/* Gradients of the unfrozen parameters into buf (out != 0) or back, scaled. */
static size_t pack_grads(nj_params *ps, float *buf, int out, float scale)
{
    size_t k = 0;
    for (int i = 0; i < ps->count; i++) {
        nj_param *p = ps->items[i];
        if (ps->frozen[p->group]) continue;
        size_t n = nj_param_numel(p);
        if (out) memcpy(buf + k, p->grad, n * sizeof(float));
        else for (size_t j = 0; j < n; j++) p->grad[j] = buf[k + j] * scale;
        k += n;
    }
    return k;
}

int nj_trainer_dist_average(nj_trainer *t, nj_step_result *r)
{
    if (t->ranks <= 1) return 0;
    float *f = t->fused;
    size_t k = pack_grads(&t->model.params, f, 1, 1.0f);
    float *stats[NSTATS];
    nj_step_figures(r, stats);
    for (int i = 0; i < NSTATS; i++) f[k + i] = *stats[i];
    if (nj_dist_sum_f32(f, k + NSTATS)) return -1;
    const float scale = 1.0f / (float)t->ranks;
    pack_grads(&t->model.params, f, 0, scale);
    for (int i = 0; i < NSTATS; i++) *stats[i] = f[k + i] * scale;
    return 0;
}

int nj_trainer_dist_stop(nj_trainer *t, int stop)
{
    if (t->ranks <= 1) return stop;
    int64_t v[2] = {stop, t->rank == 0 ? (int64_t)t->st.schedule_steps : INT64_MIN};
    if (nj_dist_max_i64(v, 2)) return 2;
    t->st.schedule_steps = (long)v[1];
    return (int)v[0];
}

void nj_trainer_dist_summary(const nj_trainer *t, long steps)
{
    nj_dist_stats s;
    nj_dist_get_stats(&s);
    if (t->rank != 0 || t->ranks <= 1 || s.sum_f32_calls <= 0 || steps <= 0) return;
    printf("data-parallel: %d processes; gradient all-reduce %.2f ms/step (one call of %.2f MB); batch-norm and "
           "loss sums %.2f ms/step (%.0f calls/step)\n", t->ranks, 1e3 * s.sum_f32_seconds / s.sum_f32_calls,
           4e-6 * s.sum_f32_values / s.sum_f32_calls, 1e3 * s.sum_f64_seconds / steps,
           (double)s.sum_f64_calls / steps);
    fflush(stdout);
}

void nj_trainer_dist_fail(nj_trainer *t, int code)
{
    fflush(stdout);
    if (t->rank != 0 && t->log.held[0])
        fprintf(stderr, "nightjar train: rank %d (%s): %s\n", t->rank, nj_dist_host(), t->log.held);
    fprintf(stderr, "nightjar train: rank %d of %d stopped with an error; ending the job (the last checkpoint "
            "stays valid; continue with --resume)\n", t->rank, t->ranks);
    nj_dist_abort(code);
}

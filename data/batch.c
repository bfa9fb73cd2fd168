/* data/batch.c — the training batch's constructor and views (see batch.h). */
#include "data/batch.h"
#include <stdlib.h>
#include <string.h>

static float *images(int count, size_t n)
{
    return calloc((size_t)(count ? count : 1) * n, sizeof(float));
}

int nj_batch_alloc(nj_batch *b, int n, int h, int w, int nsrc, int stereo, int jitter, int turn, int rotated)
{
    memset(b, 0, sizeof *b);
    size_t img = (size_t)3 * w * h;
    b->n = n;
    b->w = w;
    b->h = h;
    b->nsrc = nsrc;
    b->stereo = stereo;
    b->target = images(n, img);
    b->sources = images(n * nsrc, img);
    b->partner = stereo ? images(n, img) : NULL;
    b->target_in = jitter ? images(n, img) : b->target;
    b->sources_in = jitter || turn ? images(n * nsrc, img) : b->sources;
    b->partner_in = stereo ? (jitter ? images(n, img) : b->partner) : NULL;
    b->turn = turn ? calloc((size_t)(n * nsrc > 0 ? n * nsrc : 1) * 3, sizeof(float)) : NULL;
    size_t items = (size_t)(n ? n : 1);
    b->rotated = rotated ? images(n, img) : NULL;
    b->rotated_by = rotated ? calloc(items * 3, sizeof(float)) : NULL;
    b->camera = calloc(items, sizeof(nj_camera));
    b->stereo_tx = calloc(items, sizeof(float));
    b->has_partner = calloc(items, sizeof(int));
    b->flipped = calloc(items, sizeof(int));
    b->sample = calloc(items, sizeof(int));
    if (b->target && b->sources && b->target_in && b->sources_in && (!turn || b->turn) &&
        (!rotated || (b->rotated && b->rotated_by)) && (!stereo || (b->partner && b->partner_in)) && b->camera &&
        b->stereo_tx && b->has_partner && b->flipped && b->sample)
        return 0;
    nj_batch_free(b);
    return -1;
}

void nj_batch_free(nj_batch *b)
{
    if (b->target_in != b->target) free(b->target_in);
    if (b->sources_in != b->sources) free(b->sources_in);
    if (b->partner_in != b->partner) free(b->partner_in);
    free(b->turn);
    free(b->rotated);
    free(b->rotated_by);
    free(b->target);
    free(b->sources);
    free(b->partner);
    free(b->camera);
    free(b->stereo_tx);
    free(b->has_partner);
    free(b->flipped);
    free(b->sample);
    memset(b, 0, sizeof *b);
}

void nj_batch_view(const nj_batch *b, int i0, int k, nj_batch *o)
{
    size_t i = (size_t)i0, img = (size_t)3 * b->h * b->w;
    *o = *b;
    o->n = k;
    o->target += i * img;
    o->target_in += i * img;
    if (b->sources) o->sources += i * (size_t)b->nsrc * img;
    if (b->sources_in) o->sources_in += i * (size_t)b->nsrc * img;
    if (b->turn) o->turn += i * (size_t)b->nsrc * 3;
    if (b->rotated) o->rotated += i * img;
    if (b->rotated_by) o->rotated_by += i * 3;
    if (b->partner) o->partner += i * img;
    if (b->partner_in) o->partner_in += i * img;
    if (b->camera) o->camera += i;
    if (b->stereo_tx) o->stereo_tx += i;
    if (b->has_partner) o->has_partner += i;
    if (b->flipped) o->flipped += i;
    if (b->sample) o->sample += i;
}

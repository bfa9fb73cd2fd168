/* data/loader_item.c — one batch item: decode, undistort (a sequence with a
 * lens or a raw stereo rig), resize to the training size with matching
 * intrinsics (or the same pixels from the frame store), seeded flip and colour
 * jitter — the augmentation always runs here, per step, so the store holds the
 * un-augmented frames. */
#include "data/loader_item.h"
#include "data/augment.h"
#include "data/framestore.h"
#include "data/image.h"
#include <stdlib.h>
#include <string.h>

static uint64_t mix(uint64_t z)
{
    z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ull;
    z = (z ^ (z >> 27)) * 0x94D049BB133111EBull;
    return z ^ (z >> 31);
}

uint64_t nj_loader_item_seed(uint64_t seed, long step, int i)
{
    return mix(mix(seed ^ 0xA5A5F00Dull) + (uint64_t)step * 0x9E3779B97F4A7C15ull + (uint64_t)i);
}

/* The full-size frame in its sequence's pinhole view, before any resize:
 * undistorted (and, for a raw stereo rig, rectified) through the sequence's
 * precomputed map; u is nj_sequence_undistort() — NULL for a pinhole camera,
 * whose frames pass untouched (bit-identical to no lens support).  What a
 * cache of prepared frames must key on besides the file: u->key. */
static int undistort_frame(const nj_undistort *u, nj_image *im, const char *path, char *err, size_t errlen)
{
    char why[256];
    if (!u || !nj_undistort_image(u, im, why, sizeof why)) return 0;
    snprintf(err, errlen, "%s: %s", path, why);
    return -1;
}

/* Decodes DIR/NAME into dst (3×H×W at the training size); *sw, *sh get the
 * on-disk size. */
static int load_frame(const char *dir, const char *name, const nj_undistort *u, int W, int H, float *dst,
                      int *sw, int *sh, char *err, size_t errlen)
{
    nj_image im = {0, 0, NULL}, out;
    char *path = nj_path_join(dir, name);
    int rc = path ? nj_image_load(path, &im, err, errlen) : -1;
    if (!rc) rc = undistort_frame(u, &im, path, err, errlen);
    if (!rc) {
        *sw = im.w;
        *sh = im.h;
        if (im.w == W && im.h == H) {
            memcpy(dst, im.data, sizeof(float) * 3 * W * H);
        } else if (nj_image_resize(&im, W, H, &out)) {
            snprintf(err, errlen, "%s: out of memory resizing to %dx%d", path, W, H);
            rc = -1;
        } else {
            memcpy(dst, out.data, sizeof(float) * 3 * W * H);
            nj_image_free(&out);
        }
    }
    nj_image_free(&im);
    free(path);
    return rc;
}

/* Lens undistortion (of the full-size frame, before the resize) and anything
 * else that shapes a training frame's pixels belongs in load_frame, behind
 * this one entry, with NJ_FRAME_PIXELS_VERSION raised. */
int nj_loader_frame(const nj_sequence *q, int right, int frame, int W, int H, float *dst, int *sw, int *sh,
                    char *err, size_t errlen)
{
    return load_frame(right ? q->right_images : q->images, q->frames[frame], nj_sequence_undistort(q, right), W, H,
                      dst, sw, sh, err, errlen);
}

/* A frame of an item: from the frame store when it holds it, else prepared here. */
static int item_frame(const nj_loader_config *c, const nj_sample *s, const nj_sequence *q, int right, int frame,
                      int W, int H, float *dst, int *sw, int *sh, char *err, size_t errlen)
{
    int r = c->store ? nj_framestore_read(c->store, s->seq, right, frame, dst, sw, sh, err, errlen) : 1;
    return r <= 0 ? r : nj_loader_frame(q, right, frame, W, H, dst, sw, sh, err, errlen);
}

static void jitter_item(const nj_jitter *j, nj_batch *b, int i, int partner)
{
    size_t n = (size_t)3 * b->w * b->h;
    float pivot = nj_jitter_pivot(j, b->target + i * n, b->w, b->h);
    nj_jitter_apply(j, pivot, b->target + i * n, b->target_in + i * n, b->w, b->h);
    for (int k = 0; k < b->nsrc; k++) {
        size_t o = ((size_t)i * b->nsrc + k) * n;
        /* a turned source's input copy is already in sources_in (turn_item) */
        nj_jitter_apply(j, pivot, b->turn ? b->sources_in + o : b->sources + o, b->sources_in + o, b->w, b->h);
    }
    if (partner) nj_jitter_apply(j, pivot, b->partner + i * n, b->partner_in + i * n, b->w, b->h);
}

static void flip_item(nj_batch *b, int i, int partner)
{
    nj_flip_planes(b->target + (size_t)i * 3 * b->w * b->h, 3, b->w, b->h);
    nj_flip_planes(b->sources + (size_t)i * b->nsrc * 3 * b->w * b->h, 3 * b->nsrc, b->w, b->h);
    if (partner) nj_flip_planes(b->partner + (size_t)i * 3 * b->w * b->h, 3, b->w, b->h);
}

/* The network-input copy of each source turned by its own yaw and roll,
 * drawn after the flip and jitter parameters (and nothing drawn for a range
 * of 0) so runs without them keep their draws. */
static void turn_item(nj_rng *r, const nj_loader_config *c, nj_batch *b, int i)
{
    size_t n = (size_t)3 * b->w * b->h;
    for (int k = 0; k < b->nsrc; k++) {
        size_t o = ((size_t)i * b->nsrc + k) * n;
        float *rot = b->turn + ((size_t)i * b->nsrc + k) * 3;
        rot[0] = 0;
        rot[1] = nj_draw_angle(r, c->turn_deg);
        rot[2] = nj_draw_angle(r, c->roll_deg);
        nj_turn_planes(b->sources + o, b->sources_in + o, 3, b->w, b->h, b->camera[i], rot);
    }
}

static int load_item(const nj_loader_config *c, const nj_sequence *q, const nj_sample *s, nj_batch *b, int i,
                     int partner, int *sw, int *sh, char *err, size_t errlen)
{
    size_t n = (size_t)3 * b->w * b->h;
    int w2, h2;
    if (item_frame(c, s, q, 0, s->target, b->w, b->h, b->target + i * n, sw, sh, err, errlen)) return -1;
    for (int k = 0; k < b->nsrc; k++)
        if (item_frame(c, s, q, 0, s->src[k], b->w, b->h, b->sources + ((size_t)i * b->nsrc + k) * n,
                       &w2, &h2, err, errlen))
            return -1;
    if (partner && item_frame(c, s, q, 1, s->target, b->w, b->h, b->partner + i * n, &w2, &h2, err, errlen))
        return -1;
    return 0;
}

int nj_loader_item(const nj_dataset *ds, const nj_sample *s, const nj_loader_config *c,
                   long step, int i, nj_batch *b, char *err, size_t errlen)
{
    const nj_sequence *q = &ds->seq[s->seq];
    nj_rng r;
    nj_rng_seed(&r, nj_loader_item_seed(c->seed, step, c->shard_first + i));
    int flip = nj_rng_uniform(&r) < c->flip_prob;
    nj_jitter j = nj_jitter_draw(&r, c->brightness, c->contrast, c->saturation, c->hue);
    int partner = b->stereo && s->stereo, sw = b->w, sh = b->h;
    if (s->nsrc != b->nsrc) {
        snprintf(err, errlen, "%s: sample has %d sources, the batch %d", q->images, s->nsrc, b->nsrc);
        return -1;
    }
    if (load_item(c, q, s, b, i, partner, &sw, &sh, err, errlen)) return -1;
    b->camera[i] = nj_camera_resize(q->camera, sw, sh, b->w, b->h);
    if (flip) {
        flip_item(b, i, partner);
        b->camera[i] = nj_camera_flip(b->camera[i], b->w);
    }
    if (b->stereo && !partner) memset(b->partner + (size_t)i * 3 * b->w * b->h, 0, sizeof(float) * 3 * b->w * b->h);
    b->has_partner[i] = partner;
    b->stereo_tx[i] = partner ? (flip ? q->baseline : -q->baseline) : 0.0f;
    b->flipped[i] = flip;
    if (b->turn) turn_item(&r, c, b, i);
    if (c->jitter) jitter_item(&j, b, i, b->stereo);
    if (b->rotated && (c->rotated_until <= 0 || step < c->rotated_until)) {
        size_t n = (size_t)3 * b->w * b->h;
        nj_rotated_copy(&r, b->target_in + i * n, b->rotated + i * n, b->w, b->h, b->camera[i], c->rotated_deg,
                        b->rotated_by + (size_t)i * 3);
    }
    return 0;
}

/* tests/test_data_loader.c — the batch loader.
 *  - the same seed gives the same batches (with 1, 2 or 3 workers: workers
 *    take single items, so with 3 a batch's items are prepared at once),
 *    another seed different ones, and a loader started at step s (resume)
 *    repeats step s;
 *  - every sample appears once per epoch;
 *  - shards (data-parallel ranks) yield exactly their slice of each batch:
 *    same samples, flips, jitter and pixels as the unsharded loader;
 *  - clean images equal the decoded, resized files; intrinsics are scaled;
 *  - colour jitter changes only the network input, identically for all
 *    frames of a sample;
 *  - a horizontal flip keeps geometry consistent: with the flipped camera
 *    (cx' = W − 1 − cx), the flipped ground-truth depth and the swapped stereo
 *    side (stereo_tx = +baseline), the flipped target reprojects onto the
 *    flipped partner; and onto the flipped next frame with the mirrored pose
 *    S·T·S, S = diag(−1, 1, 1).  The reprojection here is this test's own.
 *  - a turned source (data.augment.turn_deg, on a flipped item: the
 *    network-input copy, turned by a yaw and a roll) is explained by the pose
 *    R·T with the rotation the batch records, and not by T or Rᵀ·T; the clean frames and every
 *    draw are exactly what a loader without the turn yields; with colour
 *    jitter the input copy is the jittered frame turned (the jitter is affine
 *    per pixel, so it commutes with the bilinear turn up to its clamping);
 *  - the rotated copy (loss.rotation_pairs): each item's copy is its network-input
 *    target turned by the rotation the batch records (every component within
 *    the range, some turned), times a gain in 1 ± NJ_ROTATED_GAIN, plus noise
 *    of σ ≤ NJ_ROTATED_NOISE — fitted here per item by least squares (gain) and
 *    the residual's spread; the unturned or oppositely turned frame fits far
 *    worse.  Everything else the batch holds, and every draw, is what a
 *    loader without it yields; a range beyond NJ_TURN_MAX_DEG is refused;
 *    from rotated_until on (the lesson over) no copy is made;
 *  - several frame offsets ({1, 3}): each sample carries t−1, t+1, t−3, t+3 in
 *    that order, only targets with room for the largest offset are used, and
 *    the loader's source planes are those frames decoded and resized;
 *  - a file that disappears gives an error naming it. */
#include "data/augment.h"
#include "data/dataset.h"
#include "data/image.h"
#include "data/loader.h"
#include "data/npy.h"
#include "data/poses.h"
#include "data/synth.h"
#include "tests/check.h"
#include "tests/test_data_util.h"

#define SW 96
#define SH 72

static char dir[64];

/* Opens the training split with `opt` (NULL: the defaults without duplicate skipping). */
static int open_dataset_with(const char *json, const nj_data_options *opt, nj_dataset *ds, nj_sample **samples,
                             int *n)
{
    nj_data_options o;
    nj_data_options_default(&o);
    o.dup_threshold = 0;
    if (opt) o = *opt;
    nj_problems pr;
    nj_problems_init(&pr);
    int bad = nj_dataset_open(json, &o, ds, &pr);
    if (bad) nj_problems_print(&pr, stdout);
    nj_problems_free(&pr);
    *n = bad ? 0 : nj_dataset_samples(ds, NJ_SPLIT_TRAIN, &o, samples);
    return bad || *n <= 0 ? -1 : 0;
}

static int open_dataset(const char *json, nj_dataset *ds, nj_sample **samples, int *n)
{
    return open_dataset_with(json, NULL, ds, samples, n);
}

static size_t batch_floats(const nj_batch *b) { return (size_t)b->n * 3 * b->w * b->h; }

static int same_batch(const nj_batch *a, const nj_batch *b)
{
    size_t n = batch_floats(a);
    return a->n == b->n && !memcmp(a->sample, b->sample, sizeof(int) * a->n) &&
           !memcmp(a->flipped, b->flipped, sizeof(int) * a->n) && !memcmp(a->target, b->target, n * 4) &&
           !memcmp(a->target_in, b->target_in, n * 4) && !memcmp(a->sources_in, b->sources_in, n * a->nsrc * 4) &&
           !memcmp(a->partner_in, b->partner_in, n * 4) && !memcmp(a->camera, b->camera, sizeof(nj_camera) * a->n) &&
           !memcmp(a->stereo_tx, b->stereo_tx, sizeof(float) * a->n);
}

static nj_loader *make(const nj_dataset *ds, const nj_sample *s, int n, uint64_t seed, int workers, long start,
                       int w, int h)
{
    nj_loader_config c;
    char err[512];
    nj_loader_config_default(&c);
    c.width = w;
    c.height = h;
    c.batch = 3;
    c.seed = seed;
    c.workers = workers;
    c.start_step = start;
    nj_loader *L = nj_loader_create(ds, s, n, &c, err, sizeof err);
    if (!L) printf("note: %s\n", err);
    return L;
}

/* Copies of the first `steps` batches. */
static nj_batch *take(nj_loader *L, int steps)
{
    nj_batch *out = calloc((size_t)steps, sizeof(nj_batch));
    char err[512];
    for (int s = 0; s < steps; s++) {
        const nj_batch *b = nj_loader_next(L, err, sizeof err);
        if (!b) { printf("note: %s\n", err); continue; }
        nj_batch *c = &out[s];
        *c = *b;
        size_t n = batch_floats(b) * 4;
#define DUP(f, bytes) c->f = malloc(bytes), memcpy(c->f, b->f, bytes)
        DUP(target, n); DUP(target_in, n); DUP(sources_in, n * b->nsrc); DUP(partner_in, n);
        DUP(sample, sizeof(int) * b->n); DUP(flipped, sizeof(int) * b->n);
        DUP(camera, sizeof(nj_camera) * b->n); DUP(stereo_tx, sizeof(float) * b->n);
#undef DUP
    }
    return out;
}

static void drop(nj_batch *b, int steps)
{
    for (int s = 0; s < steps; s++) {
        free(b[s].target); free(b[s].target_in); free(b[s].sources_in); free(b[s].partner_in);
        free(b[s].sample); free(b[s].flipped); free(b[s].camera); free(b[s].stereo_tx);
    }
    free(b);
}

static void test_determinism(const nj_dataset *ds, const nj_sample *s, int n)
{
    enum { STEPS = 6 };
    nj_loader *a = make(ds, s, n, 11, 1, 0, 64, 48), *b = make(ds, s, n, 11, 2, 0, 64, 48);
    nj_loader *c = make(ds, s, n, 12, 2, 0, 64, 48), *r = make(ds, s, n, 11, 2, 4, 64, 48);
    nj_loader *w3 = make(ds, s, n, 11, 3, 0, 64, 48), *r3 = make(ds, s, n, 11, 3, 2, 64, 48);
    if (!a || !b || !c || !r || !w3 || !r3) { check(0, "loader_create", "create failed"); return; }
    nj_batch *ba = take(a, STEPS), *bb = take(b, STEPS), *bc = take(c, STEPS), *br = take(r, 1);
    nj_batch *b3 = take(w3, STEPS), *br3 = take(r3, 3);
    int same = 1, same3 = 1, resumed3 = 1, differ = 0;
    for (int i = 0; i < STEPS; i++) {
        same &= same_batch(&ba[i], &bb[i]);
        same3 &= b3[i].step == i && same_batch(&ba[i], &b3[i]);
        differ |= !same_batch(&ba[i], &bc[i]);
    }
    for (int i = 0; i < 3; i++) resumed3 &= br3[i].step == 2 + i && same_batch(&ba[2 + i], &br3[i]);
    check(same, "loader_same_seed_same_batches", "batches differ between 1 and 2 workers with seed 11");
    /* 3 workers on batches of 3 items: the items of one batch are prepared
     * by different workers at once, finishing in any order */
    check(same3, "loader_three_workers_same_batches", "batches differ between 1 and 3 workers with seed 11");
    check(resumed3, "loader_three_workers_resume", "3 workers from step 2 differ from steps 2-4 of 1 worker");
    check(differ, "loader_other_seed_other_batches", "seed 12 gave the same batches");
    check(br[0].step == 4 && same_batch(&ba[4], &br[0]), "loader_resume_repeats_step", "start_step 4 differs from step 4");
    drop(ba, STEPS); drop(bb, STEPS); drop(bc, STEPS); drop(br, 1); drop(b3, STEPS); drop(br3, 3);
    nj_loader_destroy(a); nj_loader_destroy(b); nj_loader_destroy(c); nj_loader_destroy(r);
    nj_loader_destroy(w3); nj_loader_destroy(r3);
}

/* Item i of a equals item j of b (sample, flip, camera, clean and jittered pixels). */
static int same_item(const nj_batch *a, int i, const nj_batch *b, int j)
{
    size_t n = (size_t)3 * a->w * a->h;
    return a->sample[i] == b->sample[j] && a->flipped[i] == b->flipped[j] &&
           !memcmp(&a->camera[i], &b->camera[j], sizeof(nj_camera)) &&
           !memcmp(a->target + i * n, b->target + j * n, n * 4) &&
           !memcmp(a->target_in + i * n, b->target_in + j * n, n * 4) &&
           !memcmp(a->sources_in + i * n * a->nsrc, b->sources_in + j * n * b->nsrc, n * a->nsrc * 4);
}

static void test_shards(const nj_dataset *ds, const nj_sample *s, int n)
{
    enum { STEPS = 4 };
    nj_loader_config c;
    char err[512];
    nj_loader_config_default(&c);
    c.width = 64;
    c.height = 48;
    c.batch = 3;
    c.seed = 11;
    c.start_step = 2;
    nj_loader *full = nj_loader_create(ds, s, n, &c, err, sizeof err);
    c.shard_first = 0;
    c.shard_count = 1;
    nj_loader *s0 = nj_loader_create(ds, s, n, &c, err, sizeof err);
    c.shard_first = 1;
    c.shard_count = 2;
    nj_loader *s1 = nj_loader_create(ds, s, n, &c, err, sizeof err);
    c.shard_first = 2;
    nj_loader *bad = nj_loader_create(ds, s, n, &c, err, sizeof err);
    check(!bad && strstr(err, "shard"), "loader_shard_outside_batch_refused", "err '%s'", err);
    if (!full || !s0 || !s1) { check(0, "loader_shard_create", "create failed"); return; }
    nj_batch *bf = take(full, STEPS), *b0 = take(s0, STEPS), *b1 = take(s1, STEPS);
    int ok = 1;
    for (int t = 0; t < STEPS; t++)
        ok &= b0[t].n == 1 && b1[t].n == 2 && same_item(&bf[t], 0, &b0[t], 0) && same_item(&bf[t], 1, &b1[t], 0) &&
              same_item(&bf[t], 2, &b1[t], 1);
    check(ok, "loader_shards_are_slices_of_the_batch", "a shard's item differs from the unsharded batch's");
    drop(bf, STEPS); drop(b0, STEPS); drop(b1, STEPS);
    nj_loader_destroy(full); nj_loader_destroy(s0); nj_loader_destroy(s1);
}

static void test_epoch(int n)
{
    int seen[64] = {0}, idx[64], ok = n <= 64;
    for (int step = 0; ok && step * 4 < n; step++) {   /* batch 4 over one epoch */
        int k = n - step * 4 < 4 ? n - step * 4 : 4;
        nj_loader_step_samples(5, step, 4, n, idx);
        for (int i = 0; i < k; i++) seen[idx[i]]++;
    }
    for (int i = 0; ok && i < n; i++) ok = seen[i] == 1;
    int a[4], b[4];
    nj_loader_step_samples(5, 0, 4, n, a);
    nj_loader_step_samples(5, 3, 4, n, b);
    check(ok && memcmp(a, b, sizeof a) != 0, "loader_epoch_is_a_permutation", "a sample is missing or repeated");
}

static void flip_plane(float *p, int planes, int w, int h)
{
    for (int r = 0; r < planes * h; r++)
        for (int a = 0, b = w - 1; a < b; a++, b--) { float t = p[r * w + a]; p[r * w + a] = p[r * w + b]; p[r * w + b] = t; }
}

/* Clean target = the file decoded and resized (flipped if the item is). */
static void test_clean_and_camera(const nj_dataset *ds, const nj_sample *s, int n)
{
    nj_loader *L = make(ds, s, n, 3, 1, 0, 64, 48);
    char err[512], *path;
    const nj_batch *b = L ? nj_loader_next(L, err, sizeof err) : NULL;
    int ok = b != NULL, cam_ok = ok, jitter_changed = 0;
    for (int i = 0; ok && i < b->n; i++) {
        const nj_sample *q = &s[b->sample[i]];
        const nj_sequence *sq = &ds->seq[q->seq];
        nj_image im, r;
        path = nj_path_join(sq->images, sq->frames[q->target]);
        ok = !nj_image_load(path, &im, err, sizeof err) && !nj_image_resize(&im, 64, 48, &r);
        free(path);
        if (!ok) break;
        if (b->flipped[i]) flip_plane(r.data, 3, 64, 48);
        ok = !memcmp(r.data, b->target + (size_t)i * 3 * 64 * 48, sizeof(float) * 3 * 64 * 48);
        nj_camera want = nj_camera_resize(sq->camera, SW, SH, 64, 48);
        if (b->flipped[i]) want.cx = 63 - want.cx;
        cam_ok &= fabsf(want.fx - b->camera[i].fx) < 1e-5f && fabsf(want.cx - b->camera[i].cx) < 1e-4f &&
                  fabsf(want.cy - b->camera[i].cy) < 1e-4f;
        jitter_changed |= memcmp(b->target + (size_t)i * 3 * 64 * 48, b->target_in + (size_t)i * 3 * 64 * 48,
                                 sizeof(float) * 3 * 64 * 48) != 0;
        nj_image_free(&im);
        nj_image_free(&r);
    }
    check(ok, "loader_clean_images_are_decoded_resized_files", "target differs from decode+resize");
    check(cam_ok, "loader_intrinsics_scaled_and_flipped", "camera does not match nj_camera_resize/flip");
    check(jitter_changed, "loader_jitter_changes_network_input", "target_in equals target");
    nj_loader_destroy(L);
}

/* A dataset whose frames (and partners) are all the same image: jitter
 * identical across frames means identical network inputs. */
static void test_jitter_identical(void)
{
    char d[256], p[1024], err[512];
    snprintf(d, sizeof d, "%s/same", dir);
    snprintf(p, sizeof p, "mkdir -p '%s/l' '%s/r'", d, d);
    if (system(p) != 0) return;
    nj_image im;
    nj_image_alloc(&im, 40, 30);
    for (int i = 0; i < 3 * 40 * 30; i++) im.data[i] = (float)((i * 37) % 251) / 255.0f;
    for (int f = 0; f < 4; f++)
        for (int side = 0; side < 2; side++) {
            snprintf(p, sizeof p, "%s/%s/%03d.png", d, side ? "r" : "l", f);
            nj_png_write_rgb(p, &im, err, sizeof err);
        }
    nj_image_free(&im);
    snprintf(p, sizeof p, "%s/ds.json", d);
    FILE *f = fopen(p, "w");
    if (f) {
        fprintf(f, "{\"sequences\": [{\"name\": \"s\", \"images\": \"l\", \"right_images\": \"r\", \"baseline\": 0.1,"
                   " \"camera\": {\"fx\": 30, \"fy\": 30, \"cx\": 19.5, \"cy\": 14.5}}]}\n");
        fclose(f);
    }
    nj_dataset ds;
    nj_sample *s = NULL;
    int n, ok = 0, changed = 0;
    if (!open_dataset(p, &ds, &s, &n)) {
        nj_loader *L = make(&ds, s, n, 9, 1, 0, 40, 30);
        const nj_batch *b = L ? nj_loader_next(L, err, sizeof err) : NULL;
        size_t m = (size_t)3 * 40 * 30;
        ok = b != NULL;
        for (int i = 0; ok && i < b->n; i++) {
            const float *t = b->target_in + i * m;
            ok = !memcmp(t, b->sources_in + (2 * i) * m, m * 4) && !memcmp(t, b->sources_in + (2 * i + 1) * m, m * 4) &&
                 !memcmp(t, b->partner_in + i * m, m * 4);
            changed |= memcmp(t, b->target + i * m, m * 4) != 0;
        }
        nj_loader_destroy(L);
        nj_dataset_free(&ds);
    }
    free(s);
    check(ok && changed, "loader_jitter_identical_for_all_frames", "ok %d, changed %d", ok, changed);
}

static float *flipped_depth(const nj_sequence *q, int frame)
{
    char err[512], *path = nj_depth_path(q, frame);
    float *d = NULL;
    int shape[4], nd;
    if (nj_npy_read(path, &d, shape, &nd, err, sizeof err)) printf("note: %s\n", err);
    free(path);
    if (d) flip_plane(d, 1, SW, SH);
    return d;
}

static float bilinear(const float *img, float x, float y)
{
    int x0 = (int)floorf(x), y0 = (int)floorf(y);
    float ax = x - x0, ay = y - y0;
    const float *p = img + y0 * SW + x0;
    return (1 - ay) * ((1 - ax) * p[0] + ax * p[1]) + ay * ((1 - ax) * p[SW] + ax * p[SW + 1]);
}

/* Mean photometric error of warping img_a (depth da) into img_b with X_b = R X_a + t. */
static double warp(const float *img_a, const float *da, const float *img_b, const double T[12], nj_camera k)
{
    double sum = 0;
    long n = 0;
    for (int v = 0; v < SH; v++)
        for (int u = 0; u < SW; u++) {
            float d = da[v * SW + u];
            if (!(d > 0)) continue;
            double X[3] = {d * (u - k.cx) / k.fx, d * (v - k.cy) / k.fy, d}, Y[3];
            for (int i = 0; i < 3; i++) Y[i] = T[4 * i] * X[0] + T[4 * i + 1] * X[1] + T[4 * i + 2] * X[2] + T[4 * i + 3];
            float x = (float)(k.fx * Y[0] / Y[2] + k.cx), y = (float)(k.fy * Y[1] / Y[2] + k.cy);
            if (Y[2] < 0.1 || x < 0 || y < 0 || x >= SW - 1 || y >= SH - 1) continue;
            for (int c = 0; c < 3; c++) sum += fabs(img_a[c * SW * SH + v * SW + u] - bilinear(img_b + c * SW * SH, x, y));
            n++;
        }
    return n > SW * SH / 4 ? sum / (3.0 * n) : 1.0;
}

/* X_b = S·T·S X_a for the mirrored world, T from the poses (camera a → b). */
static void mirrored_relative(const double *pa, const double *pb, double T[12])
{
    for (int i = 0; i < 3; i++) {
        for (int j = 0; j < 3; j++) {
            double v = 0;
            for (int k = 0; k < 3; k++) v += pb[4 * k + i] * pa[4 * k + j];
            T[4 * i + j] = v * ((i == 0) != (j == 0) ? -1 : 1);
        }
        double t = 0;
        for (int k = 0; k < 3; k++) t += pb[4 * k + i] * (pa[4 * k + 3] - pb[4 * k + 3]);
        T[4 * i + 3] = i == 0 ? -t : t;
    }
}

/* Batches of 2 items at SW×SH; flip: every item flipped (else the default
 * probability); jitter on or off. */
static void pair_config(nj_loader_config *c, int flip, int jitter)
{
    nj_loader_config_default(c);
    c->width = SW;
    c->height = SH;
    c->batch = 2;
    if (flip) c->flip_prob = 1.0f;
    c->jitter = jitter;
}

static void test_flip_geometry(const nj_dataset *ds, const nj_sample *s, int n, const char *poses_path)
{
    nj_loader_config c;
    char err[512];
    pair_config(&c, 1, 0);
    nj_loader *L = nj_loader_create(ds, s, n, &c, err, sizeof err);
    const nj_batch *b = L ? nj_loader_next(L, err, sizeof err) : NULL;
    double *poses = NULL;
    int np = nj_poses_read(poses_path, &poses, err, sizeof err);
    if (!b || np <= 0) { check(0, "loader_flip_geometry", "%s", err); nj_loader_destroy(L); free(poses); return; }
    const nj_sample *q = &s[b->sample[0]];
    const nj_sequence *sq = &ds->seq[q->seq];
    float *d = flipped_depth(sq, q->target);
    size_t m = (size_t)3 * SW * SH;
    double Ts[12] = {1, 0, 0, b->stereo_tx[0], 0, 1, 0, 0, 0, 0, 1, 0}, Tw[12] = {1, 0, 0, -b->stereo_tx[0], 0, 1, 0, 0, 0, 0, 1, 0};
    double es = warp(b->target, d, b->partner, Ts, b->camera[0]), ew = warp(b->target, d, b->partner, Tw, b->camera[0]);
    double Tt[12];
    mirrored_relative(poses + 12 * q->target, poses + 12 * q->src[1], Tt);
    double et = warp(b->target, d, b->sources + m, Tt, b->camera[0]);
    float *src = malloc(sizeof(float) * m);                          /* the source left unflipped: wrong */
    memcpy(src, b->sources + m, sizeof(float) * m);
    flip_plane(src, 3, SW, SH);
    double eu = warp(b->target, d, src, Tt, b->camera[0]);
    free(src);
    printf("info: flipped stereo warp %.4f (unswapped side %.4f), flipped temporal warp %.4f (source unflipped %.4f)\n",
           es, ew, et, eu);
    check(b->flipped[0] && fabsf(b->stereo_tx[0] - sq->baseline) < 1e-6f && es < 0.02 && ew > 2 * es,
          "loader_flip_swaps_stereo_side", "stereo_tx %g, error %.4f vs %.4f", b->stereo_tx[0], es, ew);
    check(fabsf(b->camera[0].cx - (SW - 1 - sq->camera.cx)) < 1e-5f && et < 0.02 && eu > 2 * et,
          "loader_flip_mirrors_cx_and_motion", "cx %g, temporal error %.4f (source unflipped %.4f)", b->camera[0].cx, et, eu);
    free(d);
    free(poses);
    nj_loader_destroy(L);
}

/* R·T, R = exp([k·rot]×) (Rodrigues): the pose that explains a source turned
 * by the rotation vector rot when k = 1 (data/augment.h). */
static void turned_pose(const double T[12], const float rot[3], double k, double out[12])
{
    double w[3] = {k * rot[0], k * rot[1], k * rot[2]}, th = sqrt(w[0] * w[0] + w[1] * w[1] + w[2] * w[2]);
    double a[3] = {w[0] / th, w[1] / th, w[2] / th}, c = cos(th), s = sin(th), R[9];
    for (int i = 0; i < 3; i++)
        for (int j = 0; j < 3; j++) R[3 * i + j] = (i == j ? c : 0) + (1 - c) * a[i] * a[j];
    R[1] -= s * a[2], R[2] += s * a[1], R[3] += s * a[2], R[5] -= s * a[0], R[6] -= s * a[1], R[7] += s * a[0];
    for (int i = 0; i < 3; i++)
        for (int j = 0; j < 4; j++) out[4 * i + j] = R[3 * i] * T[j] + R[3 * i + 1] * T[4 + j] + R[3 * i + 2] * T[8 + j];
}

/* With colour jitter: the turned loader's input copies against the plain
 * loader's jittered ones turned by the recorded yaws. */
static void test_turn_with_jitter(const nj_dataset *ds, const nj_sample *s, int n)
{
    nj_loader_config c;
    char err[512];
    pair_config(&c, 0, 1);
    c.seed = 5;
    nj_loader *plain = nj_loader_create(ds, s, n, &c, err, sizeof err);
    c.turn_deg = 3.0f;
    nj_loader *L = nj_loader_create(ds, s, n, &c, err, sizeof err);
    const nj_batch *b = L ? nj_loader_next(L, err, sizeof err) : NULL, *p = plain ? nj_loader_next(plain, err, sizeof err) : NULL;
    double worst = INFINITY, moved = 0;
    if (b && p && b->turn) {
        size_t m = (size_t)3 * SW * SH;
        float *t = malloc(sizeof(float) * m);
        worst = 0;
        for (int i = 0; i < b->n; i++)
            for (int k = 0; k < b->nsrc; k++) {
                size_t o = ((size_t)i * b->nsrc + k) * m;
                nj_turn_planes(p->sources_in + o, t, 3, SW, SH, p->camera[i], b->turn + ((size_t)i * b->nsrc + k) * 3);
                double e = 0, e0 = 0;
                for (size_t q = 0; q < m; q++) {
                    e += fabsf(t[q] - b->sources_in[o + q]);
                    e0 += fabsf(p->sources_in[o + q] - b->sources_in[o + q]);
                }
                worst = fmax(worst, e / (double)m);
                moved = fmax(moved, e0 / (double)m);
            }
        free(t);
        worst = memcmp(b->target_in, p->target_in, m * b->n * 4) ? INFINITY : worst;
    }
    checkv(worst < 1e-3 && moved > 10 * worst, "loader_turn_with_jitter",
          "mean |input - turned jittered frame| %.2e (the unturned one %.2e), same jittered targets", worst, moved);
    nj_loader_destroy(L);
    nj_loader_destroy(plain);
}

static void test_turn_geometry(const nj_dataset *ds, const nj_sample *s, int n, const char *poses_path)
{
    nj_loader_config c;
    char err[512];
    pair_config(&c, 1, 0);
    nj_loader *plain = nj_loader_create(ds, s, n, &c, err, sizeof err);
    c.turn_deg = 8.0f;
    c.roll_deg = 6.0f;
    nj_loader *L = nj_loader_create(ds, s, n, &c, err, sizeof err);
    c.turn_deg = 10.5f;
    char bad[512] = "", bad2[512] = "";
    nj_loader *over = nj_loader_create(ds, s, n, &c, bad, sizeof bad);
    c.turn_deg = 8.0f;
    c.roll_deg = 11.0f;
    nj_loader *over2 = nj_loader_create(ds, s, n, &c, bad2, sizeof bad2);
    check(!over && !over2 && strstr(bad, "turn") && strstr(bad2, "roll"), "loader_turn_range",
          "a turn of 10.5 degrees: %s; a roll of 11: %s", over ? "accepted" : bad, over2 ? "accepted" : bad2);
    nj_loader_destroy(over);
    nj_loader_destroy(over2);
    const nj_batch *b = L ? nj_loader_next(L, err, sizeof err) : NULL, *p = plain ? nj_loader_next(plain, err, sizeof err) : NULL;
    double *poses = NULL;
    int np = nj_poses_read(poses_path, &poses, err, sizeof err);
    if (!b || !p || np <= 0 || !b->turn) {
        check(0, "loader_turn_geometry", "%s", err);
        nj_loader_destroy(L);
        nj_loader_destroy(plain);
        free(poses);
        return;
    }
    size_t m = (size_t)3 * SW * SH, srcf = m * b->n * b->nsrc;
    const nj_sample *q = &s[b->sample[0]];
    float *d = flipped_depth(&ds->seq[q->seq], q->target);
    int j = hypotf(b->turn[1], b->turn[2]) > hypotf(b->turn[4], b->turn[5]) ? 0 : 1;   /* item 0's more turned source */
    const float *rot = b->turn + 3 * j;
    double Tt[12], Tr[12], Tw[12], yaw = rot[1], roll = rot[2];
    mirrored_relative(poses + 12 * q->target, poses + 12 * q->src[j], Tt);
    turned_pose(Tt, rot, 1, Tr);
    turned_pose(Tt, rot, -1, Tw);
    const float rot_m[3] = {rot[0], rot[1], -rot[2]};   /* the roll mirrored */
    double Tm[12];
    turned_pose(Tt, rot_m, 1, Tm);
    const float *src = b->sources_in + j * m;
    double er = warp(b->target, d, src, Tr, b->camera[0]), et = warp(b->target, d, src, Tt, b->camera[0]);
    double ew = warp(b->target, d, src, Tw, b->camera[0]), es = warp(b->target, d, b->sources + j * m, Tt, b->camera[0]);
    double em = warp(b->target, d, src, Tm, b->camera[0]);
    printf("info: source turned by yaw %.3f, roll %.3f deg: warp with R*T %.4f, with T %.4f, with the opposite turn "
           "%.4f, with the roll mirrored %.4f; recorded source with T %.4f\n", yaw * 180 / M_PI, roll * 180 / M_PI, er, et,
           ew, em, es);
    int inside = 1, turned = 0, rolled = 0;
    for (int k = 0; k < b->n * b->nsrc; k++) {
        const float *r = b->turn + 3 * k;
        inside &= r[0] == 0 && fabsf(r[1]) <= 8.0f * (float)M_PI / 180 && fabsf(r[2]) <= 6.0f * (float)M_PI / 180;
        turned += fabsf(r[1]) > 0.1f * (float)M_PI / 180;
        rolled += fabsf(r[2]) > 0.1f * (float)M_PI / 180;
    }
    check(inside && turned > 0 && rolled > 0 && hypot(yaw, roll) > 2 * M_PI / 180 && er < 0.02 && et > 1.5 * er &&
          ew > 2 * er && em > 1.3 * er && fabs(er - es) < 0.01,
          "loader_turn_explained_by_turned_pose", "yaw %.3f, roll %.3f deg, errors R*T %.4f, T %.4f, opposite %.4f, "
          "roll mirrored %.4f, recorded %.4f; %d of %d turned, %d rolled", yaw * 180 / M_PI, roll * 180 / M_PI, er, et, ew, em, es, turned,
          b->n * b->nsrc, rolled);
    check(p->turn == NULL && p->sources_in == p->sources && !memcmp(b->sources, p->sources, srcf * 4) &&
          memcmp(b->sources_in, b->sources, srcf * 4) && !memcmp(b->target, p->target, m * b->n * 4) &&
          !memcmp(b->camera, p->camera, sizeof(nj_camera) * b->n) && !memcmp(b->sample, p->sample, sizeof(int) * b->n) &&
          !memcmp(b->flipped, p->flipped, sizeof(int) * b->n),
          "loader_turn_keeps_the_recorded_batch", "the turned loader's recorded frames, targets or draws differ from a plain one's");
    free(d);
    free(poses);
    nj_loader_destroy(L);
    nj_loader_destroy(plain);
    test_turn_with_jitter(ds, s, n);
}

/* Least-squares gain g of copy ≈ g·ref over the pixels the copy did not clamp,
 * and the residual's standard deviation. */
static void fit_gain(const float *ref, const float *copy, size_t m, double *gain, double *spread)
{
    double sxy = 0, sxx = 0, r2 = 0;
    size_t k = 0;
    for (size_t q = 0; q < m; q++)
        if (copy[q] > 0.02f && copy[q] < 0.98f) sxy += (double)ref[q] * copy[q], sxx += (double)ref[q] * ref[q];
    *gain = sxx > 0 ? sxy / sxx : 0;
    for (size_t q = 0; q < m; q++)
        if (copy[q] > 0.02f && copy[q] < 0.98f) {
            double e = copy[q] - *gain * ref[q];
            r2 += e * e;
            k++;
        }
    *spread = k ? sqrt(r2 / k) : INFINITY;
}

static void test_rotated_copy(const nj_dataset *ds, const nj_sample *s, int n)
{
    nj_loader_config c;
    char err[512], bad[512] = "";
    pair_config(&c, 1, 1);
    c.seed = 7;
    c.turn_deg = 2.0f;
    nj_loader_config with = c, wide = c;
    with.rotated = wide.rotated = 1;
    with.rotated_deg = 4.0f;
    wide.rotated_deg = NJ_TURN_MAX_DEG + 0.5f;
    nj_loader *plain = nj_loader_create(ds, s, n, &c, err, sizeof err), *L = nj_loader_create(ds, s, n, &with, err, sizeof err);
    nj_loader *over = nj_loader_create(ds, s, n, &wide, bad, sizeof bad);
    check(!over && strstr(bad, "rotated"), "loader_rotated_range", "a rotated copy turned by %g degrees: %s",
          (double)wide.rotated_deg, over ? "accepted" : bad);
    nj_loader_destroy(over);
    const nj_batch *b = L ? nj_loader_next(L, err, sizeof err) : NULL, *p = plain ? nj_loader_next(plain, err, sizeof err) : NULL;
    if (!b || !p || !b->rotated || !b->rotated_by || p->rotated) {
        check(0, "loader_rotated_copy", "%s", err);
        nj_loader_destroy(L);
        nj_loader_destroy(plain);
        return;
    }
    size_t m = (size_t)3 * SW * SH, srcf = m * b->n * b->nsrc;
    float *t = malloc(sizeof(float) * m);
    int inside = 1, turned = 0, fits = 1;
    double worst_gain = 0, worst_spread = 0, best_other = INFINITY;
    for (int i = 0; i < b->n; i++) {
        const float *rot = b->rotated_by + 3 * i;
        for (int a = 0; a < 3; a++) {
            inside &= fabsf(rot[a]) <= 4.0f * (float)M_PI / 180;
            turned += fabsf(rot[a]) > 0.5f * (float)M_PI / 180;
        }
        double g, sd, g0, sd0, gw, sdw;
        nj_turn_planes(b->target_in + i * m, t, 3, SW, SH, b->camera[i], rot);
        fit_gain(t, b->rotated + i * m, m, &g, &sd);
        fit_gain(b->target_in + i * m, b->rotated + i * m, m, &g0, &sd0);
        const float opposite[3] = {-rot[0], -rot[1], -rot[2]};
        nj_turn_planes(b->target_in + i * m, t, 3, SW, SH, b->camera[i], opposite);
        fit_gain(t, b->rotated + i * m, m, &gw, &sdw);
        printf("info: rotated copy %d: rotation (%.2f, %.2f, %.2f) deg, gain %.4f, residual %.4f; unturned %.4f, "
               "opposite %.4f\n", i, rot[0] * 180 / M_PI, rot[1] * 180 / M_PI, rot[2] * 180 / M_PI, g, sd, sd0, sdw);
        worst_gain = fmax(worst_gain, fabs(g - 1));
        worst_spread = fmax(worst_spread, sd);
        best_other = fmin(best_other, fmin(sd0, sdw));
        fits &= sd0 > 3 * sd && sdw > 3 * sd;
    }
    free(t);
    check(inside && turned > 0 && fits && worst_gain <= NJ_ROTATED_GAIN + 1e-3 && worst_spread <= NJ_ROTATED_NOISE * 1.1 + 1e-3,
          "loader_rotated_copy_is_the_input_turned_with_gain_and_noise",
          "gain off 1 by up to %.4f (limit %.2f), residual up to %.4f (noise limit %.3f), unturned or opposite fit "
          "%.4f at best; %d components beyond 0.5 deg, all within range %d",
          worst_gain, (double)NJ_ROTATED_GAIN, worst_spread, (double)NJ_ROTATED_NOISE, best_other, turned, inside);
    check(!memcmp(b->target, p->target, m * b->n * 4) && !memcmp(b->target_in, p->target_in, m * b->n * 4) &&
          !memcmp(b->sources, p->sources, srcf * 4) && !memcmp(b->sources_in, p->sources_in, srcf * 4) &&
          !memcmp(b->turn, p->turn, sizeof(float) * 3 * b->n * b->nsrc) &&
          !memcmp(b->camera, p->camera, sizeof(nj_camera) * b->n) && !memcmp(b->sample, p->sample, sizeof(int) * b->n) &&
          !memcmp(b->flipped, p->flipped, sizeof(int) * b->n),
          "loader_rotated_copy_keeps_the_batch", "with the rotated copy the frames, input copies, turns or draws differ");
    nj_loader_destroy(L);
    nj_loader_destroy(plain);
    /* the lesson over (rotated_until): from that step on no copy is made */
    with.rotated_until = with.start_step = 1;
    nj_loader *ended = nj_loader_create(ds, s, n, &with, err, sizeof err);
    const nj_batch *e = ended ? nj_loader_next(ended, err, sizeof err) : NULL;
    int blank = e && e->rotated && e->step == 1;
    for (size_t q = 0; blank && q < m * e->n; q++) blank = e->rotated[q] == 0;
    for (int q = 0; blank && q < 3 * e->n; q++) blank = e->rotated_by[q] == 0;
    check(blank, "loader_rotated_copy_ends", "from rotated_until on the copies stay unmade (%s)", e ? "made" : err);
    nj_loader_destroy(ended);
}

/* Offsets {1, 3} on the 10-frame sequence (no duplicates skipped): targets
 * 3..6, sources in offset order; the batch's four source planes per item are
 * the named frames (the frame the loader makes is the decoded, resized file:
 * test_clean_and_camera). */
static void test_multi_offsets(const char *json)
{
    nj_data_options o;
    nj_data_options_default(&o);
    o.dup_threshold = 0;
    o.stereo = 0;
    o.offsets[0] = 1;
    o.offsets[1] = 3;
    o.noffsets = 2;
    nj_dataset ds;
    nj_sample *s = NULL;
    int n = 0;
    open_dataset_with(json, &o, &ds, &s, &n);
    int order = n == 4;
    for (int i = 0; order && i < n; i++) {
        int t = 3 + i;
        order = s[i].target == t && s[i].nsrc == 4 && s[i].src[0] == t - 1 && s[i].src[1] == t + 1 &&
                s[i].src[2] == t - 3 && s[i].src[3] == t + 3;
    }
    check(order, "loader_offsets_1_3_samples", "%d samples; want 4 with targets 3..6 and sources t-1, t+1, t-3, t+3", n);
    nj_loader *L = order ? make(&ds, s, n, 5, 2, 0, 64, 48) : NULL;
    char err[512];
    const nj_batch *b = L ? nj_loader_next(L, err, sizeof err) : NULL;
    int ok = b && b->nsrc == 4;
    size_t img = (size_t)3 * 64 * 48;
    for (int i = 0; ok && i < b->n; i++)
        for (int j = 0; ok && j < 4; j++) {
            const nj_sample *q = &s[b->sample[i]];
            const nj_sequence *sq = &ds.seq[q->seq];
            nj_image im, r;
            char *path = nj_path_join(sq->images, sq->frames[q->src[j]]);
            ok = !nj_image_load(path, &im, err, sizeof err) && !nj_image_resize(&im, 64, 48, &r);
            free(path);
            if (!ok) break;
            if (b->flipped[i]) flip_plane(r.data, 3, 64, 48);
            ok = !memcmp(r.data, b->sources + ((size_t)i * 4 + j) * img, sizeof(float) * img);
            nj_image_free(&im);
            nj_image_free(&r);
        }
    check(ok, "loader_offsets_1_3_source_planes", "a source plane is not its frame decoded and resized");
    nj_loader_destroy(L);
    free(s);
    if (n > 0) nj_dataset_free(&ds);
}

static void test_missing_file(nj_dataset *ds, const nj_sample *s, int n)
{
    char err[512] = "", *path = nj_path_join(ds->seq[0].images, ds->seq[0].frames[s[0].target]);
    remove(path);
    nj_loader_config c;
    nj_loader_config_default(&c);
    c.batch = 1;
    c.width = 64;
    c.height = 48;
    nj_loader *L = nj_loader_create(ds, s, n, &c, err, sizeof err);
    int failed = 0;
    for (int step = 0; L && step < n && !failed; step++) failed = nj_loader_next(L, err, sizeof err) == NULL;
    check(failed && strstr(err, path), "loader_missing_file_reported", "err '%s'", err);
    nj_loader_destroy(L);
    free(path);
}

int main(void)
{
    if (tdu_tmpdir(dir, sizeof dir)) return 1;
    nj_synth_config sc;
    char out[256], json[300], poses[300], err[512];
    nj_synth_config_default(&sc);
    snprintf(out, sizeof out, "%s/synth", dir);
    sc.out = out;
    sc.frames = 10;
    sc.sequences = 1;
    sc.width = SW;
    sc.height = SH;
    sc.stereo = 1;
    sc.seed = 4;
    nj_dataset ds;
    nj_sample *s = NULL;
    int n = 0;
    snprintf(json, sizeof json, "%s/dataset.json", out);
    snprintf(poses, sizeof poses, "%s/yard-00/poses.txt", out);
    if (!check(!nj_synth_run(&sc, err, sizeof err) && !open_dataset(json, &ds, &s, &n), "loader_dataset_ready", "%s", err))
        return test_exit();
    test_determinism(&ds, s, n);
    test_shards(&ds, s, n);
    test_epoch(n);
    test_clean_and_camera(&ds, s, n);
    test_jitter_identical();
    test_flip_geometry(&ds, s, n, poses);
    test_turn_geometry(&ds, s, n, poses);
    test_rotated_copy(&ds, s, n);
    test_multi_offsets(json);
    test_missing_file(&ds, s, n);
    free(s);
    nj_dataset_free(&ds);
    tdu_rmtree(dir);
    return test_exit();
}

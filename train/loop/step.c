/* train/loop/step.c — the training recipe for one batch (see step.h). */
#include "train/loop/step.h"
#include "losses/pose.h"
#include "losses/free_space.h"
#include "train/loop/free_space.h"
#include <math.h>
#include <string.h>

/* Source j of every item, gathered into one N×3×H×W tensor. */
static nj_tensor *gather_source(nj_graph *g, const nj_batch *b, const float *all, int j)
{
    nj_tensor *t = nj_tensor_new(g, b->n, 3, b->h, b->w, 0);
    if (!t) return NULL;
    size_t img = (size_t)3 * b->h * b->w;
    for (int i = 0; i < b->n; i++)
        memcpy(t->data + i * img, all + ((size_t)i * b->nsrc + j) * img, img * sizeof(float));
    return t;
}

static nj_tensor *wrap(nj_graph *g, const nj_batch *b, float *data)
{
    return nj_tensor_wrap(g, b->n, 3, b->h, b->w, data, NULL);
}

static float mean_translation(const nj_tensor *v)
{
    double s = 0;
    for (int n = 0; n < v->n; n++) {
        const float *p = v->data + 6 * n + 3;
        s += sqrt((double)p[0] * p[0] + (double)p[1] * p[1] + (double)p[2] * p[2]);
    }
    return (float)(s / v->n);
}

/* The pose net saw source j turned by R (data.augment.turn_deg, roll_deg), so
 * its motion P stands for R·T; the loss warps the recorded frame with Rᵀ·P
 * (Rᵀ: the rotation vector negated).  Warping the turned frame with P instead
 * (the same geometry) cost depth: turning set, 1500 steps, seed 1, AbsRel
 * 0.1682 against 0.1534 this way (DEVELOPERS.md, "Training recipe"); the
 * recorded frame also keeps the auto-mask's un-warped comparison true for a
 * vehicle static in the image.  (The arc penalty would read P, turn and all:
 * the config refuses the two together.) */
static nj_tensor *unturned(nj_graph *g, const nj_batch *b, int j, nj_tensor *P)
{
    nj_tensor *v = nj_tensor_new(g, b->n, 6, 1, 1, 0);
    if (!v) return NULL;
    memset(v->data, 0, sizeof(float) * 6 * b->n);
    for (int i = 0; i < b->n; i++)
        for (int a = 0; a < 3; a++) v->data[6 * i + a] = -b->turn[((size_t)i * b->nsrc + j) * 3 + a];
    return nj_pose_compose(g, nj_pose_from_vec(g, v), P);
}

/* Temporal sources: pose net on (earlier, later) frame pairs; the pair with
 * the earlier source (even j: t−k) is inverted so every pose maps target →
 * source.  Several offsets give the pose net pairs of several frame gaps. */
/* Scale-free slips below this translation length count as standing still. */
#define SLIP_EPS 1e-3f

/* r->pace_near / pace_far (step.h) from the per-offset sums of mean |t|. */
static void paces(const nj_train_config *cfg, const float *sum, const int *count, nj_step_result *r)
{
    int near = -1, far = -1;
    for (int i = 0; i < cfg->noffsets; i++) {
        if (!count[i]) continue;
        if (near < 0 || cfg->offsets[i] < cfg->offsets[near]) near = i;
        if (far < 0 || cfg->offsets[i] > cfg->offsets[far]) far = i;
    }
    if (near < 0 || cfg->offsets[near] == cfg->offsets[far]) return;
    r->pace_near = sum[near] / (float)(count[near] * cfg->offsets[near]);
    r->pace_far = sum[far] / (float)(count[far] * cfg->offsets[far]);
}

static int add_video(nj_graph *g, nj_model *m, const nj_train_config *cfg, const nj_batch *b,
                     nj_tensor *tgt_in, nj_vs_input *in, nj_step_result *r, nj_tensor **slip)
{
    float t = 0, sum[NJ_MAX_OFFSETS] = {0};
    int count[NJ_MAX_OFFSETS] = {0};
    int widest = 0;
    for (int i = 0; i < cfg->noffsets; i++) widest = cfg->offsets[i] > widest ? cfg->offsets[i] : widest;
    for (int j = 0; j < b->nsrc && in->nsources < NJ_MAX_SOURCES; j++) {
        nj_tensor *src = gather_source(g, b, b->sources, j);
        nj_tensor *src_in = b->sources_in == b->sources ? src : gather_source(g, b, b->sources_in, j);
        int earlier = j % 2 == 0;
        nj_tensor *vec = earlier ? nj_pose_forward(g, m, src_in, tgt_in, b->camera)
                                 : nj_pose_forward(g, m, tgt_in, src_in, b->camera);
        nj_tensor *T = nj_pose_from_vec(g, vec);
        if (earlier) T = nj_pose_invert(g, T);
        if (cfg->loss.arc_motion > 0) {
            /* the yaw is taken as given: letting the penalty move it too pulled the
             * yaw to the pose net's spurious sideways translation (demo16, e8) */
            nj_tensor *s = nj_mean(g, nj_arc_slip(g, vec, SLIP_EPS, 1), NJ_AXIS_ALL);
            *slip = *slip ? nj_add(g, *slip, s) : s;
        }
        if (!T) return -1;
        float tj = mean_translation(vec);
        t += tj;
        if (j / 2 < cfg->noffsets) {
            sum[j / 2] += tj;
            count[j / 2]++;
        }
        /* auto-mask against the widest offset only (loss.automask_widest) */
        if (cfg->loss.automask_widest && j / 2 < cfg->noffsets && cfg->offsets[j / 2] < widest)
            in->mask_skip |= 1u << in->nsources;
        if (b->turn && !(T = unturned(g, b, j, T))) return -1;
        in->group[in->nsources] = (unsigned char)(j / 2);   /* t − k and t + k: offset k's group */
        in->sources[in->nsources] = src;
        in->poses[in->nsources++] = T;
    }
    r->translation = b->nsrc ? t / (float)b->nsrc : 0.0f;
    paces(cfg, sum, count, r);
    return 0;
}

/* The rotation lesson (loss.rotation_pairs): each target beside its rotated
 * copy (batch.h, data/augment.h) — no translation, a known rotation R — so the
 * pose net has pairs with an answer: R, read from the image alone, where no
 * place on a route can stand in for it.  Even items give the pair as (frame,
 * copy), odd ones as (copy, frame): the answer is then Rᵀ, the rotation
 * vector negated.  The penalty is the squared error of the rotation vector's
 * components in degrees, mean over items and components; the translation is
 * left free.  Telling the pose net the copy's translation is 0 as well (the
 * squared translation over the real pairs' mean, scale-free) cost depth and
 * did not teach it to see a stopped camera (turning set, seed 1: AbsRel 0.168
 * against 0.156 without it; a stopped pair's predicted translation 1.32× a
 * moving one's against 0.97×: the rotated copy does not look like a real
 * stopped pair).  Returns the penalty (1×1×1×1). */
static nj_tensor *rotation_lesson(nj_graph *g, nj_model *m, const nj_batch *b, nj_tensor *tgt_in)
{
    size_t img = (size_t)3 * b->h * b->w;
    nj_tensor *first = nj_tensor_new(g, b->n, 3, b->h, b->w, 0), *second = nj_tensor_new(g, b->n, 3, b->h, b->w, 0);
    nj_tensor *goal = nj_tensor_new(g, b->n, 3, 1, 1, 0);
    if (!first || !second || !goal) return NULL;
    for (int i = 0; i < b->n; i++) {
        int swap = i % 2;
        memcpy(first->data + i * img, swap ? b->rotated + i * img : tgt_in->data + i * img, img * sizeof(float));
        memcpy(second->data + i * img, swap ? tgt_in->data + i * img : b->rotated + i * img, img * sizeof(float));
        for (int a = 0; a < 3; a++) goal->data[3 * i + a] = swap ? -b->rotated_by[3 * i + a] : b->rotated_by[3 * i + a];
    }
    nj_tensor *d = nj_sub(g, nj_slice_channels(g, nj_pose_forward(g, m, first, second, b->camera), 0, 3), goal);
    return nj_affine(g, nj_mean(g, nj_mul(g, d, d), NJ_AXIS_ALL), (float)(180 / M_PI * 180 / M_PI), 0.0f);
}

static int add_stereo(nj_graph *g, const nj_batch *b, nj_vs_input *in)
{
    for (int i = 0; i < b->n; i++)
        if (!b->has_partner[i]) {
            nj_graph_fail(g, "training batch item %d has no stereo partner", i);
            return -1;
        }
    in->group[in->nsources] = (unsigned char)(in->nsources ? in->group[in->nsources - 1] + 1 : 0);
    in->sources[in->nsources] = wrap(g, b, b->partner);
    in->poses[in->nsources++] = nj_pose_stereo(g, b->n, b->stereo_tx);
    return nj_graph_failed(g) ? -1 : 0;
}

/* The free-space hinge (losses/free_space.h) on the scale-0 disparity, bounded
 * by each item's own ground plane (train/loop/free_space.h). */
static nj_tensor *free_space_term(nj_graph *g, const nj_vs_input *in, float margin, float reach, float *share)
{
    nj_tensor *d = in->disp[0];
    size_t plane = (size_t)d->h * d->w;
    float *bound = nj_graph_alloc(g, sizeof(float) * (size_t)d->n * plane);
    float *scratch = nj_graph_alloc(g, sizeof(float) * plane * 3);
    if (!bound || !scratch || nj_free_space_bounds(d, in->depth_range, in->cams, margin, reach, scratch, bound) < 0)
        return nj_graph_fail(g, "free_space: out of memory");
    return nj_free_space_loss(g, d, in->depth_range, bound, share);
}

static float saturation_share(const nj_tensor *d)
{
    size_t k = nj_numel(d), s = 0;
    for (size_t i = 0; i < k; i++) s += d->data[i] < 1e-3f || d->data[i] > 0.999f;
    return (float)s / (float)k;
}

/* Auto-masking waits for automask_from: far structure first learns from every
 * pixel (DEVELOPERS.md, "Training recipe").  The arc penalty waits for
 * arc_motion_from: from the first step it turned a turning-set run to inverted
 * depth (its scale-free slip of the first steps' near-zero, random
 * translations is noise). */
const nj_train_config *nj_step_config(const nj_train_config *cfg, long step, nj_train_config *tmp)
{
    int mask_waits = cfg->loss.automask && step < cfg->automask_from;
    int arc_waits = cfg->loss.arc_motion > 0 && step < cfg->arc_motion_from;
    int lesson_over = cfg->rotation_pairs > 0 && cfg->rotation_pairs_until > 0 && step >= cfg->rotation_pairs_until;
    int free_waits = cfg->free_space > 0 && step < cfg->free_space_from;
    if (!mask_waits && !arc_waits && !lesson_over && !free_waits) return cfg;
    *tmp = *cfg;
    if (mask_waits) tmp->loss.automask = 0;
    if (arc_waits) tmp->loss.arc_motion = 0;
    if (lesson_over) tmp->rotation_pairs = 0;
    if (free_waits) tmp->free_space = 0;
    return tmp;
}

void nj_step_figures(nj_step_result *r, float *out[NJ_STEP_FIGURES])
{
    float *f[NJ_STEP_FIGURES] = {&r->loss, &r->photometric, &r->smoothness, &r->mask_fraction, &r->saturated,
                                 &r->translation, &r->rotation_lesson, &r->free_space, &r->pace_near,
                                 &r->pace_far};
    memcpy(out, f, sizeof f);
}

int nj_train_step(nj_graph *g, nj_model *m, const nj_train_config *cfg, const nj_batch *b,
                  nj_rng *rng, int backward, nj_step_result *r)
{
    memset(r, 0, sizeof *r);
    nj_vs_input in;
    memset(&in, 0, sizeof in);
    nj_tensor *tgt_in = wrap(g, b, b->target_in);
    in.target = wrap(g, b, b->target);
    in.cams = b->camera;
    in.rng = rng;
    in.nscales = m->cfg.scales;
    in.depth_range = m->cfg.depth_range;   /* the model's own: a resumed run keeps its checkpoint's */
    if (nj_depth_forward(g, m, tgt_in, in.disp)) return -1;
    nj_tensor *slip = NULL;
    if (cfg->video && b->nsrc > 0 && add_video(g, m, cfg, b, tgt_in, &in, r, &slip)) return -1;
    if (cfg->stereo && b->stereo && add_stereo(g, b, &in)) return -1;
    if (in.nsources == 0) {
        nj_graph_fail(g, "training batch has no source frame (check frame_offsets / stereo settings)");
        return -1;
    }
    nj_vs_output out;
    if (nj_view_synthesis_loss(g, &cfg->loss, &in, &out)) return -1;
    if (slip) out.total = nj_add(g, out.total, nj_affine(g, slip, cfg->loss.arc_motion / (float)b->nsrc, 0.0f));
    if (cfg->rotation_pairs > 0 && b->rotated) {
        nj_tensor *st = rotation_lesson(g, m, b, tgt_in);
        if (!st) return -1;
        r->rotation_lesson = st->data[0];
        out.total = nj_add(g, out.total, nj_affine(g, st, cfg->rotation_pairs, 0.0f));
    }
    if (cfg->free_space > 0) {
        nj_tensor *fs = free_space_term(g, &in, cfg->free_space_margin, cfg->free_space_reach, &r->free_space);
        if (!fs) return -1;
        out.total = nj_add(g, out.total, nj_affine(g, fs, cfg->free_space, 0.0f));
    }
    if (nj_graph_failed(g)) return -1;
    r->loss = out.total->data[0];
    r->photometric = out.photometric;
    r->smoothness = out.smoothness;
    r->mask_fraction = out.mask_fraction;
    r->saturated = saturation_share(in.disp[0]);
    r->disp0 = in.disp[0];
    r->automask = out.automask;
    r->error = out.error;
    if (backward && nj_backward(g, out.total)) return -1;
    return 0;
}

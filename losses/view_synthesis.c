/* losses/view_synthesis.c — multi-scale photometric + smoothness loss with
 * per-pixel minimum and auto-masking (see view_synthesis.h). */
#include "losses/view_synthesis.h"
#include "losses/depth.h"
#include "losses/photometric.h"
#include "losses/reproject.h"
#include "losses/sample.h"
#include "losses/smooth.h"
#include "nn/ops.h"
#include <math.h>
#include <string.h>

/* Errors at or above this mark a pixel whose warp left the source view. */
#define OUTSIDE_PENALTY 1e3f

void nj_vs_config_default(nj_vs_config *cfg)
{
    cfg->alpha = 0.85f;
    cfg->smooth_weight = 1e-3f;
    cfg->automask = 1;
    cfg->tie_break = 1e-5f;
    cfg->saturation_guard = 0.0f;
    cfg->gain_match = 0;
    cfg->arc_motion = 0.0f;
    cfg->each_offset = 0;
}

/* Logit magnitude beyond which the saturation guard pushes back. */
#define GUARD_LOGIT 6.0f

/* Saturation guard: weight · mean(relu(−log d − G) + relu(−log(1 − d) − G)),
 * G = GUARD_LOGIT.  A sigmoid disparity driven deep into a bound (the sky
 * towards 0) has a vanishing derivative, and every region sharing its
 * features is trapped there with it.  −log d ≈ −logit for small d, so the
 * guard's gradient does not vanish: it holds logits near ±G, where the
 * photometric gradient still reaches them (σ' ≥ 0.0025). */
static nj_tensor *saturation_guard(nj_graph *g, const nj_vs_config *cfg, nj_tensor *d)
{
    const float tiny = 1e-30f;
    nj_tensor *lo = nj_relu(g, nj_affine(g, nj_log(g, nj_clamp(g, d, tiny, 1.0f)), -1.0f, -GUARD_LOGIT));
    nj_tensor *far = nj_clamp(g, nj_affine(g, d, -1.0f, 1.0f), tiny, 1.0f);
    nj_tensor *hi = nj_relu(g, nj_affine(g, nj_log(g, far), -1.0f, -GUARD_LOGIT));
    return nj_affine(g, nj_mean(g, nj_add(g, lo, hi), NJ_AXIS_ALL), cfg->saturation_guard, 0.0f);
}

/* Gains beyond this factor are not exposure changes but scene changes. */
#define GAIN_LIMIT 1.5f

/* src · clamp(mean(target)/mean(src)) per item; a constant (no gradient):
 * sources are data. */
static nj_tensor *gain_matched(nj_graph *g, nj_tensor *src, const nj_tensor *tgt)
{
    nj_tensor *out = nj_tensor_new(g, src->n, src->c, src->h, src->w, 0);
    if (!out) return NULL;
    size_t k = (size_t)src->c * src->h * src->w;
    for (int n = 0; n < src->n; n++) {
        const float *a = src->data + n * k, *t = tgt->data + n * k;
        double sa = 0, st = 0;
        for (size_t i = 0; i < k; i++) { sa += a[i]; st += t[i]; }
        float gain = sa > 0 ? (float)(st / sa) : 1.0f;
        gain = gain < 1.0f / GAIN_LIMIT ? 1.0f / GAIN_LIMIT : gain > GAIN_LIMIT ? GAIN_LIMIT : gain;
        float *o = out->data + n * k;
        for (size_t i = 0; i < k; i++) o[i] = a[i] * gain;
    }
    return out;
}

/* Minimum of the un-warped (identity) error over the sources not in `skip`,
 * with tie-break noise. */
static nj_tensor *identity_min(nj_graph *g, const nj_vs_config *cfg, const nj_vs_input *in, unsigned skip)
{
    int grad_was = nj_graph_grad_enabled(g);
    nj_graph_set_grad(g, 0);  /* depends on no parameter */
    nj_tensor *m = NULL;
    for (int s = 0; s < in->nsources; s++) {
        if (skip & (1u << s)) continue;
        nj_tensor *pe = nj_photometric_error(g, in->sources[s], in->target, cfg->alpha);
        m = m ? nj_minimum(g, m, pe) : pe;
    }
    nj_graph_set_grad(g, grad_was);
    if (m && in->rng && cfg->tie_break > 0) {
        size_t k = nj_numel(m);
        const nj_replicas *r = nj_graph_replicas(g);
        /* with replicas (equal shares of the batch), shard i gets the noise a
         * single process gets at its items, and every shard's generator
         * advances as the single process's does */
        nj_rng_add_normals(in->rng, m->data, k, r ? (uint64_t)k * (uint64_t)r->rank : 0,
                           cfg->tie_break);
    }
    return m;
}

/* (1 − valid)·penalty: pushes out-of-view pixels out of the minimum. */
static nj_tensor *outside_penalty(nj_graph *g, nj_tensor *valid)
{
    if (!valid) return NULL;
    nj_tensor *p = nj_tensor_new(g, valid->n, 1, valid->h, valid->w, 0);
    if (!p) return NULL;
    size_t k = nj_numel(p);
    for (size_t i = 0; i < k; i++) p->data[i] = (1.0f - valid->data[i]) * OUTSIDE_PENALTY;
    return p;
}

/* Per-pixel minimum of the warped error at one scale over the sources in `set` (a bit each). */
static nj_tensor *reprojection_min(nj_graph *g, const nj_vs_config *cfg,
                                   const nj_vs_input *in, nj_tensor *depth, unsigned set)
{
    nj_tensor *m = NULL;
    for (int s = 0; s < in->nsources; s++) {
        if (!(set >> s & 1u)) continue;
        nj_tensor *valid = NULL;
        nj_tensor *coords = nj_reproject(g, depth, in->poses[s], in->cams, &valid);
        nj_tensor *warped = nj_sample_bilinear(g, in->sources[s], coords);
        nj_tensor *pe = nj_add(g, nj_photometric_error(g, warped, in->target, cfg->alpha),
                               outside_penalty(g, valid));
        m = m ? nj_minimum(g, m, pe) : pe;
    }
    return m;
}

/* 1 where the warped error is usable and (with auto-masking) beats identity. */
static nj_tensor *make_mask(nj_graph *g, nj_tensor *reproj, nj_tensor *ident, float *count)
{
    nj_tensor *mask = nj_tensor_new(g, reproj->n, 1, reproj->h, reproj->w, 0);
    if (!mask) return NULL;
    size_t k = nj_numel(mask);
    double c = 0;
    for (size_t i = 0; i < k; i++) {
        int use = reproj->data[i] < OUTSIDE_PENALTY && (!ident || reproj->data[i] < ident->data[i]);
        mask->data[i] = (float)use;
        c += use;
    }
    *count = (float)c;
    return mask;
}

/* The photometric mean's factor 1 / (pixels used).  With replicas each
 * shard's loss is count × (its sum) / (pixels used by all shards), so the mean
 * of the shards' losses (and gradients) is the whole batch's. */
static float photo_norm(nj_graph *g, float used)
{
    const nj_replicas *r = nj_graph_replicas(g);
    if (!r) return 1.0f / (used > 1 ? used : 1.0f);
    double all = used;
    if (nj_graph_replica_sum(g, &all, 1, "view_synthesis_loss")) return 0.0f;
    return (float)(r->count / (all > 1 ? all : 1.0));
}

/* Sources of group k as a bit set; sources outside every group's range are in none. */
static unsigned group_sources(const nj_vs_input *in, int k)
{
    unsigned set = 0;
    for (int s = 0; s < in->nsources; s++) set |= in->group[s] == k ? 1u << s : 0u;
    return set;
}

/* The photometric term of one scale with each_offset: per group, the
 * per-pixel minimum over its sources, masked against its own un-warped
 * minimum (ident[k]); the mean over every used (pixel, group) term. */
static nj_tensor *groups_photo(nj_graph *g, const nj_vs_config *cfg, const nj_vs_input *in, int s,
                               nj_tensor *depth, nj_tensor *const *ident, int ngroups, nj_vs_output *out)
{
    nj_tensor *sum = NULL, *any = NULL, *emin = NULL;
    float used = 0;
    for (int k = 0; k < ngroups; k++) {
        unsigned set = group_sources(in, k);
        if (!set) continue;
        nj_tensor *m = reprojection_min(g, cfg, in, depth, set);
        if (!m) return NULL;
        float u = 0;
        nj_tensor *mask = make_mask(g, m, ident[k], &u);
        if (!mask) return NULL;
        used += u;
        nj_tensor *term = nj_sum(g, nj_mul(g, m, mask), NJ_AXIS_ALL);
        sum = sum ? nj_add(g, sum, term) : term;
        if (s == 0) {   /* for the log and the health monitor: used by any group, the smallest error */
            int first = !any;
            if (first && !(any = nj_tensor_new(g, mask->n, 1, mask->h, mask->w, 0))) return NULL;
            for (size_t i = 0; i < nj_numel(any); i++)
                any->data[i] = first ? mask->data[i] : fmaxf(any->data[i], mask->data[i]);
            emin = emin ? nj_minimum(g, emin, m) : m;
        }
    }
    if (s == 0 && any) {
        out->automask = any;
        out->error = emin;
        out->mask_fraction = used / (float)(nj_numel(any) * (size_t)ngroups);
    }
    return nj_affine(g, sum, photo_norm(g, used), 0.0f);
}

static nj_tensor *scale_loss(nj_graph *g, const nj_vs_config *cfg, const nj_vs_input *in,
                             int s, nj_tensor *const *ident, int ngroups, nj_tensor *img,
                             nj_vs_output *out, float *photo, float *smooth)
{
    nj_tensor *t = in->target, *d = in->disp[s];
    nj_tensor *up = (d->h == t->h && d->w == t->w) ? d : nj_resize_bilinear(g, d, t->h, t->w);
    nj_tensor *depth = nj_depth_from_disparity(g, up, in->depth_range), *pl;
    if (cfg->each_offset) {
        pl = groups_photo(g, cfg, in, s, depth, ident, ngroups, out);
    } else {
        nj_tensor *rmin = reprojection_min(g, cfg, in, depth, (1u << in->nsources) - 1);
        if (!rmin) return NULL;
        float used = 0;
        nj_tensor *mask = make_mask(g, rmin, ident[0], &used);
        pl = nj_affine(g, nj_sum(g, nj_mul(g, rmin, mask), NJ_AXIS_ALL), photo_norm(g, used), 0.0f);
        if (s == 0) {
            out->automask = mask;
            out->error = rmin;
            out->mask_fraction = used / (float)nj_numel(mask);
        }
    }
    nj_tensor *sl = nj_affine(g, nj_edge_smoothness(g, d, img), cfg->smooth_weight / (float)(1 << s), 0.0f);
    if (!pl || !sl) return NULL;
    *photo = pl->data[0];
    *smooth = sl->data[0];
    return nj_add(g, pl, sl);
}

/* Target image at each disparity scale, by successive resizing: for even
 * sizes each halving is an exact 2×2 average. */
static int image_pyramid(nj_graph *g, const nj_vs_input *in, nj_tensor **img)
{
    int grad_was = nj_graph_grad_enabled(g);
    nj_graph_set_grad(g, 0);
    img[0] = in->target;
    for (int s = 0; s < in->nscales; s++) {
        nj_tensor *prev = s ? img[s - 1] : in->target, *d = in->disp[s];
        if (!d) { nj_graph_fail(g, "view_synthesis_loss: disparity scale %d missing", s); break; }
        img[s] = (d->h == prev->h && d->w == prev->w) ? prev : nj_resize_bilinear(g, prev, d->h, d->w);
    }
    nj_graph_set_grad(g, grad_was);
    return nj_graph_failed(g) ? -1 : 0;
}

int nj_view_synthesis_loss(nj_graph *g, const nj_vs_config *cfg,
                           const nj_vs_input *in, nj_vs_output *out)
{
    memset(out, 0, sizeof *out);
    if (nj_graph_failed(g)) return -1;
    if (in->nsources < 1 || in->nsources > NJ_MAX_SOURCES || in->nscales < 1 ||
        in->nscales > NJ_MAX_SCALES || !in->target) {
        nj_graph_fail(g, "view_synthesis_loss: need a target, 1..%d sources and 1..%d scales (got %d, %d)",
                      NJ_MAX_SOURCES, NJ_MAX_SCALES, in->nsources, in->nscales);
        return -1;
    }
    nj_tensor *pyr[NJ_MAX_SCALES];
    if (image_pyramid(g, in, pyr)) return -1;
    nj_vs_input matched;
    if (cfg->gain_match) {
        matched = *in;
        for (int s = 0; s < in->nsources; s++)
            if (!(matched.sources[s] = gain_matched(g, in->sources[s], in->target))) return -1;
        in = &matched;
    }
    nj_tensor *ident[NJ_MAX_SOURCES] = {NULL};
    int ngroups = 1;
    if (cfg->each_offset) {
        ngroups = 0;
        for (int s = 0; s < in->nsources; s++) ngroups = in->group[s] + 1 > ngroups ? in->group[s] + 1 : ngroups;
        if (ngroups > NJ_MAX_SOURCES) {
            nj_graph_fail(g, "view_synthesis_loss: source groups must be below %d (got %d)", NJ_MAX_SOURCES, ngroups);
            return -1;
        }
        for (int k = 0; cfg->automask && k < ngroups; k++)
            if (group_sources(in, k)) ident[k] = identity_min(g, cfg, in, ~group_sources(in, k));
    } else if (cfg->automask) {
        unsigned all = (1u << in->nsources) - 1;
        ident[0] = identity_min(g, cfg, in, (in->mask_skip & all) == all ? 0 : in->mask_skip);
    }
    nj_tensor *total = NULL;
    for (int s = 0; s < in->nscales; s++) {
        float photo = 0, smooth = 0;
        nj_tensor *l = scale_loss(g, cfg, in, s, ident, ngroups, pyr[s], out, &photo, &smooth);
        if (cfg->saturation_guard > 0) l = nj_add(g, l, saturation_guard(g, cfg, in->disp[s]));
        total = total ? nj_add(g, total, l) : l;
        out->photometric += photo / (float)in->nscales;
        out->smoothness += smooth / (float)in->nscales;
    }
    out->total = nj_affine(g, total, 1.0f / (float)in->nscales, 0.0f);
    return nj_graph_failed(g) ? -1 : 0;
}

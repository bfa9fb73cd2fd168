/* train/model/model.c — building, initialising and running the depth and pose nets
 * (architecture described in model.h). */
#include "train/model/model.h"
#include <math.h>
#include <stdio.h>
#include <string.h>

void nj_model_config_default(nj_model_config *cfg)
{
    memset(cfg, 0, sizeof *cfg);
    cfg->stages = 5;
    cfg->width = 1.0f;
    cfg->scales = 4;
    cfg->norm = NJ_NORM_BATCH;
    cfg->head_init = 0.01f;
    cfg->pose = 1;
    cfg->pose_stages = 5;
    cfg->pose_width = 1.0f;
    cfg->pose_scale = 0.5f;
    cfg->rotation_scale = 0.0f;   /* follow pose_scale */
    cfg->pose_norm = 1;
    cfg->bn_momentum = 0.1f;
    cfg->depth_range = (nj_depth_range){NJ_MODEL_DEPTH_NEAR, NJ_MODEL_DEPTH_FAR};
    cfg->seed = 1;
}

static int width_of(int base, float mult)
{
    int c = (int)lroundf((float)base * mult);
    return c < 4 ? 4 : c;
}

typedef struct {
    nj_model *m;
    nj_rng rng;
    char *err;
    size_t errlen;
} builder;

/* Adds conv (+norm) (+act); returns the unit index or -1. */
static int add_unit(builder *b, const char *name, int group, int cin, int cout, int k, int stride,
                    nj_pad_mode mode, nj_norm_kind norm, nj_act_kind act)
{
    nj_model *m = b->m;
    if (m->nunits == NJ_MAX_UNITS) {
        snprintf(b->err, b->errlen, "model: more than %d layers", NJ_MAX_UNITS);
        return -1;
    }
    nj_unit *u = &m->units[m->nunits];
    memset(u, 0, sizeof *u);
    char nm[64];
    snprintf(nm, sizeof nm, "%s.w", name);
    u->w = nj_params_add(&m->params, nm, group, cout, cin, k, k);
    snprintf(nm, sizeof nm, "%s.b", name);
    u->b = nj_params_add(&m->params, nm, group, 1, cout, 1, 1);
    if (!u->w || !u->b) goto oom;
    int fan_in = cin * k * k;
    /* He et al. 2015 for ELU/linear layers feeding normalisation */
    nj_init_kaiming_uniform(u->w, fan_in, act == NJ_ACT_ELU ? sqrtf(2.0f) : 1.0f, &b->rng);
    nj_init_uniform_bias(u->b, fan_in, &b->rng);
    if (norm != NJ_NORM_NONE) {
        snprintf(nm, sizeof nm, "%s.gamma", name);
        u->gamma = nj_params_add(&m->params, nm, group, 1, cout, 1, 1);
        snprintf(nm, sizeof nm, "%s.beta", name);
        u->beta = nj_params_add(&m->params, nm, group, 1, cout, 1, 1);
        if (!u->gamma || !u->beta) goto oom;
        nj_init_const(u->gamma, 1.0f);
        if (norm == NJ_NORM_BATCH) {
            snprintf(nm, sizeof nm, "%s.mean", name);
            u->run_mean = nj_params_add(&m->buffers, nm, group, 1, cout, 1, 1);
            snprintf(nm, sizeof nm, "%s.var", name);
            u->run_var = nj_params_add(&m->buffers, nm, group, 1, cout, 1, 1);
            if (!u->run_mean || !u->run_var) goto oom;
            nj_init_const(u->run_var, 1.0f);
        }
    }
    u->cin = cin; u->cout = cout; u->k = k; u->stride = stride; u->pad = k / 2;
    u->pad_mode = mode; u->norm = norm; u->act = act;
    return m->nunits++;
oom:
    snprintf(b->err, b->errlen, "model: cannot allocate layer %s", name);
    return -1;
}

static int build_depth(builder *b)
{
    nj_model *m = b->m;
    const nj_model_config *c = &m->cfg;
    int ch[NJ_MAX_STAGES], cin = 3;
    char nm[48];
    for (int i = 0; i < c->stages; i++) {
        ch[i] = width_of(16 << i, c->width);
        snprintf(nm, sizeof nm, "enc%d.0", i);
        m->enc[i][0] = add_unit(b, nm, NJ_GROUP_ENCODER, cin, ch[i], 3, 2, NJ_PAD_ZERO, c->norm, NJ_ACT_ELU);
        snprintf(nm, sizeof nm, "enc%d.1", i);
        m->enc[i][1] = add_unit(b, nm, NJ_GROUP_ENCODER, ch[i], ch[i], 3, 1, NJ_PAD_ZERO, c->norm, NJ_ACT_ELU);
        if (m->enc[i][0] < 0 || m->enc[i][1] < 0) return -1;
        cin = ch[i];
    }
    for (int i = c->stages - 1; i >= 0; i--) {
        int skip = i > 0 ? ch[i - 1] : 0;
        snprintf(nm, sizeof nm, "dec%d.0", i);
        m->dec[i][0] = add_unit(b, nm, NJ_GROUP_DECODER, cin, ch[i], 3, 1, NJ_PAD_REFLECT, c->norm, NJ_ACT_ELU);
        snprintf(nm, sizeof nm, "dec%d.1", i);
        m->dec[i][1] = add_unit(b, nm, NJ_GROUP_DECODER, ch[i] + skip, ch[i], 3, 1, NJ_PAD_REFLECT, c->norm, NJ_ACT_ELU);
        if (m->dec[i][0] < 0 || m->dec[i][1] < 0) return -1;
        cin = ch[i];
    }
    for (int s = 0; s < c->scales; s++) {
        snprintf(nm, sizeof nm, "head%d", s);
        m->head[s] = add_unit(b, nm, NJ_GROUP_DECODER, ch[s], 1, 3, 1, NJ_PAD_REFLECT, NJ_NORM_NONE, NJ_ACT_SIGMOID);
        if (m->head[s] < 0) return -1;
        /* start at a far, uniform depth (head_init 0.01 ≈ 9 m for a 0.1–100 m range):
         * predicted flow then starts below the true flow everywhere, where the
         * photometric gradient points the right way.  Starting near (large
         * flow) was measured to train inverted depth even with true poses. */
        nj_unit *u = &m->units[m->head[s]];
        for (size_t k = 0; k < nj_param_numel(u->w); k++) u->w->data[k] *= 0.1f;
        nj_init_const(u->b, logf(c->head_init / (1.0f - c->head_init)));
    }
    return 0;
}

static nj_norm_kind pose_norm_kind(const nj_model_config *c)
{
    return c->pose_norm ? c->norm : NJ_NORM_NONE;
}

static int pose_input_channels(const nj_model_config *c)
{
    return NJ_MODEL_POSE_FRAME_CHANNELS + (c->pose_rays ? NJ_MODEL_POSE_RAY_CHANNELS : 0);
}

static int build_pose(builder *b)
{
    nj_model *m = b->m;
    const nj_model_config *c = &m->cfg;
    int cin = pose_input_channels(c);
    char nm[48];
    for (int i = 0; i < c->pose_stages; i++) {
        int k = i == 0 ? 7 : (i == 1 ? 5 : 3), cout = width_of(16 << i, c->pose_width);
        snprintf(nm, sizeof nm, "pose%d", i);
        m->pose_units[i] = add_unit(b, nm, NJ_GROUP_POSE, cin, cout, k, 2, NJ_PAD_ZERO, pose_norm_kind(c), NJ_ACT_ELU);
        if (m->pose_units[i] < 0) return -1;
        cin = cout;
    }
    int out = add_unit(b, "pose.out", NJ_GROUP_POSE, cin, 6, 1, 1, NJ_PAD_ZERO, NJ_NORM_NONE, NJ_ACT_NONE);
    if (out < 0) return -1;
    /* Start from (almost) no motion: with zero flow the photometric gradient is
     * a valid local linearisation everywhere; a random initial motion would make
     * the predicted flow overshoot by pixels and the depth net learns from
     * aliased gradients (measured: inverted depth). */
    nj_unit *u = &m->units[out];
    for (size_t k = 0; k < nj_param_numel(u->w); k++) u->w->data[k] *= 0.01f;
    nj_init_const(u->b, 0.0f);
    m->pose_units[c->pose_stages] = out;
    m->npose = c->pose_stages + 1;
    return 0;
}

/* Scalars of one unit (see add_unit): parameters and batch-norm buffers. */
static void count_unit(int cin, int cout, int k, nj_norm_kind norm, uint64_t *params, uint64_t *buffers)
{
    *params += (uint64_t)cout * cin * k * k + cout + (norm != NJ_NORM_NONE ? 2u * cout : 0);
    *buffers += norm == NJ_NORM_BATCH ? 2u * cout : 0;
}

void nj_model_count(const nj_model_config *c, uint64_t *params, uint64_t *buffers)
{
    *params = *buffers = 0;
    if (c->stages < 1 || c->stages > NJ_MAX_STAGES || c->scales < 1 || c->scales > c->stages) return;
    int ch[NJ_MAX_STAGES], cin = 3;
    for (int i = 0; i < c->stages; i++) {
        ch[i] = width_of(16 << i, c->width);
        count_unit(cin, ch[i], 3, c->norm, params, buffers);
        count_unit(ch[i], ch[i], 3, c->norm, params, buffers);
        cin = ch[i];
    }
    for (int i = c->stages - 1; i >= 0; i--) {
        count_unit(cin, ch[i], 3, c->norm, params, buffers);
        count_unit(ch[i] + (i > 0 ? ch[i - 1] : 0), ch[i], 3, c->norm, params, buffers);
        cin = ch[i];
    }
    for (int s = 0; s < c->scales; s++) count_unit(ch[s], 1, 3, NJ_NORM_NONE, params, buffers);
    if (!c->pose || c->pose_stages < 1 || c->pose_stages > NJ_MAX_STAGES) return;
    cin = pose_input_channels(c);
    for (int i = 0; i < c->pose_stages; i++) {
        int cout = width_of(16 << i, c->pose_width);
        count_unit(cin, cout, i == 0 ? 7 : (i == 1 ? 5 : 3), pose_norm_kind(c), params, buffers);
        cin = cout;
    }
    count_unit(cin, 6, 1, NJ_NORM_NONE, params, buffers);
}

int nj_model_init(nj_model *m, const nj_model_config *cfg, char *err, size_t errlen)
{
    memset(m, 0, sizeof *m);
    m->cfg = *cfg;
    nj_params_init(&m->params);
    nj_params_init(&m->buffers);
    if (cfg->stages < 1 || cfg->stages > NJ_MAX_STAGES || cfg->scales < 1 || cfg->scales > 4 ||
        cfg->scales > cfg->stages || !(cfg->width > 0) || !(cfg->head_init > 0 && cfg->head_init < 1) ||
        (cfg->pose && (cfg->pose_stages < 1 || cfg->pose_stages > NJ_MAX_STAGES || !(cfg->pose_width > 0)))) {
        snprintf(err, errlen, "model: invalid architecture (stages %d, scales %d, width %g, pose stages %d)",
                 cfg->stages, cfg->scales, cfg->width, cfg->pose_stages);
        return -1;
    }
    builder b = {.m = m, .err = err, .errlen = errlen};
    nj_rng_seed(&b.rng, cfg->seed);
    if (build_depth(&b) || (cfg->pose && build_pose(&b))) {
        nj_model_free(m);
        return -1;
    }
    return 0;
}

void nj_model_free(nj_model *m)
{
    nj_params_free(&m->params);
    nj_params_free(&m->buffers);
    m->nunits = 0;
}

static nj_tensor *P(nj_graph *g, nj_model *m, nj_param *p)
{
    return p ? nj_param_tensor(g, &m->params, p) : NULL;
}

int nj_model_norm_groups(int channels)
{
    return channels % 8 == 0 ? 8 : (channels % 4 == 0 ? 4 : 1);
}

static nj_tensor *unit_forward(nj_graph *g, nj_model *m, const nj_unit *u, nj_tensor *x)
{
    nj_tensor *y = nj_conv2d(g, x, P(g, m, u->w), P(g, m, u->b), u->stride, u->pad, u->pad_mode);
    if (u->norm == NJ_NORM_BATCH && u->act == NJ_ACT_ELU)   /* fused: one activation buffer fewer */
        return nj_batchnorm_elu(g, y, P(g, m, u->gamma), P(g, m, u->beta), u->run_mean->data,
                                u->run_var->data, m->cfg.bn_momentum, NJ_MODEL_NORM_EPS);
    if (u->norm == NJ_NORM_BATCH)
        y = nj_batchnorm(g, y, P(g, m, u->gamma), P(g, m, u->beta), u->run_mean->data,
                         u->run_var->data, m->cfg.bn_momentum, NJ_MODEL_NORM_EPS);
    else if (u->norm == NJ_NORM_GROUP)
        y = nj_groupnorm(g, y, nj_model_norm_groups(u->cout), P(g, m, u->gamma), P(g, m, u->beta),
                         NJ_MODEL_NORM_EPS);
    if (u->act == NJ_ACT_ELU) y = nj_elu(g, y);
    else if (u->act == NJ_ACT_SIGMOID) y = nj_sigmoid(g, y);
    return y;
}

/* Fixed input standardisation: (x − NJ_MODEL_INPUT_MEAN)/NJ_MODEL_INPUT_STD. */
static nj_tensor *standardise(nj_graph *g, nj_tensor *img)
{
    return nj_affine(g, img, 1.0f / NJ_MODEL_INPUT_STD, -NJ_MODEL_INPUT_MEAN / NJ_MODEL_INPUT_STD);
}

int nj_depth_forward(nj_graph *g, nj_model *m, nj_tensor *img, nj_tensor **disp)
{
    const nj_model_config *c = &m->cfg;
    if (img && !nj_model_size_ok(m, img->h, img->w)) {
        nj_graph_fail(g, "depth net: input %dx%d must be divisible by %d", img->w, img->h, 1 << c->stages);
        return -1;
    }
    nj_tensor *feat[NJ_MAX_STAGES], *x = standardise(g, img);
    for (int i = 0; i < c->stages; i++) {
        x = unit_forward(g, m, &m->units[m->enc[i][0]], x);
        feat[i] = x = unit_forward(g, m, &m->units[m->enc[i][1]], x);
    }
    for (int i = c->stages - 1; i >= 0; i--) {
        x = nj_upsample2(g, unit_forward(g, m, &m->units[m->dec[i][0]], x));
        if (i > 0) x = nj_concat(g, x, feat[i - 1]);
        x = unit_forward(g, m, &m->units[m->dec[i][1]], x);
        if (i < c->scales) disp[i] = unit_forward(g, m, &m->units[m->head[i]], x);
    }
    return nj_graph_failed(g) ? -1 : 0;
}

/* N×2×H×W: each item's ray directions (nj_camera_rays), a constant input.
 * Flipped items carry their mirrored cx, so the rays stay true to the view. */
static nj_tensor *ray_channels(nj_graph *g, const nj_tensor *like, const nj_camera *cams)
{
    int N = like->n, H = like->h, W = like->w;
    nj_tensor *r = nj_tensor_new(g, N, NJ_MODEL_POSE_RAY_CHANNELS, H, W, 0);
    if (!r) return NULL;
    size_t plane = (size_t)H * W;
    for (int n = 0; n < N; n++)
        nj_camera_rays(cams[n], W, H, r->data + (size_t)n * 2 * plane, r->data + ((size_t)n * 2 + 1) * plane);
    return r;
}

nj_tensor *nj_pose_forward(nj_graph *g, nj_model *m, nj_tensor *first, nj_tensor *second,
                           const nj_camera *cams)
{
    if (!m->cfg.pose) return nj_graph_fail(g, "pose net: this model has none (stereo-only)");
    nj_tensor *x = nj_concat(g, standardise(g, first), standardise(g, second));
    if (m->cfg.pose_rays) {
        if (!cams) return nj_graph_fail(g, "pose net: this model (pose_rays) needs the camera intrinsics");
        if (first) x = nj_concat(g, x, ray_channels(g, first, cams));
    }
    for (int i = 0; i < m->npose; i++) x = unit_forward(g, m, &m->units[m->pose_units[i]], x);
    x = nj_global_avgpool(g, x);
    float rot = m->cfg.rotation_scale > 0 ? m->cfg.rotation_scale : m->cfg.pose_scale;
    if (rot == m->cfg.pose_scale) return nj_affine(g, x, m->cfg.pose_scale, 0.0f);
    return nj_concat(g, nj_affine(g, nj_slice_channels(g, x, 0, 3), rot, 0.0f),
                     nj_affine(g, nj_slice_channels(g, x, 3, 3), m->cfg.pose_scale, 0.0f));
}

static double unit_flops(const nj_unit *u, int h, int w, int *oh, int *ow)
{
    *oh = (h + 2 * u->pad - u->k) / u->stride + 1;
    *ow = (w + 2 * u->pad - u->k) / u->stride + 1;
    return 2.0 * u->cout * u->cin * u->k * u->k * (double)*oh * *ow;
}

double nj_depth_flops(const nj_model *m, int h, int w)
{
    double f = 0;
    int oh, ow;
    for (int i = 0; i < m->cfg.stages; i++) {
        f += unit_flops(&m->units[m->enc[i][0]], h >> i, w >> i, &oh, &ow);
        f += unit_flops(&m->units[m->enc[i][1]], oh, ow, &oh, &ow);
    }
    for (int i = m->cfg.stages - 1; i >= 0; i--) {
        f += unit_flops(&m->units[m->dec[i][0]], h >> (i + 1), w >> (i + 1), &oh, &ow);
        f += unit_flops(&m->units[m->dec[i][1]], h >> i, w >> i, &oh, &ow);
        if (i < m->cfg.scales) f += unit_flops(&m->units[m->head[i]], h >> i, w >> i, &oh, &ow);
    }
    return f;
}

double nj_pose_flops(const nj_model *m, int h, int w)
{
    double f = 0;
    for (int i = 0; i < m->npose; i++) f += unit_flops(&m->units[m->pose_units[i]], h, w, &h, &w);
    return f;
}

int nj_model_size_ok(const nj_model *m, int h, int w)
{
    /* the coarsest feature map needs 2 pixels a side for reflection padding */
    int d = 1 << m->cfg.stages;
    return h >= 2 * d && w >= 2 * d && h % d == 0 && w % d == 0;
}

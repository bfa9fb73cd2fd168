/* train/export/export_prepare.c — the export view of a model: batch norm folded into
 * the convs, optional int8 weight quantisation, size checks, and the
 * architecture description shared by the writers (see export.h). */
#include "train/export/export.h"
#include <cjson/cJSON.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

const char *nj_export_float_text(float v, char *buf, size_t n)
{
    for (int prec = 1; prec <= 9; prec++) {   /* 9 significant digits always round-trip a float */
        snprintf(buf, n, "%.*g", prec, (double)v);
        if (strtof(buf, NULL) == v) break;
    }
    return buf;
}

void nj_export_quantise(const float *w, int n_out, int per_out, int8_t *q, float *scale)
{
    for (int o = 0; o < n_out; o++) {
        const float *wo = w + (size_t)o * per_out;
        float m = 0.0f;
        for (int i = 0; i < per_out; i++) m = fmaxf(m, fabsf(wo[i]));
        const float s = m > 0.0f ? m / 127.0f : 1.0f;
        scale[o] = s;
        for (int i = 0; i < per_out; i++) {
            long v = lrintf(wo[i] / s);
            q[(size_t)o * per_out + i] = (int8_t)(v > 127 ? 127 : (v < -127 ? -127 : v));
        }
    }
}

/* Strips the ".w" of the weight parameter's name. */
static void unit_name(const nj_unit *u, char *out, size_t n)
{
    const char *s = u->w->name;
    size_t len = strlen(s);
    if (len > 2 && !strcmp(s + len - 2, ".w")) len -= 2;
    snprintf(out, n, "%.*s", (int)len, s);
}

static int prepare_layer(nj_export_layer *l, const nj_unit *u, int int8)
{
    memset(l, 0, sizeof *l);
    unit_name(u, l->name, sizeof l->name);
    l->cin = u->cin;
    l->cout = u->cout;
    l->k = u->k;
    l->stride = u->stride;
    l->pad = u->pad;
    l->pad_mode = u->pad_mode;
    l->act = u->act;
    const int per_out = u->cin * u->k * u->k;
    const size_t nw = (size_t)u->cout * per_out;
    l->w = malloc(nw * sizeof *l->w);
    l->b = malloc((size_t)u->cout * sizeof *l->b);
    if (!l->w || !l->b) return -1;
    memcpy(l->w, u->w->data, nw * sizeof *l->w);
    memcpy(l->b, u->b->data, (size_t)u->cout * sizeof *l->b);
    if (u->norm == NJ_NORM_BATCH)
        nj_batchnorm_fold(l->w, l->b, u->cout, per_out, u->gamma->data, u->beta->data, u->run_mean->data,
                          u->run_var->data, NJ_MODEL_NORM_EPS);
    else if (u->norm == NJ_NORM_GROUP) {
        l->groups = nj_model_norm_groups(u->cout);
        l->gamma = u->gamma->data;
        l->beta = u->beta->data;
    }
    for (size_t i = 0; i < nw; i++)
        if (!isfinite(l->w[i])) return -2;
    for (int o = 0; o < u->cout; o++)
        if (!isfinite(l->b[o])) return -2;
    if (!int8) return 0;
    l->q = malloc(nw * sizeof *l->q);
    l->scale = malloc((size_t)u->cout * sizeof *l->scale);
    if (!l->q || !l->scale) return -1;
    nj_export_quantise(l->w, u->cout, per_out, l->q, l->scale);
    return 0;
}

static int check_size(const nj_model *m, int width, int height, char *err, size_t errlen)
{
    const int s = m->cfg.stages, d = 1 << s;
    if (!nj_model_size_ok(m, height, width)) {
        snprintf(err, errlen, "size %dx%d: width and height must be positive multiples of %d for this model "
                 "(%d encoder stages)", width, height, d, s);
        return -1;
    }
    if ((width >> s) < 2 || (height >> s) < 2) {
        snprintf(err, errlen, "size %dx%d: too small for this model, need at least %dx%d (reflection padding "
                 "at the coarsest level)", width, height, 2 * d, 2 * d);
        return -1;
    }
    return 0;
}

int nj_export_prepare(nj_export_net *net, const nj_model *m, const nj_train_config *cfg,
                      int int8, int width, int height, char *err, size_t errlen)
{
    memset(net, 0, sizeof *net);
    if (check_size(m, width, height, err, errlen)) return -1;
    const nj_depth_range r = m->cfg.depth_range;
    if (!nj_depth_range_ok(r)) {
        snprintf(err, errlen, "bad depth range %g..%g in the checkpoint's config", r.near, r.far);
        return -1;
    }
    net->model = m;
    net->cfg = cfg;
    net->int8 = int8;
    net->width = width;
    net->height = height;
    net->depth_range = r;
    net->metric = cfg->stereo && !cfg->video;
    for (int i = 0; i < m->nunits; i++) {
        net->nlayers = i + 1;
        int rc = prepare_layer(&net->layers[i], &m->units[i], int8);
        if (rc) {
            if (rc == -2) snprintf(err, errlen, "layer %s has non-finite weights after folding its "
                                   "normalisation; refusing to export", net->layers[i].name);
            else snprintf(err, errlen, "out of memory preparing layer %d", i);
            nj_export_release(net);
            return -1;
        }
    }
    return 0;
}

void nj_export_release(nj_export_net *net)
{
    for (int i = 0; i < net->nlayers; i++) {
        nj_export_layer *l = &net->layers[i];
        free(l->w);
        free(l->b);
        free(l->q);
        free(l->scale);
    }
    net->nlayers = 0;
}

/* ---- architecture JSON ---------------------------------------------------- */

static const char *act_name(nj_act_kind a)
{
    return a == NJ_ACT_ELU ? "elu" : (a == NJ_ACT_SIGMOID ? "sigmoid" : "none");
}

static const char *norm_name(nj_norm_kind n)
{
    return n == NJ_NORM_BATCH ? "batch" : (n == NJ_NORM_GROUP ? "group" : "none");
}

static cJSON *layer_json(const nj_export_net *net, int i)
{
    const nj_export_layer *l = &net->layers[i];
    cJSON *o = cJSON_CreateObject();
    cJSON_AddStringToObject(o, "name", l->name);
    cJSON_AddNumberToObject(o, "in_channels", l->cin);
    cJSON_AddNumberToObject(o, "out_channels", l->cout);
    cJSON_AddNumberToObject(o, "kernel", l->k);
    cJSON_AddNumberToObject(o, "stride", l->stride);
    cJSON_AddNumberToObject(o, "padding", l->pad);
    cJSON_AddStringToObject(o, "padding_mode", l->pad_mode == NJ_PAD_REFLECT ? "reflect" : "zeros");
    cJSON_AddStringToObject(o, "norm", norm_name(net->model->units[i].norm));
    if (l->groups) cJSON_AddNumberToObject(o, "norm_groups", l->groups);
    cJSON_AddStringToObject(o, "activation", act_name(l->act));
    return o;
}

static cJSON *int_array(const int *v, int n)
{
    cJSON *a = cJSON_CreateArray();
    for (int i = 0; i < n; i++) cJSON_AddItemToArray(a, cJSON_CreateNumber(v[i]));
    return a;
}

/* Encoder channel widths of the depth net. */
static void depth_channels(const nj_model *m, int *ch)
{
    for (int i = 0; i < m->cfg.stages; i++) ch[i] = m->units[m->enc[i][1]].cout;
}

char *nj_export_architecture_json(const nj_export_net *net)
{
    const nj_model *m = net->model;
    const nj_model_config *c = &m->cfg;
    int ch[NJ_MAX_STAGES];
    depth_channels(m, ch);
    cJSON *o = cJSON_CreateObject();
    cJSON_AddStringToObject(o, "depth_net", "encoder-decoder: per stage conv3x3/2 + conv3x3 (norm, ELU); "
        "decoder per stage conv3x3 (reflect, norm, ELU), nearest x2 upsampling, concat with the encoder "
        "feature of that resolution, conv3x3 (reflect, norm, ELU); sigmoid disparity heads");
    cJSON_AddNumberToObject(o, "stages", c->stages);
    cJSON_AddNumberToObject(o, "width", c->width);
    cJSON_AddNumberToObject(o, "scales", c->scales);
    cJSON_AddItemToObject(o, "channels", int_array(ch, c->stages));
    cJSON_AddStringToObject(o, "norm", norm_name(c->norm));
    char eps[32], mean[32], std[32], text[160];
    nj_export_float_text(NJ_MODEL_NORM_EPS, eps, sizeof eps);
    nj_export_float_text(NJ_MODEL_INPUT_MEAN, mean, sizeof mean);
    nj_export_float_text(NJ_MODEL_INPUT_STD, std, sizeof std);
    snprintf(text, sizeof text, "folded into the preceding conv (eps %s)", eps);
    cJSON_AddStringToObject(o, "batch_norm", text);
    cJSON_AddBoolToObject(o, "pose_net", c->pose);
    if (c->pose) {
        cJSON_AddNumberToObject(o, "pose_stages", c->pose_stages);
        cJSON_AddNumberToObject(o, "pose_width", c->pose_width);
        cJSON_AddNumberToObject(o, "pose_scale", c->pose_scale);
        cJSON_AddNumberToObject(o, "rotation_scale", c->rotation_scale);
        cJSON_AddBoolToObject(o, "pose_norm", c->pose_norm);
        cJSON_AddBoolToObject(o, "pose_rays", c->pose_rays);
    }
    snprintf(text, sizeof text, "RGB in [0,1], standardised as (x - %s) / %s", mean, std);
    cJSON_AddStringToObject(o, "input", text);
    cJSON_AddNumberToObject(o, "input_mean", NJ_MODEL_INPUT_MEAN);
    cJSON_AddNumberToObject(o, "input_std", NJ_MODEL_INPUT_STD);
    cJSON_AddStringToObject(o, "depth",
                            "depth = 1 / (1/far + (1/near - 1/far) * disparity), [near, far] = depth_range");
    cJSON *range = cJSON_AddArrayToObject(o, "depth_range");
    cJSON_AddItemToArray(range, cJSON_CreateNumber(net->depth_range.near));
    cJSON_AddItemToArray(range, cJSON_CreateNumber(net->depth_range.far));
    cJSON_AddStringToObject(o, "depth_units", net->metric ? "metres" : "model units (monocular: up to scale)");
    cJSON_AddStringToObject(o, "weights", net->int8 ? "int8" : "f32");
    cJSON *layers = cJSON_AddArrayToObject(o, "layers");
    for (int i = 0; i < net->nlayers; i++) cJSON_AddItemToArray(layers, layer_json(net, i));
    char *s = cJSON_PrintUnformatted(o);
    cJSON_Delete(o);
    return s;
}

/* train/export/export_onnx.c — `nightjar export --format onnx`: the depth net as an
 * ONNX model (IR version 7, default-domain opset 13), encoded with our own
 * protobuf writer (export_pb.h) following the published onnx.proto field
 * numbers.
 *
 * Graph: input "image" (1x3xHxW float RGB in [0,1]) → Mul/Add standardisation
 * → per layer [Pad(reflect)] → Conv (+ bias) [→ group norm as Reshape →
 * InstanceNormalization → Reshape → Mul/Add] → Elu/Sigmoid; decoder Resize
 * (nearest, x2) and Concat skips; outputs "disparity" (the finest sigmoid
 * head) and "depth" (1 / (lo + span·disparity)).  int8 weights are stored as
 * INT8 initializers: Cast → Conv without bias → Mul(per-channel scale) →
 * Add(bias), the same arithmetic as the C runtime. */
#include "data/atomic.h"
#include "train/export/export.h"
#include "train/export/export_pb.h"
#include "train/version.h"
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* onnx.proto TensorProto.DataType */
enum { T_FLOAT = 1, T_INT8 = 3, T_INT64 = 7 };
/* onnx.proto AttributeProto.AttributeType */
enum { A_FLOAT = 1, A_INT = 2, A_STRING = 3, A_INTS = 7 };

typedef struct onnx_writer {
    nj_pb graph;
    const nj_export_net *net;
} onnx_writer;

/* ---- initializers ------------------------------------------------------------ */

static void tensor(onnx_writer *o, const char *name, const int64_t *dims, int nd, int dtype, const void *raw,
                   size_t bytes)
{
    nj_pb t;
    nj_pb_init(&t);
    for (int i = 0; i < nd; i++) nj_pb_int(&t, 1, dims[i]);
    nj_pb_int(&t, 2, dtype);
    nj_pb_string(&t, 8, name);
    nj_pb_bytes(&t, 9, raw, bytes);
    nj_pb_message(&o->graph, 5, &t);
    nj_pb_free(&t);
}

static void put_le32(unsigned char *p, uint32_t u)
{
    for (int k = 0; k < 4; k++) p[k] = (unsigned char)(u >> (8 * k));
}

static void float_tensor(onnx_writer *o, const char *name, const int64_t *dims, int nd, const float *v, size_t n)
{
    unsigned char *raw = malloc(n * 4 + 1);
    if (!raw) {
        o->graph.failed = 1;
        return;
    }
    for (size_t i = 0; i < n; i++) {
        uint32_t u;
        memcpy(&u, &v[i], 4);
        put_le32(raw + 4 * i, u);
    }
    tensor(o, name, dims, nd, T_FLOAT, raw, n * 4);
    free(raw);
}

static void scalar(onnx_writer *o, const char *name, float v)
{
    float_tensor(o, name, NULL, 0, &v, 1);
}

static void int64_tensor(onnx_writer *o, const char *name, const int64_t *v, int n)
{
    unsigned char raw[64];
    for (int i = 0; i < n && i < 8; i++)
        for (int k = 0; k < 8; k++) raw[8 * i + k] = (unsigned char)((uint64_t)v[i] >> (8 * k));
    int64_t dims[1] = {n};
    tensor(o, name, dims, 1, T_INT64, raw, (size_t)n * 8);
}

/* ---- nodes ----------------------------------------------------------------------- */

typedef struct node {
    nj_pb pb;
} node;

static void node_begin(node *n, const char *op, const char *const *in, int nin, const char *out)
{
    nj_pb_init(&n->pb);
    for (int i = 0; i < nin; i++) nj_pb_string(&n->pb, 1, in[i]);
    nj_pb_string(&n->pb, 2, out);
    nj_pb_string(&n->pb, 3, out);   /* node name = its output's name */
    nj_pb_string(&n->pb, 4, op);
}

static void attr_begin(nj_pb *a, const char *name, int type)
{
    nj_pb_init(a);
    nj_pb_string(a, 1, name);
    nj_pb_int(a, 20, type);
}

static void attr_end(node *n, nj_pb *a)
{
    nj_pb_message(&n->pb, 5, a);
    nj_pb_free(a);
}

static void attr_int(node *n, const char *name, int64_t v)
{
    nj_pb a;
    attr_begin(&a, name, A_INT);
    nj_pb_int(&a, 3, v);
    attr_end(n, &a);
}

static void attr_float(node *n, const char *name, float v)
{
    nj_pb a;
    attr_begin(&a, name, A_FLOAT);
    nj_pb_float(&a, 2, v);
    attr_end(n, &a);
}

static void attr_string(node *n, const char *name, const char *v)
{
    nj_pb a;
    attr_begin(&a, name, A_STRING);
    nj_pb_string(&a, 4, v);
    attr_end(n, &a);
}

static void attr_ints(node *n, const char *name, const int64_t *v, int count)
{
    nj_pb a;
    attr_begin(&a, name, A_INTS);
    for (int i = 0; i < count; i++) nj_pb_int(&a, 8, v[i]);
    attr_end(n, &a);
}

static void node_end(onnx_writer *o, node *n)
{
    nj_pb_message(&o->graph, 1, &n->pb);
    nj_pb_free(&n->pb);
}

/* A node without attributes. */
static void simple(onnx_writer *o, const char *op, const char *a, const char *b, const char *out)
{
    const char *in[2] = {a, b};
    node n;
    node_begin(&n, op, in, b ? 2 : 1, out);
    node_end(o, &n);
}

/* ---- layers ---------------------------------------------------------------------- */

static void conv_node(onnx_writer *o, const nj_export_layer *l, const char *x, const char *out)
{
    char w[96], b[96];
    snprintf(w, sizeof w, "%s.weight", l->name);
    snprintf(b, sizeof b, "%s.bias", l->name);
    const char *in[3] = {x, w, b};
    int pad = l->pad_mode == NJ_PAD_REFLECT ? 0 : l->pad;
    int64_t ks[2] = {l->k, l->k}, st[2] = {l->stride, l->stride}, pads[4] = {pad, pad, pad, pad};
    node n;
    node_begin(&n, "Conv", in, l->q ? 2 : 3, out);
    attr_ints(&n, "kernel_shape", ks, 2);
    attr_ints(&n, "strides", st, 2);
    attr_ints(&n, "pads", pads, 4);
    node_end(o, &n);
}

static void conv_weights(onnx_writer *o, const nj_export_layer *l)
{
    char nm[96];
    int64_t wd[4] = {l->cout, l->cin, l->k, l->k}, cd[4] = {1, l->cout, 1, 1}, bd[1] = {l->cout};
    size_t nw = (size_t)l->cout * l->cin * l->k * l->k;
    if (!l->q) {
        snprintf(nm, sizeof nm, "%s.weight", l->name);
        float_tensor(o, nm, wd, 4, l->w, nw);
        snprintf(nm, sizeof nm, "%s.bias", l->name);
        float_tensor(o, nm, bd, 1, l->b, (size_t)l->cout);
        return;
    }
    snprintf(nm, sizeof nm, "%s.weight_int8", l->name);
    tensor(o, nm, wd, 4, T_INT8, l->q, nw);
    snprintf(nm, sizeof nm, "%s.weight_scale", l->name);
    float_tensor(o, nm, cd, 4, l->scale, (size_t)l->cout);
    snprintf(nm, sizeof nm, "%s.bias", l->name);
    float_tensor(o, nm, cd, 4, l->b, (size_t)l->cout);
}

/* int8: Cast the weights, Conv without bias, then scale and bias per channel. */
static void conv_int8(onnx_writer *o, const nj_export_layer *l, const char *x, const char *out)
{
    char q[96], w[96], acc[96], sc[96], scaled[96], b[96];
    snprintf(q, sizeof q, "%s.weight_int8", l->name);
    snprintf(w, sizeof w, "%s.weight", l->name);
    snprintf(acc, sizeof acc, "%s.acc", l->name);
    snprintf(sc, sizeof sc, "%s.weight_scale", l->name);
    snprintf(scaled, sizeof scaled, "%s.scaled", l->name);
    snprintf(b, sizeof b, "%s.bias", l->name);
    const char *in[1] = {q};
    node n;
    node_begin(&n, "Cast", in, 1, w);
    attr_int(&n, "to", T_FLOAT);
    node_end(o, &n);
    conv_node(o, l, x, acc);
    simple(o, "Mul", acc, sc, scaled);
    simple(o, "Add", scaled, b, out);
}

/* Group norm (Wu & He 2018) as Reshape → InstanceNormalization → Reshape → affine. */
static void group_norm(onnx_writer *o, const nj_export_layer *l, const char *x, int oh, int ow, const char *out)
{
    char nm[8][96];
    const char *suffix[8] = {"gn_shape", "gn_grouped", "gn_one", "gn_zero", "gn_normed", "shape", "gn_flat",
                             "norm_gamma"};
    for (int i = 0; i < 8; i++) snprintf(nm[i], sizeof nm[i], "%s.%s", l->name, suffix[i]);
    int64_t gshape[3] = {1, l->groups, -1}, shape[4] = {1, l->cout, oh, ow}, gd[1] = {l->groups};
    int64_t cd[4] = {1, l->cout, 1, 1};
    float *ones = calloc((size_t)l->groups * 2, sizeof *ones);
    if (!ones) {
        o->graph.failed = 1;
        return;
    }
    for (int g = 0; g < l->groups; g++) ones[g] = 1.0f;
    int64_tensor(o, nm[0], gshape, 3);
    float_tensor(o, nm[2], gd, 1, ones, (size_t)l->groups);
    float_tensor(o, nm[3], gd, 1, ones + l->groups, (size_t)l->groups);
    free(ones);
    int64_tensor(o, nm[5], shape, 4);
    float_tensor(o, nm[7], cd, 4, l->gamma, (size_t)l->cout);
    char beta[96], scaled[96];
    snprintf(beta, sizeof beta, "%s.norm_beta", l->name);
    snprintf(scaled, sizeof scaled, "%s.gn_scaled", l->name);
    float_tensor(o, beta, cd, 4, l->beta, (size_t)l->cout);
    simple(o, "Reshape", x, nm[0], nm[1]);
    const char *in[3] = {nm[1], nm[2], nm[3]};
    node n;
    node_begin(&n, "InstanceNormalization", in, 3, nm[4]);
    attr_float(&n, "epsilon", NJ_MODEL_NORM_EPS);
    node_end(o, &n);
    simple(o, "Reshape", nm[4], nm[5], nm[6]);
    simple(o, "Mul", nm[6], nm[7], scaled);
    simple(o, "Add", scaled, beta, out);
}

/* One unit; writes its output name into out (size 96): `name` when given,
 * else "<unit>.out".  *h, *w: spatial size, updated. */
static void layer(onnx_writer *o, int unit, const char *x, int *h, int *w, const char *name, char *out)
{
    const nj_export_layer *l = &o->net->layers[unit];
    char in[96], pre[96], normed[96];
    snprintf(in, sizeof in, "%s", x);
    conv_weights(o, l);
    if (l->pad_mode == NJ_PAD_REFLECT && l->pad > 0) {
        char pads[96], padded[96];
        snprintf(pads, sizeof pads, "%s.pads", l->name);
        snprintf(padded, sizeof padded, "%s.padded", l->name);
        int64_t p[8] = {0, 0, l->pad, l->pad, 0, 0, l->pad, l->pad};
        int64_tensor(o, pads, p, 8);
        const char *pin[2] = {in, pads};
        node n;
        node_begin(&n, "Pad", pin, 2, padded);
        attr_string(&n, "mode", "reflect");
        node_end(o, &n);
        snprintf(in, sizeof in, "%s", padded);
    }
    int oh = (*h + 2 * l->pad - l->k) / l->stride + 1, ow = (*w + 2 * l->pad - l->k) / l->stride + 1;
    snprintf(pre, sizeof pre, "%s.conv", l->name);
    if (l->q) conv_int8(o, l, in, pre);
    else conv_node(o, l, in, pre);
    if (l->groups) {
        snprintf(normed, sizeof normed, "%s.norm", l->name);
        group_norm(o, l, pre, oh, ow, normed);
        snprintf(pre, sizeof pre, "%s", normed);
    }
    if (name) snprintf(out, 96, "%s", name);
    else snprintf(out, 96, "%s.out", l->name);
    if (l->act == NJ_ACT_ELU) {
        node n;
        const char *ein[1] = {pre};
        node_begin(&n, "Elu", ein, 1, out);
        attr_float(&n, "alpha", 1.0f);
        node_end(o, &n);
    } else if (l->act == NJ_ACT_SIGMOID) {
        simple(o, "Sigmoid", pre, NULL, out);
    } else {
        simple(o, "Identity", pre, NULL, out);
    }
    *h = oh;
    *w = ow;
}

static void upsample(onnx_writer *o, const char *x, const char *out)
{
    const char *in[3] = {x, "", "upsample_scales"};
    node n;
    node_begin(&n, "Resize", in, 3, out);
    attr_string(&n, "mode", "nearest");
    attr_string(&n, "coordinate_transformation_mode", "asymmetric");
    attr_string(&n, "nearest_mode", "floor");
    node_end(o, &n);
}

static void depth_graph(onnx_writer *o)
{
    const nj_model *m = o->net->model;
    const int S = m->cfg.stages;
    char cur[96], feat[NJ_MAX_STAGES][96], t[96];
    int h = o->net->height, w = o->net->width;
    const nj_depth_range r = o->net->depth_range;
    const float lo = 1.0f / r.far, hi = 1.0f / r.near, up[4] = {1, 1, 2, 2};
    int64_t four[1] = {4};
    scalar(o, "input_scale", 1.0f / NJ_MODEL_INPUT_STD);
    scalar(o, "input_shift", -NJ_MODEL_INPUT_MEAN / NJ_MODEL_INPUT_STD);
    scalar(o, "disparity_span", hi - lo);
    scalar(o, "disparity_low", lo);
    float_tensor(o, "upsample_scales", four, 1, up, 4);
    simple(o, "Mul", "image", "input_scale", "image_scaled");
    simple(o, "Add", "image_scaled", "input_shift", "image_standardised");
    snprintf(cur, sizeof cur, "image_standardised");
    for (int i = 0; i < S; i++) {
        layer(o, m->enc[i][0], cur, &h, &w, NULL, t);
        layer(o, m->enc[i][1], t, &h, &w, NULL, feat[i]);
        memcpy(cur, feat[i], sizeof cur);
    }
    for (int i = S - 1; i >= 0; i--) {
        char upn[96], cat[96];
        layer(o, m->dec[i][0], cur, &h, &w, NULL, t);
        snprintf(upn, sizeof upn, "%s.upsampled", o->net->layers[m->dec[i][0]].name);
        upsample(o, t, upn);
        h *= 2;
        w *= 2;
        if (i > 0) {
            snprintf(cat, sizeof cat, "%s.concat", o->net->layers[m->dec[i][1]].name);
            const char *in[2] = {upn, feat[i - 1]};
            node n;
            node_begin(&n, "Concat", in, 2, cat);
            attr_int(&n, "axis", 1);
            node_end(o, &n);
            snprintf(upn, sizeof upn, "%s", cat);
        }
        layer(o, m->dec[i][1], upn, &h, &w, NULL, cur);
    }
    layer(o, m->head[0], cur, &h, &w, "disparity", t);
    simple(o, "Mul", "disparity", "disparity_span", "inverse_depth_part");
    simple(o, "Add", "inverse_depth_part", "disparity_low", "inverse_depth");
    simple(o, "Reciprocal", "inverse_depth", NULL, "depth");
}

/* ValueInfoProto of a float tensor 1×c×h×w with a doc string. */
static void value_info(nj_pb *parent, int field, const char *name, int c, int h, int w, const char *doc)
{
    nj_pb shape, tt, type, vi;
    nj_pb_init(&shape);
    const int dims[4] = {1, c, h, w};
    for (int i = 0; i < 4; i++) {
        nj_pb d;
        nj_pb_init(&d);
        nj_pb_int(&d, 1, dims[i]);
        nj_pb_message(&shape, 1, &d);
        nj_pb_free(&d);
    }
    nj_pb_init(&tt);
    nj_pb_int(&tt, 1, T_FLOAT);
    nj_pb_message(&tt, 2, &shape);
    nj_pb_init(&type);
    nj_pb_message(&type, 1, &tt);
    nj_pb_init(&vi);
    nj_pb_string(&vi, 1, name);
    nj_pb_message(&vi, 2, &type);
    nj_pb_string(&vi, 3, doc);
    nj_pb_message(parent, field, &vi);
    if (vi.failed || type.failed || tt.failed || shape.failed) parent->failed = 1;
    nj_pb_free(&vi);
    nj_pb_free(&type);
    nj_pb_free(&tt);
    nj_pb_free(&shape);
}

static void graph_io(onnx_writer *o)
{
    const nj_export_net *net = o->net;
    char doc[512], mean[32], std[32];
    const int H = net->height, W = net->width;
    snprintf(doc, sizeof doc, "camera frame, RGB planar (NCHW) float32 in [0,1] (8-bit value / 255), "
             "1x3x%dx%d; standardised inside as (x - %s) / %s", H, W,
             nj_export_float_text(NJ_MODEL_INPUT_MEAN, mean, sizeof mean),
             nj_export_float_text(NJ_MODEL_INPUT_STD, std, sizeof std));
    value_info(&o->graph, 11, "image", 3, H, W, doc);
    value_info(&o->graph, 12, "disparity", 1, H, W,
               "sigmoid output s in (0,1) of the finest disparity head; near = large");
    snprintf(doc, sizeof doc, "depth = 1 / (1/%g + (1/%g - 1/%g) * disparity), between %g and %g, %s",
             (double)net->depth_range.far, (double)net->depth_range.near, (double)net->depth_range.far,
             (double)net->depth_range.near, (double)net->depth_range.far,
             net->metric ? "in metres" : "in model units (monocular training: up to an unknown scale)");
    value_info(&o->graph, 12, "depth", 1, H, W, doc);
}

static void metadata(nj_pb *model, const char *key, const char *value)
{
    nj_pb e;
    nj_pb_init(&e);
    nj_pb_string(&e, 1, key);
    nj_pb_string(&e, 2, value ? value : "");
    nj_pb_message(model, 14, &e);
    nj_pb_free(&e);
}

static int build_model(const nj_export_net *net, nj_pb *model)
{
    onnx_writer o;
    o.net = net;
    nj_pb_init(&o.graph);
    depth_graph(&o);
    nj_pb_string(&o.graph, 2, "nightjar_depth");
    nj_pb_string(&o.graph, 10, "nightjar depth network (finest scale), batch norm folded into the convs");
    graph_io(&o);
    nj_pb_init(model);
    nj_pb_int(model, 1, 7);                    /* ir_version 7 (opset 13 era) */
    nj_pb opset;
    nj_pb_init(&opset);
    nj_pb_string(&opset, 1, "");
    nj_pb_int(&opset, 2, 13);
    nj_pb_message(model, 8, &opset);
    nj_pb_free(&opset);
    nj_pb_string(model, 2, "nightjar");
    nj_pb_string(model, 3, NJ_VERSION);
    nj_pb_string(model, 6, "Self-supervised monocular depth network exported by nightjar: input 'image', "
                 "outputs 'disparity' and 'depth'");
    nj_pb_message(model, 7, &o.graph);
    nj_pb_free(&o.graph);
    char *arch = nj_export_architecture_json(net), *cfg = nj_train_config_to_json(net->cfg);
    metadata(model, "nightjar.architecture", arch);
    metadata(model, "nightjar.training_config", cfg);
    free(arch);
    free(cfg);
    return model->failed || !arch || !cfg ? -1 : 0;
}

int nj_export_onnx(const nj_export_net *net, const char *path, long *bytes, char *err, size_t errlen)
{
    nj_pb model;
    if (build_model(net, &model)) {
        nj_pb_free(&model);
        snprintf(err, errlen, "%s: out of memory building the ONNX graph", path);
        return -1;
    }
    nj_atomic_file a;
    if (nj_atomic_open(&a, path, err, errlen)) {
        nj_pb_free(&model);
        return -1;
    }
    int ok = fwrite(model.data, 1, model.len, a.f) == model.len;
    *bytes = (long)model.len;
    nj_pb_free(&model);
    return nj_atomic_close(&a, ok, err, errlen);
}

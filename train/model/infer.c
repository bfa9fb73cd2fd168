/* train/model/infer.c — single-frame inference with a depth/pose model (see infer.h). */
#include "train/model/infer.h"
#include "losses/depth.h"
#include "losses/pose.h"
#include <stdio.h>
#include <string.h>

#define INFER_ARENA_CHUNK (16u << 20)

int nj_infer_init(nj_infer *in, nj_model *m, int width, int height, char *err, size_t errlen)
{
    memset(in, 0, sizeof *in);
    if (!nj_model_size_ok(m, height, width)) {
        snprintf(err, errlen, "model input size %dx%d must be divisible by %d", width, height,
                 1 << m->cfg.stages);
        return -1;
    }
    if (!nj_depth_range_ok(m->cfg.depth_range)) {
        snprintf(err, errlen, "bad depth range %g..%g", m->cfg.depth_range.near, m->cfg.depth_range.far);
        return -1;
    }
    in->graph = nj_graph_new(INFER_ARENA_CHUNK);
    if (!in->graph) {
        snprintf(err, errlen, "out of memory");
        return -1;
    }
    nj_graph_set_training(in->graph, 0);
    nj_graph_set_grad(in->graph, 0);
    in->model = m;
    in->width = width;
    in->height = height;
    return 0;
}

void nj_infer_free(nj_infer *in)
{
    if (in->graph) nj_graph_free(in->graph);
    memset(in, 0, sizeof *in);
}

/* The image at network size as a 1×3×H×W tensor in the graph. */
static nj_tensor *network_input(nj_infer *in, const nj_image *im, char *err, size_t errlen)
{
    if (im->w == in->width && im->h == in->height)
        return nj_tensor_from(in->graph, 1, 3, in->height, in->width, im->data, 0);
    nj_image small;
    if (nj_image_resize(im, in->width, in->height, &small)) {
        snprintf(err, errlen, "out of memory resizing a %dx%d frame", im->w, im->h);
        return NULL;
    }
    nj_tensor *t = nj_tensor_from(in->graph, 1, 3, in->height, in->width, small.data, 0);
    nj_image_free(&small);
    return t;
}

static int graph_error(nj_infer *in, char *err, size_t errlen)
{
    snprintf(err, errlen, "%s", nj_graph_failed(in->graph) ? nj_graph_error(in->graph) : "out of memory");
    return -1;
}

int nj_infer_depth(nj_infer *in, const nj_image *im, int out_w, int out_h, float *depth,
                   float *disp, char *err, size_t errlen)
{
    nj_graph_reset(in->graph);
    err[0] = 0;
    nj_tensor *x = network_input(in, im, err, errlen);
    if (!x) return err[0] ? -1 : graph_error(in, err, errlen);
    nj_tensor *outs[4] = {NULL, NULL, NULL, NULL};
    if (nj_depth_forward(in->graph, in->model, x, outs)) return graph_error(in, err, errlen);
    nj_tensor *s = outs[0];
    if (s->h != out_h || s->w != out_w) s = nj_resize_bilinear(in->graph, s, out_h, out_w);
    if (!s) return graph_error(in, err, errlen);
    size_t n = (size_t)out_w * out_h;
    for (size_t i = 0; i < n; i++) {
        depth[i] = nj_depth_from_disparity_value(s->data[i], in->model->cfg.depth_range);
        if (disp) disp[i] = s->data[i];
    }
    return 0;
}

int nj_infer_motion(nj_infer *in, const nj_image *first, const nj_image *second,
                    const nj_camera *cam, double T[12], char *err, size_t errlen)
{
    nj_graph_reset(in->graph);
    err[0] = 0;
    nj_camera net_cam = {0, 0, 0, 0};
    if (in->model->cfg.pose_rays) {
        if (!cam) {
            snprintf(err, errlen, "this model's pose net sees ray directions (model.pose_rays): "
                                  "it needs the camera intrinsics");
            return -1;
        }
        net_cam = nj_camera_resize(*cam, first->w, first->h, in->width, in->height);
    }
    nj_tensor *a = network_input(in, first, err, errlen);
    nj_tensor *b = a ? network_input(in, second, err, errlen) : NULL;
    if (!b) return err[0] ? -1 : graph_error(in, err, errlen);
    nj_tensor *v = nj_pose_forward(in->graph, in->model, a, b, &net_cam);   /* ignored without rays */
    if (!v) return graph_error(in, err, errlen);
    double r[3] = {v->data[0], v->data[1], v->data[2]}, R[9];
    nj_rotvec_to_matrix(r, R);
    for (int i = 0; i < 3; i++) {
        for (int j = 0; j < 3; j++) T[4 * i + j] = R[3 * i + j];
        T[4 * i + 3] = v->data[3 + i];
    }
    return 0;
}

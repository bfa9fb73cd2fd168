/* train/export/export.c — `nightjar export`: loads the checkpoint, prepares the
 * export view and writes the chosen format (export.h). */
#include "train/loop/loop.h"
#include "train/export/export.h"
#include <stdio.h>
#include <string.h>

static int write_export(const nj_export_net *net, const nj_export_options *a, long *bytes, char *err,
                        size_t errlen)
{
    if (a->format == NJ_EXPORT_C) return nj_export_c(net, a->out, a->prefix, bytes, err, errlen);
    if (a->format == NJ_EXPORT_ONNX) return nj_export_onnx(net, a->out, bytes, err, errlen);
    return nj_export_safetensors(net, a->out, bytes, err, errlen);
}

static void report(const nj_export_net *net, const nj_export_options *a, long bytes)
{
    if (a->format == NJ_EXPORT_C) {
        size_t len = strlen(a->out);
        int stem = len > 2 && !strcmp(a->out + len - 2, ".c") ? (int)len - 2 : (int)len;
        printf("export: wrote %.*s.c and %.*s.h, %ld bytes (C99 depth runtime, %s, input %dx%d)\n", stem,
               a->out, stem, a->out, bytes, net->int8 ? "int8 weights and activations" : "f32 weights", net->width,
               net->height);
        if (net->int8)
            printf("export: activation scales from %d frames of %s (%g-th percentile of |x|)\n", net->calibrated,
                   a->calib_data, (double)net->percentile);
    } else if (a->format == NJ_EXPORT_ONNX) {
        printf("export: wrote %s, %ld bytes (ONNX opset 13 depth net, %s weights, input 1x3x%dx%d)\n", a->out,
               bytes, net->int8 ? "int8" : "f32", net->height, net->width);
    } else {
        printf("export: wrote %s, %ld bytes (safetensors, %d layers, %s weights)\n", a->out, bytes, net->nlayers,
               net->int8 ? "int8" : "f32");
    }
}

int nj_export_run(const nj_export_options *a, char *err, size_t errlen)
{
    nj_train_config cfg;
    nj_model m;
    nj_export_net net;
    if (nj_checkpoint_load(a->model, &m, &cfg, NULL, err, errlen)) return -1;
    int w = a->width ? a->width : cfg.width, h = a->height ? a->height : cfg.height;
    int rc = -1;
    long bytes = 0;
    if (nj_export_prepare(&net, &m, &cfg, a->int8, w, h, err, errlen) == 0) {
        net.source = a->model;
        int calib = a->calib_data && a->int8 && a->format == NJ_EXPORT_C;
        if ((!calib || nj_export_calibrate(&net, a->calib_data, a->calib_frames > 0 ? a->calib_frames : 32,
                                          NJ_EXPORT_CALIB_PERCENTILE, err, errlen) == 0) &&
            write_export(&net, a, &bytes, err, errlen) == 0) {
            report(&net, a, bytes);
            rc = 0;
        }
        nj_export_release(&net);
    }
    nj_model_free(&m);
    return rc;
}

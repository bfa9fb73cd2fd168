/* train/export/export.c — `nightjar export`: command line of the exports (export.h). */
#include "train/loop/checkpoint.h"
#include "train/export/export.h"
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

typedef struct export_args {
    const char *model, *format, *out;
    int int8;
    int width, height;       /* 0: the training size */
} export_args;

static void usage(FILE *f)
{
    fprintf(f,
        "usage: nightjar export --model CKPT --format c|onnx|safetensors [--weights f32|int8]\n"
        "                       [--size WxH] --out PATH\n"
        "  c            PATH.c + PATH.h (PATH may end in .c): dependency-free C99 code computing the\n"
        "               depth map of one 8-bit RGB frame of a fixed size (libm only, no malloc,\n"
        "               no threads; the caller passes a scratch buffer sized in the header)\n"
        "  onnx         PATH: ONNX (opset 13) graph of the depth net: input \"image\" 1x3xHxW RGB\n"
        "               in [0,1], outputs \"disparity\" and \"depth\"\n"
        "  safetensors  PATH: every weight, with the architecture and training config as JSON\n"
        "  Batch norm is folded into the convs; group norm is kept as an explicit layer.\n"
        "  --weights int8  per-output-channel symmetric int8 weights with float scales\n"
        "                  (activations stay float); default f32\n"
        "  --size WxH      input size of the c and onnx exports (default: the training size)\n"
        "  Exit status: 0 done, 1 failure, 2 bad usage.\n");
}

static int bad(const char *fmt, const char *arg)
{
    fprintf(stderr, "nightjar export: ");
    fprintf(stderr, fmt, arg);
    fprintf(stderr, " (see 'nightjar export --help')\n");
    return -1;
}

static int parse_size(const char *s, int *w, int *h)
{
    char *end = NULL;
    long a = strtol(s, &end, 10);
    if (end == s || (*end != 'x' && *end != 'X')) return -1;
    const char *p = end + 1;
    long b = strtol(p, &end, 10);
    if (end == p || *end || a < 1 || b < 1 || a > 16384 || b > 16384) return -1;
    *w = (int)a;
    *h = (int)b;
    return 0;
}

static int parse_value(export_args *a, const char *o, const char *v)
{
    if (!strcmp(o, "--model")) a->model = v;
    else if (!strcmp(o, "--out")) a->out = v;
    else if (!strcmp(o, "--format")) {
        if (strcmp(v, "c") && strcmp(v, "onnx") && strcmp(v, "safetensors"))
            return bad("--format must be c, onnx or safetensors, not '%s'", v);
        a->format = v;
    } else if (!strcmp(o, "--weights")) {
        if (strcmp(v, "f32") && strcmp(v, "int8")) return bad("--weights must be f32 or int8, not '%s'", v);
        a->int8 = !strcmp(v, "int8");
    } else if (parse_size(v, &a->width, &a->height)) {
        return bad("--size needs WxH with positive integers, not '%s'", v);
    }
    return 0;
}

static int parse_args(int argc, char **argv, export_args *a)
{
    static const char *const with_value[] = {"--model", "--format", "--weights", "--size", "--out"};
    memset(a, 0, sizeof *a);
    for (int i = 1; i < argc; i++) {
        const char *o = argv[i];
        int known = 0;
        for (size_t k = 0; k < sizeof with_value / sizeof *with_value; k++) known |= !strcmp(o, with_value[k]);
        if (!known) return bad(o[0] == '-' ? "unknown option '%s'" : "unexpected argument '%s'", o);
        if (i + 1 >= argc) return bad("option %s needs a value", o);
        if (parse_value(a, o, argv[++i])) return -1;
    }
    if (!a->model) return bad("%s", "--model CKPT is required");
    if (!a->format) return bad("%s", "--format c|onnx|safetensors is required");
    if (!a->out) return bad("%s", "--out PATH is required");
    return 0;
}

static int write_export(const nj_export_net *net, const export_args *a, long *bytes, char *err, size_t errlen)
{
    if (!strcmp(a->format, "c")) return nj_export_c(net, a->out, bytes, err, errlen);
    if (!strcmp(a->format, "onnx")) return nj_export_onnx(net, a->out, bytes, err, errlen);
    return nj_export_safetensors(net, a->out, bytes, err, errlen);
}

static void report(const nj_export_net *net, const export_args *a, long bytes)
{
    if (!strcmp(a->format, "c")) {
        size_t len = strlen(a->out);
        int stem = len > 2 && !strcmp(a->out + len - 2, ".c") ? (int)len - 2 : (int)len;
        printf("export: wrote %.*s.c and %.*s.h, %ld bytes (C99 depth runtime, %s weights, input %dx%d)\n", stem,
               a->out, stem, a->out, bytes, net->int8 ? "int8" : "f32", net->width, net->height);
    } else if (!strcmp(a->format, "onnx")) {
        printf("export: wrote %s, %ld bytes (ONNX opset 13 depth net, %s weights, input 1x3x%dx%d)\n", a->out,
               bytes, net->int8 ? "int8" : "f32", net->height, net->width);
    } else {
        printf("export: wrote %s, %ld bytes (safetensors, %d layers, %s weights)\n", a->out, bytes, net->nlayers,
               net->int8 ? "int8" : "f32");
    }
}

int nj_export_main(int argc, char **argv)
{
    if (argc >= 2 && (!strcmp(argv[1], "--help") || !strcmp(argv[1], "-h"))) {
        usage(stdout);
        return 0;
    }
    export_args a;
    if (parse_args(argc, argv, &a)) return 2;
    nj_train_config cfg;
    nj_model m;
    nj_export_net net;
    char err[1024] = "";
    if (nj_checkpoint_load(a.model, &m, &cfg, NULL, err, sizeof err)) {
        fprintf(stderr, "nightjar export: %s\n", err);
        return 1;
    }
    int w = a.width ? a.width : cfg.width, h = a.height ? a.height : cfg.height;
    int rc = 1;
    long bytes = 0;
    if (nj_export_prepare(&net, &m, &cfg, a.int8, w, h, err, sizeof err) == 0) {
        net.source = a.model;
        if (write_export(&net, &a, &bytes, err, sizeof err) == 0) {
            report(&net, &a, bytes);
            rc = 0;
        }
        nj_export_release(&net);
    }
    if (rc) fprintf(stderr, "nightjar export: %s\n", err);
    nj_model_free(&m);
    return rc;
}

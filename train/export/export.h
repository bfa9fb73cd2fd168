/* train/export/export.h — `nightjar export`: a trained model for use outside nightjar.
 *
 * The networks' fixed numbers (normalisation eps, input standardisation,
 * group-count rule) come from train/model/model.h; the depth range from the
 * model's config.
 *
 * Every export starts from an nj_export_net: the checkpoint's layers with
 * batch normalisation folded into the preceding conv (Ioffe & Szegedy 2015:
 * inference-mode BN is a per-channel affine map, so it merges into the conv's
 * weights and bias).  Group normalisation (Wu & He 2018) uses per-frame
 * statistics and cannot be folded; it is kept as an explicit layer with its
 * group count, gamma and beta, and the C and ONNX exports compute it.
 *
 * With int8 weights each folded conv also gets a per-output-channel
 * symmetric quantisation: scale[o] = max|w[o,:]| / 127 (1 for an all-zero
 * channel), q = round-half-even(w / scale) clamped to [-127, 127].  The ONNX
 * and safetensors exports store these weights (ONNX computes in float); the C
 * export computes in integers: int8 activations too, with one symmetric
 * scale per layer output measured on frames of a dataset
 * (nj_export_calibrate), int32 sums, requantised per layer (export_c.c
 * documents the scheme in the generated header).
 *
 * Formats (each file written atomically, data/atomic.h):
 *   c            PATH.c + PATH.h: dependency-free C99 depth runtime (export_c.c)
 *   onnx         PATH: opset-13 ONNX graph of the depth net (export_onnx.c)
 *   safetensors  PATH: every folded tensor + architecture/config JSON
 *                (export_safetensors.c)
 * The C and ONNX exports compute only the depth net's finest disparity
 * (scale 0) and depth at a fixed input size.
 */
#ifndef NJ_EXPORT_H
#define NJ_EXPORT_H
#include "train/loop/loop.h"
#include "train/model/model.h"
#include <stddef.h>
#include <stdint.h>

typedef struct nj_export_layer {
    char name[64];            /* unit name, e.g. "enc0.1", "head0", "pose2" */
    int cin, cout, k, stride, pad;
    nj_pad_mode pad_mode;
    nj_act_kind act;
    float *w;                 /* folded weights cout×cin×k×k */
    float *b;                 /* folded bias, cout */
    int8_t *q;                /* int8 weights (int8 exports) or NULL */
    float *scale;             /* per-output-channel scales (int8) or NULL */
    int groups;               /* group norm: number of groups; 0 = none */
    const float *gamma, *beta;/* group norm affine (owned by the model) */
} nj_export_layer;

typedef struct nj_export_net {
    const nj_model *model;
    const nj_train_config *cfg;
    nj_export_layer layers[NJ_MAX_UNITS];   /* indexed like model->units */
    int nlayers;
    int int8;                 /* weights quantised */
    int width, height;        /* fixed input size of the C and ONNX exports */
    nj_depth_range depth_range;   /* the model's (model.depth_range) */
    int metric;               /* trained on stereo only: depth in metres */
    const char *source;       /* checkpoint file name, for comments and metadata */
    /* int8 activations (nj_export_calibrate): real value = q * scale */
    int calibrated;           /* number of frames measured; 0 = not calibrated */
    float in_scale;           /* the standardised input's scale */
    float out_scale[NJ_MAX_UNITS];   /* each layer output's scale (indexed like units) */
    float in_scale_of[NJ_MAX_UNITS]; /* the scale of each layer's input */
    float percentile;         /* of |activation| that maps to 127 */
} nj_export_net;

/* Builds the export view of a loaded model: folds batch norm, quantises when
 * int8, checks that width×height suits the depth net.  Returns 0 or -1 with
 * a one-line message. */
int nj_export_prepare(nj_export_net *net, const nj_model *m, const nj_train_config *cfg,
                      int int8, int width, int height, char *err, size_t errlen);
void nj_export_release(nj_export_net *net);

/* The shortest "%.Ng" text (N = 1..9) that reads back as exactly v: how the
 * model's facts (train/model/model.h: eps, input standardisation) are written
 * into generated code, doc strings and JSON texts, never typed again.
 * Returns buf. */
const char *nj_export_float_text(float v, char *buf, size_t n);

/* Quantises n_out rows of `per_out` weights (symmetric, per row) into q and
 * scale as described above. */
void nj_export_quantise(const float *w, int n_out, int per_out, int8_t *q, float *scale);

/* Runs the folded f32 net (OpenBLAS) on `frames` frames of the training split
 * of DATASET (spread evenly over its sequences, resized to the export size)
 * and sets the activation scales: a layer output's scale is the `percentile`
 * (e.g. 99.99) of |value| over all its values on those frames, divided by
 * 127; the decoder output that is concatenated with an encoder feature shares
 * that feature's scale (the larger of the two), so the concatenation needs no
 * rescaling.  Returns 0 or -1 with a one-line message. */
int nj_export_calibrate(nj_export_net *net, const char *dataset, int frames, float percentile, char *err,
                        size_t errlen);

/* Writers.  `path` is the --out argument.  Each returns 0 or -1 with a
 * one-line message naming the file.  *bytes receives the total size written
 * (for the C export: .c plus .h). */
int nj_export_c(const nj_export_net *net, const char *path, const char *prefix, long *bytes, char *err,
                size_t errlen);
int nj_export_onnx(const nj_export_net *net, const char *path, long *bytes, char *err, size_t errlen);
int nj_export_safetensors(const nj_export_net *net, const char *path, long *bytes, char *err,
                          size_t errlen);

/* The architecture as a JSON object text (malloc'd): model config, channel
 * widths, input normalisation, depth range and every layer. */
char *nj_export_architecture_json(const nj_export_net *net);

/* The formats, in the order `--format` lists them (train/cli/cmd_export.c). */
typedef enum { NJ_EXPORT_C, NJ_EXPORT_ONNX, NJ_EXPORT_SAFETENSORS } nj_export_format;

typedef struct nj_export_options {
    const char *model;        /* checkpoint */
    const char *out;          /* PATH (the C export writes PATH.c and PATH.h) */
    nj_export_format format;
    int int8;                 /* int8 weights, else f32 */
    int width, height;        /* input size of the c and onnx exports; 0: the training size */
    const char *prefix;       /* C export: prefix of every external symbol (NULL: "nightjar_") */
    const char *calib_data;   /* C int8: dataset whose training frames set the activation scales */
    int calib_frames;         /* how many of its frames (default 32) */
} nj_export_options;

/* The default --symbol-prefix and the percentile calibration uses. */
#define NJ_EXPORT_PREFIX "nightjar_"
#define NJ_EXPORT_CALIB_PERCENTILE 99.99f

/* Loads o->model, prepares and writes the export, prints one "export: wrote"
 * line.  Returns 0, or -1 with a one-line message. */
int nj_export_run(const nj_export_options *o, char *err, size_t errlen);

#endif

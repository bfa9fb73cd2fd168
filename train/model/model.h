/* train/model/model.h — nightjar's depth and pose networks.
 *
 * Depth net: encoder of `stages` stages at strides 2..2^stages, each two 3×3
 * convs (the first with stride 2) + normalisation + ELU, channel widths
 * 16·2^i·width; decoder mirroring it: 3×3 conv + norm + ELU, nearest ×2
 * upsampling, concatenation with the encoder feature of the same resolution
 * (skip), 3×3 conv + norm + ELU; sigmoid disparity heads (3×3 conv) at the
 * finest `scales` decoder levels.  Decoder convs use reflection padding.
 * Output scale s has size H/2^s × W/2^s; H and W must be divisible by 2^stages.
 *
 * Pose net (normalised like the depth net unless pose_norm is 0): the two
 * frames concatenated on channels (NJ_MODEL_POSE_FRAME_CHANNELS; with
 * `pose_rays` NJ_MODEL_POSE_RAY_CHANNELS more: each pixel's ray direction
 * (u − cx)/fx and (v − cy)/fy from the item's intrinsics), a stack of
 * stride-2 convs (7×7, 5×5, then 3×3) + norm + ELU, a 1×1 conv to 6 numbers,
 * spatial mean; the first three times `rotation_scale` (pose_scale when 0) are an axis-angle
 * rotation (radians), the last three times `pose_scale` a translation: the
 * motion mapping points of the first frame's camera into the second's.
 *
 * Parameters are registered in groups: 0 depth encoder, 1 depth decoder,
 * 2 pose net; batch-norm running statistics are kept in `buffers`.
 *
 * The facts below are the networks' own numbers that code outside this
 * module must repeat exactly (exporters write them into C and ONNX files,
 * weight loaders invert them): they are defined here once, and everything
 * else uses these names, so a change here cannot leave an exporter behind.
 */
#ifndef NJ_MODEL_H
#define NJ_MODEL_H
#include "nn/param.h"
#include "nn/ops.h"
#include "losses/depth.h"
#include "nn/geom/camera.h"
#include <stdint.h>

/* Epsilon of every normalisation layer (batch and group norm): x̂ = (x − μ)/√(σ² + eps). */
#define NJ_MODEL_NORM_EPS 1e-5f
/* Fixed input standardisation of both nets, every channel: (x − MEAN)/STD, x in [0, 1]. */
#define NJ_MODEL_INPUT_MEAN 0.45f
#define NJ_MODEL_INPUT_STD 0.225f
/* Default depth range (model.depth_range): disparity 1 is NEAR, 0 is FAR (losses/depth.h). */
#define NJ_MODEL_DEPTH_NEAR 0.1f
#define NJ_MODEL_DEPTH_FAR 100.0f

/* Input channels of the pose net: two RGB frames, plus the two ray-direction
 * channels with pose_rays. */
#define NJ_MODEL_POSE_FRAME_CHANNELS 6
#define NJ_MODEL_POSE_RAY_CHANNELS 2

#define NJ_MAX_STAGES 6
#define NJ_MAX_UNITS 48

enum { NJ_GROUP_ENCODER = 0, NJ_GROUP_DECODER = 1, NJ_GROUP_POSE = 2 };
typedef enum { NJ_NORM_NONE = 0, NJ_NORM_BATCH = 1, NJ_NORM_GROUP = 2 } nj_norm_kind;
typedef enum { NJ_ACT_NONE = 0, NJ_ACT_ELU = 1, NJ_ACT_SIGMOID = 2 } nj_act_kind;

typedef struct nj_model_config {
    int stages;            /* depth encoder stages, 1..6 (default 5) */
    float width;           /* channel multiplier (default 1) */
    int scales;            /* disparity outputs, 1..4 (default 4) */
    nj_norm_kind norm;     /* default batch */
    float head_init;       /* initial sigmoid output of the heads (default 0.01: far) */
    int pose;              /* 1: build the pose net */
    int pose_stages;       /* stride-2 convs in the pose net (default 5) */
    float pose_width;
    float pose_scale;      /* translation output multiplier (default 0.5) */
    float rotation_scale;  /* rotation output multiplier; 0 (default) = pose_scale */
    int pose_norm;         /* 1 (default): the pose net's layers are normalised like the
                              depth net's (norm); 0: conv + bias + ELU only — batch
                              statistics over a few frame pairs blur the small motion
                              differences the pose net must read */
    int pose_rays;         /* 1: the pose net also sees the ray direction of every pixel
                              (default 0): where the focus of expansion lies relative to
                              the principal point is what separates a sideways or vertical
                              translation from a turn; a convolutional net that averages
                              over the image cannot otherwise tell where a pixel is */
    float bn_momentum;     /* default 0.1 */
    nj_depth_range depth_range; /* what the disparity heads' outputs mean (default
                              NJ_MODEL_DEPTH_NEAR..FAR); the nets do not use it,
                              the loss, inference and exports do */
    unsigned seed;         /* initialisation seed */
} nj_model_config;

/* conv + optional normalisation + optional activation */
typedef struct nj_unit {
    nj_param *w, *b, *gamma, *beta, *run_mean, *run_var;
    int cin, cout, k, stride, pad;
    nj_pad_mode pad_mode;
    nj_norm_kind norm;
    nj_act_kind act;
} nj_unit;

typedef struct nj_model {
    nj_model_config cfg;
    nj_params params, buffers;
    nj_unit units[NJ_MAX_UNITS];
    int nunits;
    int enc[NJ_MAX_STAGES][2];     /* unit indices */
    int dec[NJ_MAX_STAGES][2];
    int head[4];
    int pose_units[NJ_MAX_STAGES + 1], npose;
} nj_model;

void nj_model_config_default(nj_model_config *cfg);
/* Builds and initialises the model; returns 0 or -1 with a message in err. */
int nj_model_init(nj_model *m, const nj_model_config *cfg, char *err, size_t errlen);
void nj_model_free(nj_model *m);
/* Scalars the architecture would hold — parameters and batch-norm buffers —
 * computed without building it (readers bound a file's claims with it
 * before allocating).  Both 0 for an invalid stage/scale count. */
void nj_model_count(const nj_model_config *cfg, uint64_t *params, uint64_t *buffers);

/* Groups of a group-norm layer with `channels` channels: 8 when they divide
 * evenly, else 4, else 1. */
int nj_model_norm_groups(int channels);

/* Depth net forward on N×3×H×W images in [0, 1]; disp[s] receives the
 * sigmoid disparity at scale s for s < cfg.scales. */
int nj_depth_forward(nj_graph *g, nj_model *m, nj_tensor *img, nj_tensor **disp);
/* Pose net forward on two N×3×H×W frames → N×6×1×1 (first → second camera).
 * cams: the N items' intrinsics at H×W; needed with cfg.pose_rays (the graph
 * fails without them), ignored otherwise (may be NULL). */
nj_tensor *nj_pose_forward(nj_graph *g, nj_model *m, nj_tensor *first, nj_tensor *second,
                           const nj_camera *cams);

/* m's learned parameters (weights, biases, norm scales and shifts) in unit
 * order, the order replicas combine gradients in; writes up to cap of them
 * into out (may be NULL) and returns how many the units hold. */
int nj_model_learned(nj_model *m, nj_param **out, int cap);

/* A twin of m for a thread replica (train/loop/step_replicas.h): the same
 * architecture whose learned parameters share m's values but have their own
 * gradient buffers, and whose batch-norm buffers are private copies (training
 * mode never reads them; each replica updates its own copy with the same
 * synchronised statistics).  Owns only `records` and `store`. */
typedef struct nj_model_twin {
    nj_model m;
    nj_param *records;     /* the parameter records the twin's units point to */
    float *store;          /* their gradients and buffers */
} nj_model_twin;
/* 0, or -1 when out of memory (nothing held). */
int nj_model_twin_init(nj_model_twin *t, nj_model *m);
void nj_model_twin_free(nj_model_twin *t);

/* Forward multiply-adds ×2 (FLOPs) of the depth net at h×w, and of one pose pair. */
double nj_depth_flops(const nj_model *m, int h, int w);
double nj_pose_flops(const nj_model *m, int h, int w);
/* Non-zero when h and w are usable input sizes: multiples of 2^stages with at
 * least 2 pixels per side at the coarsest level. */
int nj_model_size_ok(const nj_model *m, int h, int w);

/* Running a trained model on single frames is part of this module's public
 * face (after the declarations it builds on). */
#include "train/model/infer.h"

#endif

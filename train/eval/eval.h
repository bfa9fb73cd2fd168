/* train/eval/eval.h — scoring and using a trained model: `nightjar eval`
 * (eval.c: depth metrics beside three baselines, per depth band and region,
 * trajectory error; metrics.json) and `nightjar predict` (predict.c: depth
 * maps, previews and point clouds of frames).  The command lines are in
 * train/cli/cmd_eval.c and cmd_predict.c; these functions take their options. */
#ifndef NJ_EVAL_H
#define NJ_EVAL_H
#include "data/dataset.h"
#include "train/eval/colormap.h"   /* depth pictures: part of this module's public face */
#include "nn/geom/camera.h"
#include "nn/geom/lens.h"
#include <stddef.h>

typedef struct nj_eval_options {
    const char *model, *data;  /* checkpoint, dataset description */
    const char *out;           /* metrics.json to write, or NULL */
    nj_split split;
    float depth_cap;           /* depth cap in metres (--max-depth) */
    double camera_height;      /* metres: metric scale from the ground plane; 0 = not given */
    int threads;               /* 0 = all cores */
} nj_eval_options;

/* Split test, depth cap NJ_EVAL_DEPTH_CAP, everything else zero. */
void nj_eval_options_default(nj_eval_options *o);
/* Scores the model on the split, prints the table on stdout and writes
 * o->out when set.  Returns 0, or -1 with a one-line message. */
int nj_eval_run(const nj_eval_options *o, char *err, size_t errlen);

typedef struct nj_predict_options {
    const char *model;         /* checkpoint */
    const char *input;         /* a frame or a folder of frames */
    const char *out;           /* output folder (created) */
    int has_camera;            /* camera holds intrinsics at the input's size */
    nj_camera camera;
    nj_lens lens;              /* with has_camera: its lens distortion (kind NJ_LENS_NONE: none);
                                  frames are undistorted to a pinhole view (data/undistort.h)
                                  and every output is in that view */
    int ply;                   /* also write NAME.points.ply */
    double camera_height;      /* metres: metric scale from the ground plane; 0 = not given */
    int threads;               /* 0 = all cores */
} nj_predict_options;

void nj_predict_options_default(nj_predict_options *o);
/* Writes the outputs of every input frame (see predict.c).  A frame that
 * fails is reported on stderr ("nightjar predict: ...") and the others go
 * on.  Returns 0 when every frame was written, else -1 with a one-line
 * message (the setup's failure, or how many frames failed). */
int nj_predict_run(const nj_predict_options *o, char *err, size_t errlen);

#endif

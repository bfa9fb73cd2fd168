/* train/model/infer.h — running a trained model on single frames (evaluation,
 * prediction): inference mode (batch-norm running statistics, no gradient
 * recording), input resized to the model's training size, the finest
 * disparity resized back to the requested size (bilinear, half-pixel
 * centres) and converted to depth with the model's depth range
 * (model.cfg.depth_range, losses/depth.h). */
#ifndef NJ_INFER_H
#define NJ_INFER_H
#include "data/image.h"
#include "train/model/model.h"
#include <stddef.h>

typedef struct nj_infer {
    nj_model *model;
    nj_graph *graph;
    int width, height;          /* network input size (the training size) */
} nj_infer;

/* Returns 0, or -1 with a message when the size does not suit the model, its
 * depth range is invalid or memory runs out.  The model must outlive the nj_infer. */
int nj_infer_init(nj_infer *in, nj_model *m, int width, int height, char *err, size_t errlen);
void nj_infer_free(nj_infer *in);
/* Depth (out_w·out_h floats, row-major) of an image of any size.  When
 * `disp` is non-NULL it receives the sigmoid disparity at the same size.
 * Returns 0 or -1 with err. */
int nj_infer_depth(nj_infer *in, const nj_image *im, int out_w, int out_h, float *depth,
                   float *disp, char *err, size_t errlen);
/* Camera motion between two frames: T (row-major 3×4 [R | t]) maps points of
 * the first frame's camera into the second's.  cam: the frames' intrinsics at
 * the first frame's size — needed by a pose net with model.pose_rays (an
 * error without), ignored otherwise (may be NULL).  Returns 0 or -1 with err. */
int nj_infer_motion(nj_infer *in, const nj_image *first, const nj_image *second,
                    const nj_camera *cam, double T[12], char *err, size_t errlen);

#endif

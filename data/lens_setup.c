/* data/lens_setup.c — a sequence's lens and raw stereo rig turned into the
 * maps its frames are resampled through (data/undistort.h), once per
 * sequence at validation, when the frame size is known. */
#include "data/dataset.h"
#include <stdlib.h>
#include <string.h>

static const double IDENTITY[9] = {1, 0, 0, 0, 1, 0, 0, 0, 1};

const nj_undistort *nj_sequence_undistort(const nj_sequence *s, int right)
{
    if (!s->undistort || (right && !s->rig)) return NULL;
    return &s->undistort[right ? 1 : 0];
}

int nj_sequence_lens_setup(nj_sequence *s, nj_problems *pr)
{
    if ((s->lens.kind == NJ_LENS_NONE && !s->rig) || s->undistort || s->width <= 0 || s->height <= 0) return 0;
    /* a bad focal length or pose was reported by the parser already */
    if (!nj_camera_valid(s->raw_camera) || (s->rig && !nj_camera_valid(s->right_camera))) return 0;
    nj_lens_view v[2];
    memset(v, 0, sizeof v);
    v[0] = (nj_lens_view){.w = s->width, .h = s->height, .src = s->raw_camera, .lens = s->lens};
    memcpy(v[0].R, IDENTITY, sizeof IDENTITY);
    int n = 1;
    char why[512];
    if (s->rig) {
        double b;
        if (nj_rectify_rotations(s->right_rot, s->right_pos, v[0].R, v[1].R, &b, why, sizeof why)) return 0;
        v[1].w = s->width;
        v[1].h = s->height;
        v[1].src = s->right_camera;
        v[1].lens = s->right_lens;
        n = 2;
    }
    s->undistort = calloc(2, sizeof *s->undistort);
    if (!s->undistort) {
        nj_problem(pr, "%s: out of memory", s->images);
        return 1;
    }
    if (nj_undistort_init(s->undistort, v, n, why, sizeof why)) {
        nj_problem(pr, "%s: sequence \"%s\": %s", s->images, s->name ? s->name : "?", why);
        free(s->undistort);
        s->undistort = NULL;
        return 1;
    }
    s->camera = s->undistort[0].view.out;
    return 0;
}

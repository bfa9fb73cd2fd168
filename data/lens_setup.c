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

/* " k1 -0.28 k2 0.07 ..." (the non-zero coefficients; " none" when all are 0). */
static int coeffs(const nj_lens *L, char *out, size_t len)
{
    int n, k = 0, any = 0;
    const char *const *names = nj_lens_coeff_names(L->kind, &n);
    out[0] = 0;
    for (int i = 0; i < n && (size_t)k < len; i++)
        if (L->c[i] != 0) {
            k += snprintf(out + k, len - (size_t)k, " %s %.6g", names[i], L->c[i]);
            any = 1;
        }
    if (!any) snprintf(out, len, " (all coefficients 0)");
    return k;
}

void nj_sequence_lens_describe(const nj_sequence *s, FILE *f)
{
    if (!s->undistort) return;
    char a[160], b[160];
    nj_camera r = s->raw_camera, c = s->camera;
    coeffs(&s->lens, a, sizeof a);
    fprintf(f, "    camera fx %.6g fy %.6g cx %.6g cy %.6g, lens %s%s\n", r.fx, r.fy, r.cx, r.cy,
            nj_lens_kind_name(s->lens.kind), a);
    if (s->rig) {
        nj_camera q = s->right_camera;
        coeffs(&s->right_lens, b, sizeof b);
        fprintf(f, "    right camera fx %.6g fy %.6g cx %.6g cy %.6g, lens %s%s, at (%.4g, %.4g, %.4g) m\n", q.fx,
                q.fy, q.cx, q.cy, nj_lens_kind_name(s->right_lens.kind), b, s->right_pos[0], s->right_pos[1],
                s->right_pos[2]);
    }
    fprintf(f, "    %s to pinhole fx %.6g fy %.6g cx %.6g cy %.6g at %dx%d (every pixel inside the frame)%s\n",
            s->rig ? "rectified" : "undistorted", c.fx, c.fy, c.cx, c.cy, s->width, s->height,
            s->rig ? ", both cameras" : "");
}

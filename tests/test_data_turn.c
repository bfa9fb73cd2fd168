/* tests/test_data_turn.c — the turn augmentation's image warp (nj_turn_planes,
 * data/augment.h) against two outside implementations of the rotation
 * homography K·R·K⁻¹ (tests/ref/turn_ref.py via /usr/bin/python3):
 *   - OpenCV's cv2.warpPerspective (bilinear, BORDER_REPLICATE), which takes
 *     the recorded → turned homography and inverts it itself, so the
 *     direction of the turn is checked by code we did not write.  OpenCV
 *     rounds sample positions to 1/32 pixel (its INTER_TAB_SIZE), so a value
 *     may differ by up to |∇I|·√2/64; on the smooth images used with it
 *     (|∇I| ≤ GRAD_MAX per pixel, measured here) that is CV_TOL;
 *   - SciPy's ndimage.map_coordinates (order 1, mode "nearest" = edge
 *     clamping) at H⁻¹·p from numpy.linalg.inv: exact bilinear, so SP_TOL
 *     (float32 rounding) holds on every image, random noise included.
 * R comes from SciPy's Rotation.from_rotvec on the same rotation vector.
 * Cases: a turn to each side, one of 8° (many pixels from outside the frame,
 * so the edge rule matters), a roll alone, a turn with a roll and a pitch,
 * non-square pixels, an off-centre principal point and a mirrored camera
 * (cx' = W − 1 − cx, as after a flip).  A zero turn
 * must give the input back (to SP_TOL: the positions go through K⁻¹ and K in
 * float arithmetic). */
#include "data/augment.h"
#include "data/npy.h"
#include "nn/rng.h"
#include "tests/check.h"
#include "tests/torch_ref.h"
#include <math.h>
#include <stdio.h>
#include <stdlib.h>

/* float32 sample positions (half an ulp at 64 px: 3.8e-6 px) times neighbour
 * differences of up to 1 (the noise image), plus float32 value rounding */
#define SP_TOL 1e-5
#define GRAD_MAX 0.12    /* the smooth images' largest neighbour difference (checked below) */
#define CV_TOL (GRAD_MAX * 1.4143 / 64 + 1e-6)

typedef struct tcase {
    const char *name;
    int planes, w, h, noise;   /* noise: uniform random pixels instead of the smooth image */
    nj_camera cam;
    double deg[3];             /* rotation vector, degrees */
} tcase;

static const tcase CASES[] = {
    {"left3", 3, 80, 48, 0, {40.0f, 42.0f, 41.3f, 22.7f}, {0, 3.0, 0}},
    {"right8", 1, 64, 40, 0, {30.0f, 30.0f, 25.0f, 21.5f}, {0, -8.0, 0}},
    {"mirrored", 3, 80, 48, 0, {40.0f, 42.0f, 79 - 41.3f, 22.7f}, {0, 1.5, 0}},
    {"roll", 3, 80, 48, 0, {40.0f, 42.0f, 41.3f, 22.7f}, {0, 0, 4.0}},
    {"all3", 3, 80, 48, 0, {40.0f, 42.0f, 41.3f, 22.7f}, {-1.0, 2.0, -1.5}},
    {"noise", 2, 50, 30, 1, {28.0f, 26.0f, 24.5f, 14.5f}, {0, 2.5, 1.0}},
};
enum { NCASES = sizeof CASES / sizeof CASES[0] };

static float *image_of(const tcase *c)
{
    size_t n = (size_t)c->planes * c->w * c->h;
    float *p = malloc(n * sizeof(float));
    nj_rng r;
    nj_rng_seed(&r, 77);
    for (int k = 0; k < c->planes; k++)
        for (int y = 0; y < c->h; y++)
            for (int x = 0; x < c->w; x++)
                p[((size_t)k * c->h + y) * c->w + x] = c->noise ? (float)nj_rng_uniform(&r)
                    : 0.5f + 0.25f * sinf(0.3f * x + 1.1f * k) * cosf(0.21f * y - 0.5f * k) + 0.002f * x;
    return p;
}

/* Largest difference between 4-neighbours of any plane. */
static double max_grad(const float *p, int planes, int w, int h)
{
    double g = 0;
    for (int k = 0; k < planes; k++)
        for (int y = 0; y < h; y++)
            for (int x = 0; x < w; x++) {
                const float *q = p + ((size_t)k * h + y) * w + x;
                if (x + 1 < w) g = fmax(g, fabs(q[1] - q[0]));
                if (y + 1 < h) g = fmax(g, fabs(q[w] - q[0]));
            }
    return g;
}

static double max_abs(const float *a, const float *b, size_t n)
{
    double m = 0;
    for (size_t i = 0; i < n; i++) m = fmax(m, isfinite(a[i]) && isfinite(b[i]) ? fabs(a[i] - b[i]) : INFINITY);
    return m;
}

int main(void)
{
    char dir[512], why[512], script[4096], path[600];
    if (!ref_python_present(why, sizeof why)) {
        check(0, "turn: python3 for the OpenCV/SciPy references", "%s", why);
        return test_exit();
    }
    if (ref_mkdtemp(dir, sizeof dir, "turn") || ref_script_path("turn_ref.py", script, sizeof script)) {
        check(0, "turn: reference set-up", "%s / %s", dir, script);
        return test_exit();
    }
    float *ours[NCASES];
    snprintf(path, sizeof path, "%s/cases.json", dir);
    FILE *f = fopen(path, "w");
    fprintf(f, "[");
    for (int i = 0; i < NCASES; i++) {
        const tcase *c = &CASES[i];
        float *in = image_of(c);
        int shape[3] = {c->planes, c->h, c->w};
        size_t n = (size_t)c->planes * c->w * c->h;
        snprintf(path, sizeof path, "%s/%s_in.npy", dir, c->name);
        nj_npy_write(path, in, shape, 3, why, sizeof why);
        ours[i] = malloc(n * sizeof(float));
        float rot[3];
        for (int a = 0; a < 3; a++) rot[a] = (float)(c->deg[a] * M_PI / 180);
        nj_turn_planes(in, ours[i], c->planes, c->w, c->h, c->cam, rot);
        if (!c->noise)
            check(max_grad(in, c->planes, c->w, c->h) <= GRAD_MAX, "turn: smooth test image within GRAD_MAX",
                  "%s: largest neighbour difference %.4f", c->name, max_grad(in, c->planes, c->w, c->h));
        fprintf(f, "%s{\"name\": \"%s\", \"fx\": %.9g, \"fy\": %.9g, \"cx\": %.9g, \"cy\": %.9g, "
                "\"rot\": [%.17g, %.17g, %.17g]}", i ? ", " : "", c->name, c->cam.fx, c->cam.fy, c->cam.cx, c->cam.cy,
                (double)rot[0], (double)rot[1], (double)rot[2]);
        free(in);
    }
    fprintf(f, "]\n");
    fclose(f);
    int rc = ref_run_python(script, dir);
    if (check(rc == 0, "turn: turn_ref.py ran", "status %d; needs python3-opencv and python3-scipy (tools/deps.sh test)", rc)) {
        for (int i = 0; i < NCASES; i++) {
            const tcase *c = &CASES[i];
            size_t n = (size_t)c->planes * c->w * c->h;
            int s4[4];
            char name[64];
            snprintf(name, sizeof name, "%s_sp", c->name);
            float *sp = ref_load(dir, name, s4, why, sizeof why);
            snprintf(name, sizeof name, "%s_cv", c->name);
            float *cv = ref_load(dir, name, s4, why, sizeof why);
            double esp = sp ? max_abs(ours[i], sp, n) : INFINITY, ecv = cv ? max_abs(ours[i], cv, n) : INFINITY;
            checkv(esp <= SP_TOL, "turn: matches SciPy map_coordinates at K*R^T*K^-1 p (R from SciPy from_rotvec)",
                   "%s: max |ours - scipy| %.2e (tolerance %.0e)", c->name, esp, SP_TOL);
            if (!c->noise)
                checkv(ecv <= CV_TOL, "turn: matches OpenCV warpPerspective with K*R*K^-1",
                       "%s: max |ours - opencv| %.2e (tolerance %.2e)", c->name, ecv, CV_TOL);
            free(sp);
            free(cv);
        }
    }
    const tcase *c = &CASES[NCASES - 1];
    float *in = image_of(c), *out = malloc(sizeof(float) * c->planes * c->w * c->h);
    const float zero[3] = {0, 0, 0};
    nj_turn_planes(in, out, c->planes, c->w, c->h, c->cam, zero);
    double e0 = max_abs(in, out, (size_t)c->planes * c->w * c->h);
    check(e0 <= SP_TOL, "turn: a zero turn returns the image", "max change %.2e on the noise image", e0);
    free(in);
    free(out);
    for (int i = 0; i < NCASES; i++) free(ours[i]);
    ref_rmtree(dir);
    return test_exit();
}

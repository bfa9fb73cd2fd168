/* tests/test_lens.c — lens distortion and raw stereo rigs (nn/geom/lens.h,
 * data/undistort.h) against OpenCV (tests/ref/lens_ref.py, python3-opencv):
 *   - maps: cv2.initUndistortRectifyMap (radial-tangential, Brown 1966) and
 *     cv2.fisheye.initUndistortRectifyMap (Kannala & Brandt 2006) for the
 *     pinhole view nightjar chose, within 0.01 px at every pixel of 1280×720
 *     and 1920×1080 frames;
 *   - undistorted frames: cv2.remap of the same frame, within 1 grey level
 *     at least 3 pixels from the border;
 *   - undistorted points: cv2.undistortPointsIter / cv2.fisheye.undistortPoints
 *     within 0.001 px;
 *   - a raw rig: cv2.stereoRectify's R1, R2 within 1e-9, the maps with
 *     OpenCV's rotations within 0.01 px; ground-truth depth carried into the
 *     rectified (rotated) view — what eval scores against: a plane at
 *     source depth d must read d / (R1ᵀ·K'⁻¹·[x y 1])_z with OpenCV's R1;
 *   - the chessboard stereo pairs of Debian's opencv-doc, calibrated by OpenCV
 *     (stereoCalibrate), rectified by nightjar's loader: matching corners on
 *     the same row (RMS and 95th percentile of |Δy| ≤ 0.5 px), beside
 *     OpenCV's own stereoRectify + remap figure;
 *   - bad calibrations refused by check-data and train with one line naming
 *     the sequence: focal length ≤ 0, a folding lens (radial, tangential,
 *     fisheye), a rig with zero baseline. */
#include "data/dataset.h"
#include "data/image.h"
#include "data/loader.h"
#include "data/npy.h"
#include "nn/geom/lens.h"
#include "tests/check.h"
#include "tests/e2e_support.h"
#include "tests/torch_ref.h"
#include <cjson/cJSON.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#define CHESS_DIR "/usr/share/doc/opencv-doc/examples/data"
#define IMG_BORDER 3

typedef struct lcase {
    const char *name;
    int w, h;
    nj_camera K;
    nj_lens lens;
    int rig;             /* 1: left camera of the rig below, 2: its right camera */
} lcase;

static const nj_camera RIG_RIGHT_K = {705, 704, 632, 362};
static const nj_lens RIG_RIGHT_LENS = {NJ_LENS_RADTAN, {-0.24, 0.05, -1e-4, 2e-4, 0}};
static const double RIG_ROTVEC[3] = {0.01, -0.02, 0.005};
static const double RIG_POS[3] = {0.12, 0.003, -0.002};

static const lcase CASES[] = {
    {"radtan720", 1280, 720, {700, 700, 645.3f, 356.8f}, {NJ_LENS_RADTAN, {-0.25, 0.06, 2e-4, -1.5e-4, -0.004}}, 0},
    {"radtan1080", 1920, 1080, {1000, 1002, 962.1f, 538.4f}, {NJ_LENS_RADTAN, {-0.3, 0.09, -3e-4, 4e-4, -0.01}}, 0},
    {"fisheye720", 1280, 720, {560, 561, 641.2f, 359.5f}, {NJ_LENS_FISHEYE, {0.02, -0.008, 0.003, -0.0005}}, 0},
    {"fisheye1080", 1920, 1080, {820, 820, 958.7f, 541.2f}, {NJ_LENS_FISHEYE, {-0.012, 0.004, -0.0015, 0.0002}}, 0},
    {"rig_left", 1280, 720, {700, 700, 645.3f, 356.8f}, {NJ_LENS_RADTAN, {-0.25, 0.06, 2e-4, -1.5e-4, -0.004}}, 1},
};
#define NCASES (int)(sizeof CASES / sizeof CASES[0])

static cJSON *numbers(const double *v, int n)
{
    return cJSON_CreateDoubleArray(v, n);
}

static cJSON *cam4(nj_camera c)
{
    double v[4] = {c.fx, c.fy, c.cx, c.cy};
    return numbers(v, 4);
}

static int ncoeffs(const nj_lens *L)
{
    int n;
    nj_lens_coeff_names(L->kind, &n);
    return n;
}

/* The views of every case; the rig's two share one fit. */
static int build_views(nj_undistort *u, nj_lens_view *rig_right)
{
    for (int i = 0; i < NCASES; i++) {
        const lcase *c = &CASES[i];
        nj_lens_view v[2];
        memset(v, 0, sizeof v);
        v[0] = (nj_lens_view){.w = c->w, .h = c->h, .src = c->K, .lens = c->lens, .R = {1, 0, 0, 0, 1, 0, 0, 0, 1}};
        int n = 1;
        char why[512];
        if (c->rig) {
            double rot[9], b;
            nj_rot_from_vec(RIG_ROTVEC, rot);
            v[1] = (nj_lens_view){.w = c->w, .h = c->h, .src = RIG_RIGHT_K, .lens = RIG_RIGHT_LENS};
            if (nj_rectify_rotations(rot, RIG_POS, v[0].R, v[1].R, &b, why, sizeof why)) {
                check(0, "rig rectifying rotations", "%s", why);
                return -1;
            }
            n = 2;
        }
        nj_undistort pair[2];
        if (nj_undistort_init(pair, v, n, why, sizeof why)) {
            check(0, c->name, "nj_undistort_init: %s", why);
            return -1;
        }
        u[i] = pair[0];
        if (n == 2) {
            *rig_right = pair[1].view;
            nj_undistort_free(&pair[1]);
        }
    }
    return 0;
}

/* 9×5 pixels over the frame, corners included. */
static void grid_points(const lcase *c, double *p)
{
    for (int j = 0; j < 5; j++)
        for (int i = 0; i < 9; i++) {
            p[2 * (j * 9 + i)] = i * (c->w - 1) / 8.0;
            p[2 * (j * 9 + i) + 1] = j * (c->h - 1) / 4.0;
        }
}

static int write_cases(const char *dir, const nj_undistort *u)
{
    cJSON *root = cJSON_CreateObject(), *arr = cJSON_AddArrayToObject(root, "cases");
    for (int i = 0; i < NCASES; i++) {
        const lcase *c = &CASES[i];
        cJSON *o = cJSON_CreateObject();
        double pts[90];
        grid_points(c, pts);
        cJSON_AddStringToObject(o, "name", c->name);
        cJSON_AddNumberToObject(o, "width", c->w);
        cJSON_AddNumberToObject(o, "height", c->h);
        cJSON_AddNumberToObject(o, "seed", 11 + i);
        cJSON_AddItemToObject(o, "camera", cam4(c->K));
        cJSON_AddItemToObject(o, "pinhole", cam4(u[i].view.out));
        cJSON_AddStringToObject(o, "model", c->lens.kind == NJ_LENS_FISHEYE ? "fisheye" : "radial-tangential");
        cJSON_AddItemToObject(o, "coeffs", numbers(c->lens.c, ncoeffs(&c->lens)));
        cJSON_AddItemToObject(o, "R", numbers(u[i].view.R, 9));
        cJSON_AddItemToObject(o, "points", numbers(pts, 90));
        if (c->rig) {
            double rot[9];
            nj_rot_from_vec(RIG_ROTVEC, rot);
            cJSON *r = cJSON_AddObjectToObject(o, "rig");
            cJSON_AddItemToObject(r, "camera", cam4(RIG_RIGHT_K));
            cJSON_AddItemToObject(r, "coeffs", numbers(RIG_RIGHT_LENS.c, 5));
            cJSON_AddItemToObject(r, "rotation", numbers(rot, 9));
            cJSON_AddItemToObject(r, "position", numbers(RIG_POS, 3));
        }
        cJSON_AddItemToArray(arr, o);
    }
    /* the rig's right camera as a case of its own */
    cJSON *left = cJSON_GetArrayItem(arr, NCASES - 1), *right = cJSON_Duplicate(left, 1);
    cJSON_ReplaceItemInObject(right, "name", cJSON_CreateString("rig_right"));
    cJSON_AddTrueToObject(right, "right");
    cJSON_AddItemToArray(arr, right);
    char path[4200], *text = cJSON_Print(root);
    snprintf(path, sizeof path, "%s/cases.json", dir);
    int rc = text ? e2e_write(path, text) : -1;
    free(text);
    cJSON_Delete(root);
    return rc;
}

static int run_ref(const char *mode, const char *dir)
{
    char script[4096], cmd[8600];
    if (ref_script_path("lens_ref.py", script, sizeof script)) {
        check(0, "lens_ref.py found", "%s", script);
        return -1;
    }
    snprintf(cmd, sizeof cmd, "%s '%s' %s '%s'", REF_PYTHON, script, mode, dir);
    fflush(stdout);
    int rc = system(cmd);
    if (rc != 0) check(0, mode, "lens_ref.py %s failed (status %d); needs python3-opencv (tools/deps.sh test)", mode, rc);
    return rc ? -1 : 0;
}

static double map_error(const char *dir, const nj_undistort *u, const char *name)
{
    char nx[128], ny[128], err[512];
    int sx[4], sy[4];
    snprintf(nx, sizeof nx, "%s_mapx", name);
    snprintf(ny, sizeof ny, "%s_mapy", name);
    float *mx = ref_load(dir, nx, sx, err, sizeof err), *my = ref_load(dir, ny, sy, err, sizeof err);
    double m = INFINITY;
    if (mx && my && sx[2] == u->view.h && sx[3] == u->view.w) {
        m = 0;
        for (size_t i = 0; i < (size_t)u->view.w * u->view.h; i++) {
            double d = fmax(fabs(u->map[2 * i] - mx[i]), fabs(u->map[2 * i + 1] - my[i]));
            if (!(d <= m)) m = d;
        }
    } else {
        printf("info %s map: %s\n", name, err);
    }
    free(mx);
    free(my);
    return m;
}

/* Max |ours − OpenCV| in grey levels (0..255) over pixels ≥ IMG_BORDER from the border. */
static double image_error(const char *dir, const nj_undistort *u, const char *name)
{
    char ps[4200], pc[4200], err[512];
    snprintf(ps, sizeof ps, "%s/%s_src.png", dir, name);
    snprintf(pc, sizeof pc, "%s/%s_cv.png", dir, name);
    nj_image src, cv;
    if (nj_image_load(ps, &src, err, sizeof err)) return INFINITY;
    if (nj_image_load(pc, &cv, err, sizeof err) || nj_undistort_image(u, &src, err, sizeof err)) {
        nj_image_free(&src);
        return INFINITY;
    }
    double m = 0;
    int w = src.w, h = src.h;
    for (int c = 0; c < 3; c++)
        for (int y = IMG_BORDER; y < h - IMG_BORDER; y++)
            for (int x = IMG_BORDER; x < w - IMG_BORDER; x++) {
                size_t i = ((size_t)c * h + y) * w + x;
                double d = labs(lrintf(src.data[i] * 255.0f) - lrintf(cv.data[i] * 255.0f));
                if (!(d <= m)) m = d;
            }
    nj_image_free(&src);
    nj_image_free(&cv);
    return m;
}

static double points_error(const lcase *c, const nj_camera *K, const nj_lens *L, cJSON *ref)
{
    double pts[90], m = 0;
    grid_points(c, pts);
    cJSON *arr = cJSON_GetObjectItem(ref, "points");
    if (cJSON_GetArraySize(arr) != 90) return INFINITY;
    for (int k = 0; k < 45; k++) {
        double x, y;
        if (nj_lens_undistort(L, (pts[2 * k] - K->cx) / K->fx, (pts[2 * k + 1] - K->cy) / K->fy, &x, &y)) return INFINITY;
        double ex = (x - cJSON_GetArrayItem(arr, 2 * k)->valuedouble) * K->fx;
        double ey = (y - cJSON_GetArrayItem(arr, 2 * k + 1)->valuedouble) * K->fy;
        m = fmax(m, fmax(fabs(ex), fabs(ey)));
    }
    return m;
}

static double rot_diff(const double *a, cJSON *b)
{
    double m = 0;
    if (cJSON_GetArraySize(b) != 9) return INFINITY;
    for (int i = 0; i < 9; i++) m = fmax(m, fabs(a[i] - cJSON_GetArrayItem(b, i)->valuedouble));
    return m;
}

/* Ground truth of the rig's left camera in its rectified view: a constant
 * source depth d (a fronto-parallel plane) becomes z' = d / (R1ᵀ r')_z along
 * the view ray r' = K'⁻¹[x y 1], with R1 (source → rectified) from
 * cv2.stereoRectify.  Relative error over every pixel. */
static double rig_depth_error(const nj_undistort *u, cJSON *R1)
{
    if (cJSON_GetArraySize(R1) != 9) return INFINITY;
    double R[9];
    for (int i = 0; i < 9; i++) R[i] = cJSON_GetArrayItem(R1, i)->valuedouble;
    size_t n = (size_t)u->view.w * u->view.h;
    float *src = malloc(n * sizeof(float)), *dst = malloc(n * sizeof(float));
    double worst = src && dst ? 0 : INFINITY;
    for (size_t i = 0; src && dst && i < n; i++) src[i] = 7.5f;
    if (src && dst) nj_undistort_depth(u, src, dst);
    const nj_camera *K = &u->view.out;
    for (int y = 0; src && dst && y < u->view.h; y++)
        for (int x = 0; x < u->view.w; x++) {
            double r[3] = {(x - K->cx) / K->fx, (y - K->cy) / K->fy, 1.0};
            double sz = R[2] * r[0] + R[5] * r[1] + R[8] * r[2];   /* (R1ᵀ r)_z */
            double want = 7.5 / sz, got = dst[(size_t)y * u->view.w + x];
            worst = fmax(worst, fabs(got - want) / want);
        }
    free(src);
    free(dst);
    return worst;
}

static void check_case(const char *dir, const nj_undistort *u, const lcase *c, const char *name, cJSON *cv,
                       const nj_camera *K, const nj_lens *L)
{
    char n[160];
    double me = map_error(dir, u, name);
    snprintf(n, sizeof n, "%s %dx%d: map vs OpenCV %s", name, c->w, c->h,
             L->kind == NJ_LENS_FISHEYE ? "cv2.fisheye.initUndistortRectifyMap" : "cv2.initUndistortRectifyMap");
    checkv(me <= 0.01, n, "max |ours - OpenCV| %.2g px (limit 0.01); pinhole fx %.2f fy %.2f cx %.2f cy %.2f", me,
           u->view.out.fx, u->view.out.fy, u->view.out.cx, u->view.out.cy);
    double lo = INFINITY, hix = -INFINITY, hiy = -INFINITY;
    for (size_t i = 0; i < (size_t)u->view.w * u->view.h; i++) {
        lo = fmin(lo, fmin(u->map[2 * i], u->map[2 * i + 1]));
        hix = fmax(hix, u->map[2 * i]);
        hiy = fmax(hiy, u->map[2 * i + 1]);
    }
    snprintf(n, sizeof n, "%s: every output pixel sees the inside of the source frame (no invalid border)", name);
    checkv(lo >= -1e-3 && hix <= c->w - 1 + 1e-3 && hiy <= c->h - 1 + 1e-3, n,
           "source coordinates from %.4f to x %.4f / y %.4f (frame 0..%d x 0..%d)", lo, hix, hiy, c->w - 1, c->h - 1);
    double ie = image_error(dir, u, name);
    snprintf(n, sizeof n, "%s: undistorted frame vs OpenCV cv2.remap (INTER_LINEAR)", name);
    checkv(ie <= 1, n, "max difference %.0f grey levels at >= %d px from the border (limit 1)", ie, IMG_BORDER);
    double pe = points_error(c, K, L, cJSON_GetObjectItem(cv, name));
    snprintf(n, sizeof n, "%s: undistorted points vs OpenCV %s", name,
             L->kind == NJ_LENS_FISHEYE ? "cv2.fisheye.undistortPoints" : "cv2.undistortPointsIter");
    checkv(pe <= 1e-3, n, "max |ours - OpenCV| %.2g px over 45 points incl. corners (limit 0.001)", pe);
}

static void test_against_opencv(void)
{
    char dir[4096];
    nj_undistort u[NCASES];
    nj_lens_view rig_right;
    memset(u, 0, sizeof u);
    if (ref_mkdtemp(dir, sizeof dir, "lens")) {
        check(0, "lens temp folder", "%s", dir);
        return;
    }
    if (build_views(u, &rig_right) || write_cases(dir, u) || run_ref("maps", dir)) goto done;
    char path[4200];
    snprintf(path, sizeof path, "%s/opencv.json", dir);
    char *text = e2e_slurp(path, NULL);
    cJSON *cv = text ? cJSON_Parse(text) : NULL;
    free(text);
    if (!check(cv != NULL, "lens_ref.py results readable", "%s", path)) goto done;
    for (int i = 0; i < NCASES; i++) check_case(dir, &u[i], &CASES[i], CASES[i].name, cv, &CASES[i].K, &CASES[i].lens);
    /* the rig: rotations and baseline against cv2.stereoRectify, the right camera's map */
    cJSON *r = cJSON_GetObjectItem(cv, "rig_left");
    double e1 = rot_diff(u[NCASES - 1].view.R, cJSON_GetObjectItem(r, "R1")), e2 = rot_diff(rig_right.R, cJSON_GetObjectItem(r, "R2"));
    cJSON *base = cJSON_GetObjectItem(r, "baseline"), *cvp = cJSON_GetObjectItem(r, "pinhole");
    double b = sqrt(RIG_POS[0] * RIG_POS[0] + RIG_POS[1] * RIG_POS[1] + RIG_POS[2] * RIG_POS[2]);
    checkv(e1 <= 1e-9 && e2 <= 1e-9 && base && fabs(base->valuedouble - b) <= 1e-9,
           "rig: rectifying rotations R1, R2 and baseline vs OpenCV cv2.stereoRectify",
           "max |R1 - R1cv| %.2g, |R2 - R2cv| %.2g (limit 1e-9); baseline %.9g vs %.9g m", e1, e2, b,
           base ? base->valuedouble : NAN);
    double de = rig_depth_error(&u[NCASES - 1], cJSON_GetObjectItem(r, "R1"));
    checkv(de <= 1e-5, "rig: ground-truth depth in the rectified view (plane through OpenCV's R1)",
           "worst relative error %.2g (limit 1e-5)", de);
    if (cJSON_GetArraySize(cvp) == 4)
        printf("info rig pinhole: ours fx %.2f cx %.2f cy %.2f; OpenCV stereoRectify alpha=0 fx %.2f cx %.2f cy %.2f\n",
               u[NCASES - 1].view.out.fx, u[NCASES - 1].view.out.cx, u[NCASES - 1].view.out.cy,
               cJSON_GetArrayItem(cvp, 0)->valuedouble, cJSON_GetArrayItem(cvp, 2)->valuedouble,
               cJSON_GetArrayItem(cvp, 3)->valuedouble);
    nj_undistort ur = {.view = rig_right, .map = nj_lens_view_map(&rig_right)};
    if (check(ur.map != NULL, "rig right map", "out of memory"))
        check_case(dir, &ur, &CASES[NCASES - 1], "rig_right", cv, &RIG_RIGHT_K, &RIG_RIGHT_LENS);
    nj_undistort_free(&ur);
    cJSON_Delete(cv);
done:
    for (int i = 0; i < NCASES; i++) nj_undistort_free(&u[i]);
    ref_rmtree(dir);
}

/* ---- the opencv-doc chessboard rig ------------------------------------------- */

static int chess_data_present(void)
{
    char p[256];
    for (int i = 1; i <= 14; i++) {
        if (i == 10) continue;     /* the package ships no pair 10 */
        snprintf(p, sizeof p, CHESS_DIR "/left%02d.jpg", i);
        if (access(p, R_OK)) return 0;
        snprintf(p, sizeof p, CHESS_DIR "/right%02d.jpg", i);
        if (access(p, R_OK)) return 0;
    }
    return 1;
}

/* dataset.json of one raw-rig sequence over symlinks to the pairs. */
static int make_chess_dataset(const char *dir, cJSON *calib, char *json, size_t len)
{
    char p[4400], q[4400];
    snprintf(p, sizeof p, "%s/rig", dir);
    mkdir(p, 0755);
    snprintf(p, sizeof p, "%s/rig/cam0", dir);
    mkdir(p, 0755);
    snprintf(p, sizeof p, "%s/rig/cam1", dir);
    mkdir(p, 0755);
    cJSON *pairs = cJSON_GetObjectItem(calib, "pairs"), *it;
    cJSON_ArrayForEach(it, pairs)
    {
        int k = it->valueint;
        for (int side = 0; side < 2; side++) {
            snprintf(p, sizeof p, CHESS_DIR "/%s%02d.jpg", side ? "right" : "left", k);
            snprintf(q, sizeof q, "%s/rig/cam%d/%02d.jpg", dir, side, k);
            if (symlink(p, q)) return -1;
        }
    }
    cJSON *root = cJSON_CreateObject(), *seqs = cJSON_AddArrayToObject(root, "sequences"), *s = cJSON_CreateObject();
    cJSON_AddStringToObject(s, "name", "chessboard-rig");
    cJSON_AddStringToObject(s, "images", "cam0");
    cJSON_AddStringToObject(s, "right_images", "cam1");
    cJSON_AddItemToObject(s, "camera", cJSON_Duplicate(cJSON_GetObjectItem(calib, "camera"), 1));
    cJSON_AddItemToObject(s, "right_camera", cJSON_Duplicate(cJSON_GetObjectItem(calib, "right_camera"), 1));
    cJSON_AddItemToArray(seqs, s);
    char *text = cJSON_Print(root);
    cJSON_Delete(root);
    snprintf(json, len, "%s/rig/dataset.json", dir);
    int rc = text ? e2e_write(json, text) : -1;
    free(text);
    return rc;
}

/* The pairs through the training loader (no flip, no jitter, frame size):
 * ours/leftNN.png, ours/rightNN.png.  Returns the pairs written. */
static int rectify_with_loader(const char *dir, const nj_dataset *ds)
{
    nj_data_options o;
    nj_data_options_default(&o);
    o.noffsets = 0;
    nj_sample *smp = NULL;
    int n = nj_dataset_samples(ds, NJ_SPLIT_TRAIN, &o, &smp), written = 0;
    const nj_sequence *s = &ds->seq[0];
    nj_loader_config c;
    nj_loader_config_default(&c);
    c.width = s->width;
    c.height = s->height;
    c.batch = 1;
    c.jitter = 0;
    c.flip_prob = 0;
    char err[512], p[4400];
    nj_loader *L = n > 0 ? nj_loader_create(ds, smp, n, &c, err, sizeof err) : NULL;
    if (!L) {
        check(0, "chessboard: loader", "%s", n > 0 ? err : "no samples");
        free(smp);
        return 0;
    }
    snprintf(p, sizeof p, "%s/ours", dir);
    mkdir(p, 0755);
    int cam_ok = 1, tx_ok = 1;
    for (int step = 0; step < n; step++) {
        const nj_batch *b = nj_loader_next(L, err, sizeof err);
        if (!b) { check(0, "chessboard: loader batch", "%s", err); break; }
        const char *name = s->frames[smp[b->sample[0]].target];
        size_t plane = (size_t)3 * b->w * b->h;
        nj_image left = {b->w, b->h, b->target}, right = {b->w, b->h, b->partner};
        cam_ok &= !memcmp(&b->camera[0], &s->camera, sizeof s->camera);
        tx_ok &= b->has_partner[0] && b->stereo_tx[0] == -s->baseline;
        snprintf(p, sizeof p, "%s/ours/left%.2s.png", dir, name);
        written += !nj_png_write_rgb(p, &left, err, sizeof err);
        snprintf(p, sizeof p, "%s/ours/right%.2s.png", dir, name);
        nj_png_write_rgb(p, &right, err, sizeof err);
        (void)plane;
    }
    check(cam_ok && tx_ok, "chessboard: loader batches carry the rectified intrinsics and -baseline",
          "camera %s, stereo_tx %s", cam_ok ? "ok" : "differs", tx_ok ? "ok" : "differs");
    nj_loader_destroy(L);
    free(smp);
    return written;
}

static double jnum(cJSON *o, const char *k)
{
    cJSON *v = cJSON_GetObjectItem(o, k);
    return cJSON_IsNumber(v) ? v->valuedouble : NAN;
}

static void test_chessboard(void)
{
    if (!chess_data_present()) {
        if (system("apt-cache show opencv-doc >/dev/null 2>&1") != 0) {
            printf("SKIP chessboard rig: opencv-doc is not installable here (apt-cache knows no such package), "
                   "so its stereo pairs left01..14/right01..14.jpg are missing\n");
            return;
        }
        check(0, "chessboard rig: opencv-doc stereo pairs", "missing under " CHESS_DIR
              "; install them: apt-get install -y opencv-doc (tools/deps.sh test)");
        return;
    }
    char dir[4096], path[4400], json[4400];
    if (ref_mkdtemp(dir, sizeof dir, "lens_chess")) {
        check(0, "chessboard temp folder", "%s", dir);
        return;
    }
    if (run_ref("chess", dir)) goto done;
    snprintf(path, sizeof path, "%s/calib.json", dir);
    char *text = e2e_slurp(path, NULL);
    cJSON *calib = text ? cJSON_Parse(text) : NULL;
    free(text);
    if (!check(calib != NULL, "chessboard: OpenCV calibration read", "%s", path)) goto done;
    nj_dataset ds;
    nj_problems pr;
    nj_problems_init(&pr);
    nj_data_options o;
    nj_data_options_default(&o);
    o.noffsets = 0;
    o.dup_threshold = 0;
    int bad = make_chess_dataset(dir, calib, json, sizeof json) ? -1 : nj_dataset_open(json, &o, &ds, &pr);
    if (bad) nj_problems_print(&pr, stdout);
    if (check(bad == 0, "chessboard: the calibrated raw rig passes check-data", "%d problems", bad)) {
        nj_dataset_report(&ds, &o, &pr, stdout);
        int pairs = rectify_with_loader(dir, &ds);
        if (pairs > 0 && !run_ref("rows", dir)) {
            snprintf(path, sizeof path, "%s/rows.json", dir);
            char *t = e2e_slurp(path, NULL);
            cJSON *rows = t ? cJSON_Parse(t) : NULL, *cvr = cJSON_GetObjectItem(calib, "opencv_rows");
            free(t);
            double rms = jnum(rows, "rms"), p95 = jnum(rows, "p95");
            printf("info chessboard rows |dy| over %g pairs (%g corners): nightjar rms %.3f p95 %.3f mean %.3f max %.3f px;"
                   " OpenCV stereoRectify+remap over %g pairs: rms %.3f p95 %.3f mean %.3f max %.3f px\n",
                   jnum(rows, "pairs"), jnum(rows, "corners"), rms, p95, jnum(rows, "mean"), jnum(rows, "max"),
                   jnum(cvr, "pairs"), jnum(cvr, "rms"), jnum(cvr, "p95"), jnum(cvr, "mean"), jnum(cvr, "max"));
            checkv(rms <= 0.5 && p95 <= 0.5 && jnum(rows, "pairs") >= cJSON_GetArraySize(cJSON_GetObjectItem(calib, "pairs")) - 1,
                   "chessboard: matching corners of nightjar's rectified pairs on the same row",
                   "rms %.3f px, p95 %.3f px (limit 0.5) over %g of %d pairs", rms, p95, jnum(rows, "pairs"),
                   cJSON_GetArraySize(cJSON_GetObjectItem(calib, "pairs")));
            cJSON_Delete(rows);
        }
        nj_dataset_free(&ds);
    }
    nj_problems_free(&pr);
    cJSON_Delete(calib);
done:
    ref_rmtree(dir);
}

/* ---- refusals ------------------------------------------------------------------- */

static void write_frames(const char *dir)
{
    mkdir(dir, 0755);
    for (int i = 0; i < 3; i++) {
        nj_image im;
        char p[4400], err[256];
        nj_image_alloc(&im, 160, 120);
        for (size_t k = 0; k < (size_t)3 * 160 * 120; k++) im.data[k] = (float)((k * 2654435761u + i * 977) % 251) / 250.0f;
        snprintf(p, sizeof p, "%s/%06d.png", dir, i);
        if (nj_png_write_rgb(p, &im, err, sizeof err)) printf("note: %s\n", err);
        nj_image_free(&im);
    }
}

/* Runs `nightjar ARGS`; returns the status, output in *out (malloc'd). */
static int run_nj(const char *dir, const char *args, char **out)
{
    char cmd[9000], log[4400];
    snprintf(log, sizeof log, "%s/out.txt", dir);
    snprintf(cmd, sizeof cmd, "%s %s", e2e_bin(), args);
    int rc = e2e_run(cmd, log);
    *out = e2e_slurp(log, NULL);
    return rc;
}

/* The one problem line naming the sequence and the reason. */
static int refused(const char *out, const char *seq, const char *reason)
{
    if (!out) return 0;
    for (const char *l = strstr(out, "problem: "); l; l = strstr(l + 1, "problem: ")) {
        const char *e = strchr(l, '\n');
        size_t n = e ? (size_t)(e - l) : strlen(l);
        char line[2048];
        snprintf(line, sizeof line, "%.*s", (int)(n < 2000 ? n : 2000), l);
        if (strstr(line, seq) && strstr(line, reason)) return 1;
    }
    return 0;
}

static void expect_refusal(const char *dir, const char *name, const char *camera, const char *extra,
                           const char *reason)
{
    char json[4400], text[4096], args[9000], *out = NULL;
    snprintf(json, sizeof json, "%s/%s.json", dir, name);
    snprintf(text, sizeof text,
             "{\"sequences\": [{\"name\": \"yard-%s\", \"images\": \"cam0\", \"camera\": %s%s}]}\n", name, camera,
             extra);
    e2e_write(json, text);
    snprintf(args, sizeof args, "check-data '%s'", json);
    int rc = run_nj(dir, args, &out);
    char n[256], seq[128];
    snprintf(n, sizeof n, "check-data refuses %s with one line naming the sequence", name);
    snprintf(seq, sizeof seq, "yard-%s", name);
    check(rc == 1 && refused(out, seq, reason), n, "status %d, expected 1 and a problem line with '%s' and '%s': %s", rc,
          seq, reason, out ? out : "(no output)");
    free(out);
}

static void test_refusals(void)
{
    char dir[4096], cam0[4400], cam1[4400];
    if (ref_mkdtemp(dir, sizeof dir, "lens_bad")) {
        check(0, "refusals temp folder", "%s", dir);
        return;
    }
    snprintf(cam0, sizeof cam0, "%s/cam0", dir);
    snprintf(cam1, sizeof cam1, "%s/cam1", dir);
    write_frames(cam0);
    write_frames(cam1);
    const char *rt = "{\"fx\": 100, \"fy\": 100, \"cx\": 79.5, \"cy\": 59.5, \"lens\": {\"model\": \"radial-tangential\", ";
    char cam[512];
    expect_refusal(dir, "negative-focal", "{\"fx\": -100, \"fy\": 100, \"cx\": 79.5, \"cy\": 59.5}", "",
                   "focal length \"camera.fx\" must be positive");
    expect_refusal(dir, "zero-focal", "{\"fx\": 100, \"fy\": 0, \"cx\": 79.5, \"cy\": 59.5}", "",
                   "focal length \"camera.fy\" must be positive");
    snprintf(cam, sizeof cam, "%s\"k1\": -0.9}}", rt);
    expect_refusal(dir, "radial-fold", cam, "", "radial-tangential lens distortion folds the image: its radial function stops increasing");
    snprintf(cam, sizeof cam, "%s\"p1\": 0.6}}", rt);
    expect_refusal(dir, "tangential-fold", cam, "", "folds the image near pixel");
    expect_refusal(dir, "fisheye-fold",
                   "{\"fx\": 100, \"fy\": 100, \"cx\": 79.5, \"cy\": 59.5, \"lens\": {\"model\": \"fisheye\", \"k1\": -0.5}}", "",
                   "fisheye lens distortion folds the image: its radial function stops increasing");
    expect_refusal(dir, "zero-baseline", "{\"fx\": 100, \"fy\": 100, \"cx\": 79.5, \"cy\": 59.5}",
                   ", \"right_images\": \"cam1\", \"right_camera\": {\"fx\": 100, \"fy\": 100, \"cx\": 79.5, \"cy\": 59.5, "
                   "\"rotation\": [0, 0, 0], \"position\": [0, 0, 0]}",
                   "zero baseline");
    expect_refusal(dir, "right-negative-focal", "{\"fx\": 100, \"fy\": 100, \"cx\": 79.5, \"cy\": 59.5}",
                   ", \"right_images\": \"cam1\", \"right_camera\": {\"fx\": -100, \"fy\": 100, \"cx\": 79.5, \"cy\": 59.5, "
                   "\"rotation\": [0, 0, 0], \"position\": [0.1, 0, 0]}",
                   "focal length \"right_camera.fx\" must be positive");
    /* train refuses the same data, naming the sequence */
    char args[9000], *out = NULL;
    snprintf(args, sizeof args, "train --config configs/demo.json --data '%s/radial-fold.json' --out '%s/run' --steps 1",
             dir, dir);
    int rc = run_nj(dir, args, &out);
    check(rc != 0 && out && strstr(out, "yard-radial-fold") && strstr(out, "folds the image") &&
              strstr(out, "training refuses it"),
          "train refuses a folding lens, naming the sequence", "status %d: %s", rc, out ? out : "(no output)");
    free(out);
    /* a good lens passes and check-data states the pinhole it is resampled to */
    char json[4400], text[2048];
    snprintf(json, sizeof json, "%s/good.json", dir);
    snprintf(text, sizeof text, "{\"sequences\": [{\"name\": \"yard-good\", \"images\": \"cam0\", \"camera\": "
             "%s\"k1\": -0.2, \"k2\": 0.05, \"p1\": 0.001, \"p2\": -0.001}}}]}\n", rt);
    e2e_write(json, text);
    snprintf(args, sizeof args, "check-data '%s'", json);
    rc = run_nj(dir, args, &out);
    check(rc == 0 && out && strstr(out, "undistorted to pinhole fx") && strstr(out, "radial-tangential k1 -0.2"),
          "check-data accepts a good lens and prints the pinhole intrinsics", "status %d: %s", rc, out ? out : "");
    free(out);
    /* two sequences of one calibration resample through one map */
    snprintf(json, sizeof json, "%s/shared.json", dir);
    snprintf(text, sizeof text, "{\"sequences\": [{\"name\": \"yard-a\", \"images\": \"cam0\", \"camera\": "
             "%s\"k1\": -0.1}}}, {\"name\": \"yard-b\", \"images\": \"cam1\", \"camera\": %s\"k1\": -0.1}}}, "
             "{\"name\": \"yard-c\", \"images\": \"cam1\", \"camera\": %s\"k1\": -0.11}}}]}\n", rt, rt, rt);
    e2e_write(json, text);
    nj_dataset ds;
    nj_problems pr;
    nj_problems_init(&pr);
    nj_data_options o;
    nj_data_options_default(&o);
    int bad = nj_dataset_open(json, &o, &ds, &pr);
    if (ds.nseq != 3) {
        check(0, "sequences of one calibration share one lens map", "%d sequences parsed", ds.nseq);
        nj_problems_print(&pr, stdout);
        nj_dataset_free(&ds);
        nj_problems_free(&pr);
        ref_rmtree(dir);
        return;
    }
    const nj_undistort *a = nj_sequence_undistort(&ds.seq[0], 0), *b = nj_sequence_undistort(&ds.seq[1], 0),
                       *c = nj_sequence_undistort(&ds.seq[2], 0);
    check(!bad && a && b && c && a->map == b->map && b->borrowed && c->map != a->map && !c->borrowed,
          "sequences of one calibration share one lens map (another calibration has its own)", "%d problems", bad);
    if (bad) nj_problems_print(&pr, stdout);
    nj_dataset_free(&ds);
    nj_problems_free(&pr);
    ref_rmtree(dir);
}

int main(void)
{
    char why[256];
    if (!ref_python_present(why, sizeof why)) {
        check(0, "python3 for the OpenCV references", "%s", why);
        return test_exit();
    }
    test_against_opencv();
    test_chessboard();
    if (e2e_have_binary()) test_refusals();
    else check(0, "nightjar binary for the refusal checks", "%s not found: run make nightjar", e2e_bin());
    return test_exit();
}

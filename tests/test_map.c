/* tests/test_map.c — `nightjar map`: the volume, the mesh, the fused map of a
 * synthetic sequence and the command's refusals.
 *
 * Sources of truth:
 *   mcubes_*        scikit-image's skimage.measure.marching_cubes (methods
 *                   'lorensen' and 'lewiner') on the same volume, through
 *                   tests/ref/mcubes_ref.py (vertex sets matched with SciPy's
 *                   cKDTree, the PLY parsed by the script's own reader);
 *   map_truth_*     the synthetic renderer's analytic scene (data/scene.h
 *                   nj_scene_distance on nj_synth_yard: the geometry the
 *                   frames were ray-cast from) and the poses file synth wrote;
 *   map_refuses_*   the inputs the test builds (too few frames, a cap too
 *                   small, a pose with a scaled rotation);
 *   map_report_*    the report's HTML text. */
#include "tests/check.h"
#include "tests/e2e_support.h"
#include "tests/test_data_util.h"
#include "tests/train_runs.h"
#include "data/npy.h"
#include "data/poses.h"
#include "data/scene_gen.h"
#include "data/synth.h"
#include "train/map/map.h"
#include "train/measure/pointcloud.h"
#include "train/report/report.h"
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

/* ---- marching cubes against scikit-image ------------------------------------------ */

/* A smooth field with two blobs and a ripple, never exactly zero at a voxel,
 * over a box that starts at negative indices and spans several blocks. */
static double field_val(double i, double j, double k)
{
    double x = i + 0.13, y = j - 0.21, z = k + 0.07;
    double a = sqrt((x - 2) * (x - 2) + (y - 1) * (y - 1) + (z - 3) * (z - 3)) - 6.3;
    double b = sqrt((x - 9) * (x - 9) + (y - 6) * (y - 6) + (z - 10) * (z - 10)) - 4.6;
    double v = fmin(a, b) + 0.9 * sin(0.7 * x) * cos(0.5 * y + 0.3 * z);
    return v / 4.0;
}

static float field_at(int i, int j, int k)
{
    return (float)field_val(i, j, k);
}

/* Share of triangles whose normal (b − a) × (c − a) points up the field's
 * gradient (central differences of field_at: the test's own input), i.e.
 * towards the free (positive) side as map.h promises. */
static double outward_share(const nj_mesh *m)
{
    long good = 0;
    for (long t = 0; t < m->nt; t++) {
        const float *a = m->xyz + 3 * m->tri[3 * t], *b = m->xyz + 3 * m->tri[3 * t + 1], *c = m->xyz + 3 * m->tri[3 * t + 2];
        double u[3], v[3], n[3], g[3], p[3];
        for (int k = 0; k < 3; k++) {
            u[k] = b[k] - a[k];
            v[k] = c[k] - a[k];
            p[k] = (a[k] + b[k] + c[k]) / 3.0;
        }
        n[0] = u[1] * v[2] - u[2] * v[1];
        n[1] = u[2] * v[0] - u[0] * v[2];
        n[2] = u[0] * v[1] - u[1] * v[0];
        for (int k = 0; k < 3; k++) {
            double h[3] = {1e-3 * (k == 0), 1e-3 * (k == 1), 1e-3 * (k == 2)};
            g[k] = field_val(p[0] + h[0], p[1] + h[1], p[2] + h[2]) - field_val(p[0] - h[0], p[1] - h[1], p[2] - h[2]);
        }
        good += n[0] * g[0] + n[1] * g[1] + n[2] * g[2] > 0;
    }
    return m->nt ? (double)good / m->nt : 0;
}

static void test_mcubes(const char *argv0, const char *dir)
{
    enum { I0 = -7, J0 = -5, K0 = -6, NX = 25, NY = 21, NZ = 27 };
    nj_tsdf_params p = {.voxel = 1, .band = 4, .max_depth = 0, .lo = {-100, -100, -100}, .hi = {100, 100, 100},
                        .max_blocks = 1000};
    nj_tsdf *t;
    char err[512];
    float *f = malloc(sizeof(float) * NX * NY * NZ);
    if (!f || nj_tsdf_create(&t, &p, err, sizeof err)) {
        check(0, "mcubes_skimage_lorensen", "setup: %s", f ? err : "out of memory");
        free(f);
        return;
    }
    for (int a = 0; a < NX; a++)
        for (int b = 0; b < NY; b++)
            for (int c = 0; c < NZ; c++) {
                float v = field_at(I0 + a, J0 + b, K0 + c);
                f[(a * NY + b) * NZ + c] = v;
                nj_tsdf_set(t, I0 + a, J0 + b, K0 + c, v, 1.0f);
            }
    nj_mesh m;
    char field[300], ply[300], out[300], script[600], args[1400];
    snprintf(field, sizeof field, "%s/field.npy", dir);
    snprintf(ply, sizeof ply, "%s/mesh.ply", dir);
    snprintf(out, sizeof out, "%s/mcubes.npy", dir);
    int shape[3] = {NX, NY, NZ};
    int rc = nj_tsdf_mesh(t, &m, err, sizeof err);
    nj_ply_mesh pm = {"test", m.nv, m.nt, 0, m.xyz, m.rgb, m.tri, NULL};
    if (!rc) rc = nj_npy_write(field, f, shape, 3, err, sizeof err) || nj_ply_write_mesh(ply, &pm, err, sizeof err);
    tdu_ref_path(argv0, "mcubes_ref.py", script, sizeof script);
    snprintf(args, sizeof args, "'%s' '%s' %d %d %d '%s'", field, ply, I0, J0, K0, out);
    float *r = NULL;
    int rshape[4], nd = 0;
    if (!rc) rc = tdu_python(script, args) || nj_npy_read(out, &r, rshape, &nd, err, sizeof err) < 0 ||
                  rshape[0] != 13;
    if (rc) {
        check(0, "mcubes_skimage_lorensen", "could not run %s (%s)", script, err);
    } else {
        /* vertices lie on grid edges at the linear zero crossing in both
         * programs: they must agree to float rounding (1e-4 voxel) */
        checkv(r[2] == 1 && r[0] == r[3] && r[5] <= 1e-4 && r[6] <= 1e-4, "mcubes_skimage_lorensen",
               "PLY ok %g, vertices %g vs skimage %g, max distance ours->skimage %.2g, skimage->ours %.2g voxel",
               r[2], r[0], r[3], r[5], r[6]);
        /* triangulations differ only in ambiguous cells: same area within 0.5% */
        checkv(fabs(r[7] - r[8]) <= 5e-3 * r[8] && r[0] > 1000, "mcubes_skimage_area",
               "area %.3f vs skimage lorensen %.3f (faces %g vs %g), lewiner %.3f", r[7], r[8], r[1], r[4], r[12]);
        /* Lewiner et al. 2003 places the same edge vertices (and may add cell-interior ones) */
        checkv(r[10] <= 1e-4, "mcubes_skimage_lewiner_vertices",
               "max distance ours->lewiner %.2g voxel (lewiner %g vertices, ours %g; lewiner->ours %.2g)", r[10],
               r[9], r[0], r[11]);
    }
    /* the field's kinks (the min of two blobs) may disagree on a few slivers;
       a flipped orientation rule fails them all */
    double share = rc ? 0 : outward_share(&m);
    checkv(share >= 0.99, "mcubes_normals_face_free_side", "%.2f%% of %ld triangles face up the field's gradient",
           100 * share, m.nt);
    free(r);
    free(f);
    nj_mesh_free(&m);
    nj_tsdf_free(t);
}

/* ---- the fused map of a synthetic sequence from its ground truth ------------------- */

/* Vertices of one of our binary PLY files (header as nj_ply_write_mesh writes
 * it: "element vertex N" first, 15-byte records).  Returns the count or -1. */
static long read_vertices(const char *path, float **xyz)
{
    size_t len = 0;
    char *t = e2e_slurp(path, &len);
    char *end = t ? strstr(t, "end_header\n") : NULL, *v = t ? strstr(t, "element vertex ") : NULL;
    long n = v ? atol(v + 15) : -1;
    size_t off = end ? (size_t)(end - t) + 11 : 0;
    *xyz = n > 0 ? malloc(sizeof(float) * 3 * n) : NULL;
    if (!end || n <= 0 || !*xyz || off + 15 * (size_t)n > len) {
        free(t);
        return -1;
    }
    for (long i = 0; i < n; i++) memcpy(*xyz + 3 * i, t + off + 15 * i, 12);   /* little-endian host */
    free(t);
    return n;
}

static int cmp_float(const void *a, const void *b)
{
    float x = *(const float *)a, y = *(const float *)b;
    return (x > y) - (x < y);
}

static nj_synth_config small_yard(const char *dir)
{
    static char out[300];
    snprintf(out, sizeof out, "%s/data", dir);
    nj_synth_config c;
    nj_synth_config_default(&c);
    c.out = out;
    c.seed = 11;
    c.frames = 30;
    c.sequences = 1;
    c.width = 160;
    c.height = 120;
    return c;
}

static void test_truth_map(const char *dir, const nj_synth_config *sc)
{
    nj_map_options o;
    nj_map_options_default(&o);
    char data[300], out[300], ply[320], err[1024];
    snprintf(data, sizeof data, "%s/dataset.json", sc->out);
    snprintf(out, sizeof out, "%s/run/map", dir);
    o.data = data;
    o.sequence = "yard-00";
    o.out = out;
    o.source = NJ_MAP_TRUTH;
    nj_map_result res;
    nj_scene s;
    float *xyz = NULL;
    int rc = nj_map_run(&o, &res, err, sizeof err);
    snprintf(ply, sizeof ply, "%s/%s", out, NJ_MAP_MESH);
    long n = rc ? -1 : read_vertices(ply, &xyz);
    if (n < 0 || nj_synth_yard(sc, 0, &s)) {
        check(0, "map_truth_surface", "map failed: %s", rc ? err : "mesh unreadable");
        free(xyz);
        return;
    }
    float *d = malloc(sizeof(float) * n);
    for (long i = 0; d && i < n; i++) d[i] = nj_scene_distance(&s, xyz + 3 * i) / o.voxel;
    if (d) qsort(d, (size_t)n, sizeof *d, cmp_float);
    float med = d ? d[n / 2] : INFINITY, p95 = d ? d[(long)(0.95 * (n - 1))] : INFINITY;
    /* the bound: the fused surface within 1.5 voxels of the true one */
    checkv(med <= 1.5f && p95 <= 1.5f && n > 10000, "map_truth_surface",
           "%ld vertices, distance to the analytic yard: median %.3f, p95 %.3f voxels (%.3g m voxels)", n, med, p95,
           o.voxel);
    free(d);
    free(xyz);
    nj_scene_free(&s);

    /* the chained trajectory against the poses synth wrote */
    char poses[320], path[320];
    snprintf(poses, sizeof poses, "%s/yard-00/poses.txt", sc->out);
    snprintf(path, sizeof path, "%s/%s", out, NJ_MAP_PATH);
    double *gt = NULL;
    int np = nj_poses_read(poses, &gt, err, sizeof err);
    long nt = read_vertices(path, &xyz);
    double worst = nt == np ? 0 : INFINITY;
    for (long i = 0; nt == np && i < nt; i++)
        for (int k = 0; k < 3; k++) worst = fmax(worst, fabs(xyz[3 * i + k] - gt[12 * i + 4 * k + 3]));
    /* float storage of metre-scale coordinates: 1e-5 m */
    checkv(np == sc->frames && worst <= 1e-5, "map_truth_trajectory",
           "%ld path vertices for %d poses, largest centre difference %.3g m", nt, np, worst);
    free(gt);
    free(xyz);
}

/* ---- the model path: one scale, the chained motions ---------------------------------- */

/* A 2-step model trained on frames 2 apart maps the tiny test sequence: the
 * map must take every 2nd frame, and the path must be the test's own chaining
 * of the model's motions between those frames (tr_dump_motions: the
 * checkpoint through nj_infer_motion, on a folder of every 2nd frame) with
 * every translation times the one scale map.json states, starting at the
 * first recorded pose. */
static void test_model_map(void)
{
    char dir[512], data[600], cfg[700], log[700], ckpt[700], out[700], js[720], path[720], rel[720], images[720],
        poses[720], cmd[4096], err[512];
    if (tr_setup("map", dir, sizeof dir, data, sizeof data)) return;
    snprintf(cfg, sizeof cfg, "%s/train.json", dir);
    snprintf(log, sizeof log, "%s/train.log", dir);
    tr_config(cfg, "\"validate_every\": 0, \"checkpoint_minutes\": 1000, \"max_steps\": 2", "", "");
    snprintf(cmd, sizeof cmd, "sed -i 's/\"frame_offsets\": \\[1\\]/\"frame_offsets\": [2]/' %s && grep -q '\\[2\\]' %s", cfg,
             cfg);
    int rc = system(cmd) ? -1 : tr_wait(tr_start(log, "train --config %s --data %s --out %s/run", cfg, data, dir), 600);
    snprintf(ckpt, sizeof ckpt, "%s/run/final.ckpt", dir);
    snprintf(out, sizeof out, "%s/map", dir);
    snprintf(cmd, sizeof cmd, "%s map --threads 1 --model %s --data %s --sequence yard-02 --voxel 0.1 --out %s",
             e2e_bin(), ckpt, data, out);
    snprintf(log, sizeof log, "%s/map.log", dir);
    if (!rc) rc = e2e_run(cmd, log);
    snprintf(js, sizeof js, "%s/%s", out, NJ_MAP_SUMMARY);
    snprintf(path, sizeof path, "%s/%s", out, NJ_MAP_PATH);
    snprintf(rel, sizeof rel, "%s/rel.f64", dir);
    snprintf(images, sizeof images, "%s/every2", dir);
    snprintf(poses, sizeof poses, "%s/data/yard-02/poses.txt", dir);
    double scale = e2e_json_number(js, "scale"), *gt = NULL, *m = NULL, worst = INFINITY;
    float *xyz = NULL;
    enum { N = 6 };   /* frames 0, 2, ..., 10 of 12 */
    if (!rc && mkdir(images, 0755)) rc = -1;
    for (int i = 0; !rc && i < N; i++) {
        char from[800], to[800];
        snprintf(from, sizeof from, "%s/data/yard-02/cam0/%06d.png", dir, 2 * i);
        snprintf(to, sizeof to, "%s/%06d.png", images, i);
        if (symlink(from, to)) rc = -1;
    }
    int ok = rc == 0 && e2e_json_number(js, "frame_step") == 2 && tr_dump_motions(ckpt, images, N, rel, err, sizeof err) == 0 &&
             nj_poses_read(poses, &gt, err, sizeof err) == 2 * N && read_vertices(path, &xyz) == N;
    char *raw = ok ? e2e_slurp(rel, NULL) : NULL;
    if (raw) {
        m = (double *)raw;
        double C[12];
        memcpy(C, gt, sizeof C);
        worst = 0;
        for (int i = 0; i < N; i++) {
            for (int k = 0; k < 3; k++) worst = fmax(worst, fabs(xyz[3 * i + k] - C[4 * k + 3]));
            if (i == N - 1) break;
            const double *T = m + 12 * i;   /* C ← C·T⁻¹, T⁻¹ = [Rᵀ | −Rᵀ·s·t] */
            double N2[12];
            for (int a = 0; a < 3; a++) {
                for (int b = 0; b < 3; b++)
                    N2[4 * a + b] = C[4 * a] * T[4 * b] + C[4 * a + 1] * T[4 * b + 1] + C[4 * a + 2] * T[4 * b + 2];
                double ti[3];
                for (int b = 0; b < 3; b++)
                    ti[b] = -(T[b] * T[3] + T[4 + b] * T[7] + T[8 + b] * T[11]) * scale;
                N2[4 * a + 3] = C[4 * a + 3] + C[4 * a] * ti[0] + C[4 * a + 1] * ti[1] + C[4 * a + 2] * ti[2];
            }
            memcpy(C, N2, sizeof C);
        }
    }
    char *text = e2e_slurp(js, NULL);
    /* float storage of the centres: 1e-5 m */
    check(ok && worst <= 1e-5 && isfinite(scale) && scale > 0 && text && strstr(text, "ground-truth depth"),
          "map_model_chains_scaled_motions", "exit %d (%s), scale %g, largest centre difference %.3g m: %s", rc, log,
          scale, worst, ok ? "" : err);
    free(text);
    free(raw);
    free(gt);
    free(xyz);
    snprintf(cmd, sizeof cmd, "rm -rf '%s'", dir);
    if (system(cmd)) fprintf(stderr, "could not remove %s\n", dir);
}

/* ---- refusals and the report ------------------------------------------------------- */

/* Runs the command; passes when it fails with status 1, one line naming
 * `what`, and no output folder. */
static void refuses(const char *dir, const char *name, const char *args, const char *what)
{
    char cmd[2400], log[320], out[320];
    snprintf(out, sizeof out, "%s/refused-%s", dir, name);
    snprintf(log, sizeof log, "%s/%s.log", dir, name);
    snprintf(cmd, sizeof cmd, "%s map --threads 1 %s --out '%s'", e2e_bin(), args, out);
    int rc = e2e_run(cmd, log);
    char *text = e2e_slurp(log, NULL);
    int lines = 0;
    for (const char *c = text; c && *c; c++) lines += *c == '\n';
    struct stat st;
    check(rc == 1 && lines == 1 && text && strstr(text, what) && stat(out, &st) != 0, name,
          "status %d, %d lines, output folder %s: %s", rc, lines, stat(out, &st) ? "absent" : "written",
          text ? text : "(no log)");
    free(text);
}

static void test_refusals(const char *dir, const nj_synth_config *sc)
{
    char args[1200], cmd[1400];
    /* a sequence of one frame */
    snprintf(cmd, sizeof cmd, "mkdir -p '%s/one/cam0' && cp '%s/yard-00/cam0/000000.png' '%s/one/cam0/'", dir, sc->out,
             dir);
    char json[320];
    snprintf(json, sizeof json, "%s/one.json", dir);
    int ok = system(cmd) == 0 &&
             e2e_write(json, "{\"sequences\": [{\"name\": \"single\", \"images\": \"one/cam0\", "
                             "\"camera\": {\"fx\": 96, \"fy\": 96, \"cx\": 85.9, \"cy\": 55.9}}]}\n") == 0;
    snprintf(args, sizeof args, "--truth --data '%s' --sequence single", json);
    if (ok) refuses(dir, "map_refuses_short_sequence", args, "at least 2");
    else check(0, "map_refuses_short_sequence", "setup failed");
    /* a cap that cannot hold the map */
    snprintf(args, sizeof args, "--truth --data '%s/dataset.json' --sequence yard-00 --memory-mb 2", sc->out);
    refuses(dir, "map_refuses_memory_cap", args, "budget");
    /* a pose whose rotation is scaled by 1.05: not rigid */
    snprintf(cmd, sizeof cmd,
             "cp -r '%s' '%s/bent' && awk 'NR==5{for(i=1;i<=12;i++) if(i%%4) $i=$i*1.05} {print}' "
             "'%s/yard-00/poses.txt' > '%s/bent/yard-00/poses.txt'",
             sc->out, dir, sc->out, dir);
    snprintf(args, sizeof args, "--truth --data '%s/bent/dataset.json' --sequence yard-00", dir);
    if (system(cmd) == 0) refuses(dir, "map_refuses_non_rigid_pose", args, "pose 5 is not a rigid motion");
    else check(0, "map_refuses_non_rigid_pose", "setup failed");
}

static void test_report(const char *dir)
{
    char run[320], html[340], err[512];
    snprintf(run, sizeof run, "%s/run", dir);
    snprintf(html, sizeof html, "%s/report.html", run);
    nj_report_options o = {run, NULL, NULL, NULL, NULL};
    int rc = nj_report_run(&o, err, sizeof err);
    char *t = rc ? NULL : e2e_slurp(html, NULL);
    const char *sec = t ? strstr(t, "<section id=\"map\">") : NULL;
    check(sec && strstr(sec, "src=\"data:image/png;base64,iVBORw0KGgo") && !strstr(t, "http://") &&
              !strstr(t, "https://") && strstr(sec, "yard-00"),
          "map_report_shows_picture", "%s", rc ? err : sec ? "no embedded PNG, or a network reference" : "no map section");
    free(t);
}

int main(int argc, char **argv)
{
    (void)argc;
    char dir[64];
    if (tdu_tmpdir(dir, sizeof dir)) {
        check(0, "map_setup", "no scratch folder");
        return test_exit();
    }
    test_mcubes(argv[0], dir);
    nj_synth_config sc = small_yard(dir);
    char err[512];
    if (nj_synth_run(&sc, err, sizeof err)) {
        check(0, "map_truth_surface", "synth: %s", err);
    } else {
        test_truth_map(dir, &sc);
        test_report(dir);
        if (e2e_have_binary()) {
            test_refusals(dir, &sc);
            test_model_map();
        }
        else check(0, "map_refuses_short_sequence", "no program at %s (make nightjar)", e2e_bin());
    }
    tdu_rmtree(dir);
    return test_exit();
}

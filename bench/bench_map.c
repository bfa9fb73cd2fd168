/* bench/bench_map.c — `make bench-map`: fusion time per frame and peak memory
 * of `nightjar map` on a 200-frame synthetic sequence (320x240) at 5 cm
 * voxels from ground-truth depth and poses, and the fused surface's distance
 * to the renderer's analytic yard (median and 95th percentile, in voxels).
 * Prints figures only; the tests never time anything.
 *
 * With `--mesh PLY --seed S --frames F --sequences N --index I` it instead
 * prints the distance of a mesh written by `nightjar map` to the yard of
 * sequence I of `nightjar synth --seed S --frames F --sequences N` (the
 * demo's trained-versus-untrained comparison, tools/demo.sh). */
#include "data/scene_gen.h"
#include "data/synth.h"
#include "train/map/map.h"
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <unistd.h>

static int cmp_float(const void *a, const void *b)
{
    float x = *(const float *)a, y = *(const float *)b;
    return (x > y) - (x < y);
}

/* Median and p95 distance (metres) of the PLY's vertices to the yard; -1 on failure. */
static int mesh_distance(const char *ply, const nj_synth_config *c, int idx, double *med, double *p95, long *nv)
{
    FILE *f = fopen(ply, "rb");
    char line[256];
    long n = -1;
    while (f && fgets(line, sizeof line, f) && strcmp(line, "end_header\n"))
        if (!strncmp(line, "element vertex ", 15)) n = atol(line + 15);
    float *d = n > 0 ? malloc(sizeof(float) * n) : NULL;
    nj_scene s;
    if (!f || !d || nj_synth_yard(c, idx, &s)) {
        if (f) fclose(f);
        free(d);
        return -1;
    }
    unsigned char rec[15];
    long k = 0;
    for (; k < n && fread(rec, 1, 15, f) == 15; k++) {
        float p[3];
        memcpy(p, rec, 12);
        d[k] = nj_scene_distance(&s, p);
    }
    fclose(f);
    nj_scene_free(&s);
    qsort(d, (size_t)k, sizeof *d, cmp_float);
    *med = k ? d[k / 2] : NAN;
    *p95 = k ? d[(long)(0.95 * (k - 1))] : NAN;
    *nv = k;
    free(d);
    return k == n ? 0 : -1;
}

static int distance_mode(int argc, char **argv)
{
    nj_synth_config c;
    nj_synth_config_default(&c);
    const char *ply = NULL;
    int idx = 0;
    for (int i = 1; i + 1 < argc; i += 2) {
        if (!strcmp(argv[i], "--mesh")) ply = argv[i + 1];
        else if (!strcmp(argv[i], "--seed")) c.seed = strtoull(argv[i + 1], NULL, 10);
        else if (!strcmp(argv[i], "--frames")) c.frames = atoi(argv[i + 1]);
        else if (!strcmp(argv[i], "--sequences")) c.sequences = atoi(argv[i + 1]);
        else if (!strcmp(argv[i], "--index")) idx = atoi(argv[i + 1]);
    }
    double med, p95;
    long n;
    if (!ply || mesh_distance(ply, &c, idx, &med, &p95, &n)) {
        fprintf(stderr, "bench_map: cannot measure %s\n", ply ? ply : "(no --mesh)");
        return 1;
    }
    printf("surface distance to the true yard: median %.3f m, p95 %.3f m over %ld vertices (%s)\n", med, p95, n, ply);
    return 0;
}

int main(int argc, char **argv)
{
    if (argc > 1) return distance_mode(argc, argv);
    char dir[] = "/tmp/nj_bench_map_XXXXXX", data[128], json[160], out[160], err[1024];
    if (!mkdtemp(dir)) return 1;
    snprintf(data, sizeof data, "%s/data", dir);
    snprintf(json, sizeof json, "%s/dataset.json", data);
    snprintf(out, sizeof out, "%s/map", dir);
    nj_synth_config c;
    nj_synth_config_default(&c);
    c.out = data;
    c.seed = 23;
    c.frames = 200;
    c.sequences = 1;
    nj_map_options o;
    nj_map_options_default(&o);
    o.data = json;
    o.sequence = "yard-00";
    o.out = out;
    o.source = NJ_MAP_TRUTH;
    nj_map_result r;
    double med = NAN, p95 = NAN;
    long nv = 0;
    int rc = nj_synth_run(&c, err, sizeof err) || nj_map_run(&o, &r, err, sizeof err);
    char ply[200];
    snprintf(ply, sizeof ply, "%s/%s", out, NJ_MAP_MESH);
    if (!rc) mesh_distance(ply, &c, 0, &med, &p95, &nv);
    struct rusage ru;
    getrusage(RUSAGE_SELF, &ru);
    char cmd[300];
    snprintf(cmd, sizeof cmd, "rm -rf '%s'", dir);
    if (system(cmd)) fprintf(stderr, "bench_map: could not remove %s\n", dir);
    if (rc) {
        fprintf(stderr, "bench_map: %s\n", err);
        return 1;
    }
    printf("map: %d frames 320x240, voxel %.2f m, truncation %.2f m, reach %.0f m: %ld blocks (%.1f MiB), %ld triangles\n",
           r.frames, o.voxel, o.voxel * o.band_voxels, o.max_depth, r.blocks, r.memory_mb, r.triangles);
    printf("surface vs the analytic yard: median %.3f, p95 %.3f voxels\n", med / o.voxel, p95 / o.voxel);
    printf("fusion_ms_per_frame=%.2f peak_rss_mb=%.1f\n", 1e3 * r.fuse_seconds / r.frames, ru.ru_maxrss / 1024.0);
    return 0;
}

/* train/measure/pointcloud.c — depth + intrinsics → coloured binary PLY (see pointcloud.h). */
#include "train/measure/pointcloud.h"
#include "data/atomic.h"
#include <math.h>
#include <stdint.h>
#include <stdlib.h>
#include <stdio.h>
#include <string.h>

#define VERTEX_BYTES 15

long nj_cloud_count(const float *depth, size_t n)
{
    long c = 0;
    for (size_t i = 0; i < n; i++) c += isfinite(depth[i]) && depth[i] > 0;
    return c;
}

static void put_f32le(unsigned char *p, float v)
{
    uint32_t b;
    memcpy(&b, &v, 4);
    for (int k = 0; k < 4; k++) p[k] = (unsigned char)(b >> (8 * k));
}

static unsigned char to_u8(float v)
{
    if (!(v > 0)) return 0;
    return v >= 1 ? 255 : (unsigned char)lroundf(v * 255.0f);
}

/* One image row of vertices into buf; returns the bytes used. */
static size_t pack_row(const float *depth, const nj_image *im, nj_camera cam, int y,
                       unsigned char *buf)
{
    size_t plane = (size_t)im->w * im->h, used = 0;
    for (int x = 0; x < im->w; x++) {
        size_t i = (size_t)y * im->w + x;
        float z = depth[i];
        if (!isfinite(z) || !(z > 0)) continue;
        unsigned char *p = buf + used;
        put_f32le(p, ((float)x - cam.cx) / cam.fx * z);
        put_f32le(p + 4, ((float)y - cam.cy) / cam.fy * z);
        put_f32le(p + 8, z);
        for (int c = 0; c < 3; c++) p[12 + c] = to_u8(im->data[c * plane + i]);
        used += VERTEX_BYTES;
    }
    return used;
}

/* The header of every PLY we write: coloured vertices, then optional
 * triangles and segments. */
static int header(FILE *f, const char *comment, long nv, long nf, long ne)
{
    int ok = fprintf(f, "ply\nformat binary_little_endian 1.0\n") > 0;
    if (comment) ok = ok && fprintf(f, "comment %s\n", comment) > 0;
    ok = ok && fprintf(f, "element vertex %ld\nproperty float x\nproperty float y\nproperty float z\n"
                          "property uchar red\nproperty uchar green\nproperty uchar blue\n", nv) > 0;
    if (nf) ok = ok && fprintf(f, "element face %ld\nproperty list uchar int vertex_indices\n", nf) > 0;
    if (ne) ok = ok && fprintf(f, "element edge %ld\nproperty int vertex1\nproperty int vertex2\n", ne) > 0;
    return ok && fprintf(f, "end_header\n") > 0;
}

int nj_ply_write(const char *path, const float *depth, const nj_image *colour, nj_camera cam,
                 long *count, char *err, size_t errlen)
{
    err[0] = 0;
    if (!nj_camera_valid(cam)) {
        snprintf(err, errlen, "%s: invalid camera intrinsics", path);
        return -1;
    }
    long n = nj_cloud_count(depth, (size_t)colour->w * colour->h);
    unsigned char *row = malloc((size_t)colour->w * VERTEX_BYTES);
    nj_atomic_file a;
    if (!row) {
        snprintf(err, errlen, "%s: out of memory", path);
        return -1;
    }
    if (nj_atomic_open(&a, path, err, errlen)) {
        free(row);
        return -1;
    }
    int ok = header(a.f, "nightjar point cloud: camera frame, x right, y down, z forward", n, 0, 0);
    for (int y = 0; ok && y < colour->h; y++) {
        size_t bytes = pack_row(depth, colour, cam, y, row);
        ok = fwrite(row, 1, bytes, a.f) == bytes;
    }
    free(row);
    if (nj_atomic_close(&a, ok, err, errlen)) return -1;
    if (count) *count = n;
    return 0;
}

static void put_i32le(unsigned char *p, int v)
{
    uint32_t b = (uint32_t)v;
    for (int k = 0; k < 4; k++) p[k] = (unsigned char)(b >> (8 * k));
}

int nj_ply_write_mesh(const char *path, const nj_ply_mesh *m, char *err, size_t errlen)
{
    err[0] = 0;
    nj_atomic_file a;
    if (nj_atomic_open(&a, path, err, errlen)) return -1;
    int ok = header(a.f, m->comment, m->nv, m->nf, m->ne);
    unsigned char buf[VERTEX_BYTES];
    for (long i = 0; ok && i < m->nv; i++) {
        for (int k = 0; k < 3; k++) {
            put_f32le(buf + 4 * k, m->xyz[3 * i + k]);
            buf[12 + k] = m->rgb[3 * i + k];
        }
        ok = fwrite(buf, 1, VERTEX_BYTES, a.f) == VERTEX_BYTES;
    }
    for (long i = 0; ok && i < m->nf; i++) {
        buf[0] = 3;
        for (int k = 0; k < 3; k++) put_i32le(buf + 1 + 4 * k, m->face[3 * i + k]);
        ok = fwrite(buf, 1, 13, a.f) == 13;
    }
    for (long i = 0; ok && i < m->ne; i++) {
        put_i32le(buf, m->edge[2 * i]);
        put_i32le(buf + 4, m->edge[2 * i + 1]);
        ok = fwrite(buf, 1, 8, a.f) == 8;
    }
    return nj_atomic_close(&a, ok, err, errlen);
}

/* train/measure/pointcloud.h — coloured point clouds from depth + intrinsics, saved as
 * binary little-endian PLY (Turk 1994 format): one vertex per pixel with a
 * finite positive depth, in row-major pixel order, properties
 *   float x, float y, float z, uchar red, uchar green, uchar blue
 * (15 bytes per vertex, no padding).  Coordinates are the camera frame of
 * nn/geom/camera.h in the depth's unit: x right, y down, z forward,
 * X = z·((u − cx)/fx, (v − cy)/fy, 1).  Writes are atomic (data/atomic.h). */
#ifndef NJ_POINTCLOUD_H
#define NJ_POINTCLOUD_H
#include "data/image.h"
#include "nn/geom/camera.h"
#include <stddef.h>

/* Number of vertices a depth map yields (finite, > 0). */
long nj_cloud_count(const float *depth, size_t n);
/* Writes PATH from a w×h depth map and a colour image of the same size
 * (values in [0, 1], rounded to 8 bits).  *count (may be NULL) receives the
 * number of vertices.  Returns 0, or -1 with "PATH: why" in err. */
int nj_ply_write(const char *path, const float *depth, const nj_image *colour, nj_camera cam,
                 long *count, char *err, size_t errlen);

/* A general coloured PLY: nv vertices (xyz, rgb as above) and optionally nf
 * triangles ("element face" with "property list uchar int vertex_indices")
 * and ne line segments ("element edge" with "property int vertex1",
 * "property int vertex2"), in that order, binary little-endian; `comment`
 * (one line, may be NULL) goes into the header.  The point clouds above use
 * the same header and vertex layout. */
typedef struct nj_ply_mesh {
    const char *comment;
    long nv, nf, ne;
    const float *xyz;           /* 3·nv */
    const unsigned char *rgb;   /* 3·nv */
    const int *face;            /* 3·nf */
    const int *edge;            /* 2·ne */
} nj_ply_mesh;

/* Writes PATH atomically.  Returns 0, or -1 with "PATH: why" in err. */
int nj_ply_write_mesh(const char *path, const nj_ply_mesh *m, char *err, size_t errlen);

#endif

/* train/map/tsdf_parts.h — the volume's blocks as mcubes.c reads them
 * (internal to train/map/). */
#ifndef NJ_TSDF_PARTS_H
#define NJ_TSDF_PARTS_H
#include "train/map/map.h"

void nj_tsdf_block_key(const nj_tsdf *t, long b, int key[3]);
/* Index of block (a, b, c), or -1. */
long nj_tsdf_find(const nj_tsdf *t, int a, int b, int c);
/* Voxel n (x + 8·(y + 8·z)) of block b. */
void nj_tsdf_voxel(const nj_tsdf *t, long b, int n, float *d, float *w, unsigned char rgb[3]);
float nj_tsdf_voxel_size(const nj_tsdf *t);

#endif

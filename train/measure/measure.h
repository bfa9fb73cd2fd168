/* train/measure/measure.h — what the model's outputs are measured with: its
 * public face for the loop (validation), eval, predict and the report.
 *
 *   metrics.h      depth metrics (AbsRel, δ, ...), median scaling, ATE/RPE
 *   regions.h      per depth band, obstacle and lead-vehicle pixels
 *   groundplane.h  metric scale from the camera's height above flat ground
 *   pointcloud.h   coloured point clouds as binary PLY */
#ifndef NJ_MEASURE_H
#define NJ_MEASURE_H
#include "train/measure/metrics.h"
#include "train/measure/regions.h"
#include "train/measure/groundplane.h"
#include "train/measure/pointcloud.h"
#endif

/* data/trajectory.h — a ground vehicle's camera path for the synthetic yard.
 *
 * The vehicle drives forward at a cruising speed with a smoothly varying
 * path curvature (gentle turns; heading rate = speed × curvature), comes to
 * occasional stops (decelerate, stand still, accelerate), and its camera
 * shakes a little (pitch, roll, height) in proportion to the speed — so frames
 * taken while stopped are identical.  Camera-to-world rotation
 * R = R_y(heading)·R_x(pitch)·R_z(roll); camera x right, y down, z forward.
 */
#ifndef NJ_TRAJECTORY_H
#define NJ_TRAJECTORY_H
#include "nn/rng.h"

typedef struct nj_rig_pose {
    double R[9];             /* camera-to-world rotation, row-major */
    double c[3];             /* camera centre in the world */
} nj_rig_pose;

typedef struct nj_trajectory {
    int n;                   /* frames */
    double dt;               /* seconds between frames */
    double height;           /* nominal camera height above the ground (m) */
    nj_rig_pose *pose;       /* n camera poses */
    float *px, *pz, *heading;/* n vehicle positions and headings (radians; forward = (sin, 0, cos)) */
    float *speed;            /* n speeds (m/s) */
    int stops;               /* number of stops */
} nj_trajectory;

/* Draws a path of n frames at interval dt.  Returns 0 or -1 (out of memory). */
int nj_trajectory_make(nj_rng *r, int n, double dt, nj_trajectory *tr);
void nj_trajectory_free(nj_trajectory *tr);
/* R = R_y(yaw)·R_x(pitch)·R_z(roll). */
void nj_rotation_ypr(double yaw, double pitch, double roll, double R[9]);

#endif

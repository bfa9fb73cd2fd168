/* data/trajectory.h — a ground vehicle's camera path for the synthetic yard.
 *
 * The vehicle drives forward at a cruising speed with a smoothly varying
 * path curvature (gentle turns; heading rate = speed × curvature), comes to
 * occasional stops (decelerate, stand still, accelerate), and its camera
 * shakes a little (pitch, roll, height) in proportion to the speed — so frames
 * taken while stopped are identical.  The fleet variant draws, from a second
 * generator (so the first one's draws do not change), halts — at least two
 * stops holding ~1 s — and turns — sharp turns that bring the heading rate
 * up to 0.85–0.95° per frame at 10 Hz.  Camera-to-world rotation
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
    double peak_turn;        /* largest heading change between two frames (radians) */
} nj_trajectory;

/* Draws a path of n frames at interval dt.  Returns 0 or -1 (out of memory). */
int nj_trajectory_make(nj_rng *r, int n, double dt, nj_trajectory *tr);
/* The same path with the fleet nuisances: `halts` replaces the stops, `turns`
 * adds sharp turns; both draw from `fleet` only (halts = turns = 0 gives
 * nj_trajectory_make's path exactly). */
int nj_trajectory_make_fleet(nj_rng *r, nj_rng *fleet, int n, double dt, int halts, int turns, nj_trajectory *tr);
void nj_trajectory_free(nj_trajectory *tr);
/* R = R_y(yaw)·R_x(pitch)·R_z(roll). */
void nj_rotation_ypr(double yaw, double pitch, double roll, double R[9]);

#endif

/* data/trajectory.c — vehicle motion for the synthetic yard (see trajectory.h). */
#include "data/trajectory.h"
#include <math.h>
#include <stdlib.h>
#include <string.h>

#define PI 3.14159265358979323846
#define MAX_STOPS 2
#define MAX_HALTS 16        /* stops with halts on */
#define MAX_TURNS 16
#define SUBSTEPS 8

typedef struct motion {
    double v0;                           /* cruising speed */
    double ka[2], kt[2], kp[2];          /* curvature: amplitudes, periods, phases */
    double stop_t[MAX_HALTS], stop_hold[MAX_HALTS];
    int nstops;
    double jf[3][2], jp[3][2];           /* shake: frequencies and phases */
    double pitch0;
    int nturns;                          /* sharp turns (turns on) */
    double turn_c[MAX_TURNS], turn_w[MAX_TURNS], turn_a[MAX_TURNS];   /* centre, half-width (s), curvature */
    double kmax;                         /* curvature bound, 0 = none (turns off) */
} motion;

static double uni(nj_rng *r, double a, double b) { return a + (b - a) * nj_rng_uniform(r); }

static double smooth01(double x) { x = x < 0 ? 0 : x > 1 ? 1 : x; return x * x * (3 - 2 * x); }

static void draw_motion(nj_rng *r, double duration, motion *m)
{
    m->v0 = uni(r, 0.9, 1.5);
    m->ka[0] = uni(r, 0.03, 0.07) * (nj_rng_uniform(r) < 0.5 ? -1 : 1);
    m->ka[1] = uni(r, 0.01, 0.03);
    m->kt[0] = uni(r, 12, 25);
    m->kt[1] = uni(r, 4, 8);
    m->kp[0] = uni(r, 0, 2 * PI);
    m->kp[1] = uni(r, 0, 2 * PI);
    m->nstops = duration < 8 ? 0 : 1 + (int)nj_rng_below(r, MAX_STOPS);
    for (int k = 0; k < m->nstops; k++) {
        double lo = m->nstops == 1 ? 0.3 : (k ? 0.6 : 0.2), hi = m->nstops == 1 ? 0.6 : (k ? 0.75 : 0.4);
        m->stop_t[k] = duration * uni(r, lo, hi);
        m->stop_hold[k] = uni(r, 1.0, 2.0);
    }
    for (int a = 0; a < 3; a++) {
        m->jf[a][0] = uni(r, 1.1, 1.9);
        m->jf[a][1] = uni(r, 2.3, 3.1);
        m->jp[a][0] = uni(r, 0, 2 * PI);
        m->jp[a][1] = uni(r, 0, 2 * PI);
    }
    m->pitch0 = -uni(r, 0.03, 0.08);
}

/* Speed factor in [0, 1]: 0.8 s braking, the hold, 1.2 s accelerating. */
static double stop_factor(const motion *m, double t)
{
    double f = 1;
    for (int k = 0; k < m->nstops; k++) {
        double a = t - m->stop_t[k], hold = m->stop_hold[k];
        if (a < 0) continue;
        if (a < 0.8) f *= 1 - smooth01(a / 0.8);
        else if (a < 0.8 + hold) f = 0;
        else f *= smooth01((a - 0.8 - hold) / 1.2);
    }
    return f;
}

/* With turns on: the sharp turns (raised-cosine bumps) are added and the sum
 * is bounded softly by kmax (kmax·tanh(k/kmax)), so the heading rate peaks
 * just below v0·kmax. */
static double curvature(const motion *m, double t)
{
    double k = m->ka[0] * sin(2 * PI * t / m->kt[0] + m->kp[0]) + m->ka[1] * sin(2 * PI * t / m->kt[1] + m->kp[1]);
    if (m->kmax <= 0) return k;
    for (int i = 0; i < m->nturns; i++) {
        double x = (t - m->turn_c[i]) / m->turn_w[i];
        if (fabs(x) < 1) k += m->turn_a[i] * 0.5 * (1 + cos(PI * x));
    }
    return m->kmax * tanh(k / m->kmax);
}

/* Halts: at least two stops holding ~1 s (one in sequences of 4–8 s, none
 * shorter), one per 10 s beyond 20 s, each inside its own equal share of the
 * sequence (braking, hold and start all fit). */
static void draw_halts(nj_rng *r, double duration, motion *m)
{
    int n = duration >= 8 ? (int)(duration / 10) : duration >= 4 ? 1 : 0;
    if (duration >= 8 && n < 2) n = 2;
    if (n > MAX_HALTS) n = MAX_HALTS;
    m->nstops = n;
    double share = n ? duration / n : 0;
    for (int k = 0; k < n; k++) {
        m->stop_hold[k] = uni(r, 1.0, 1.3);
        double span = 0.8 + m->stop_hold[k] + 1.2, room = share - span - 0.6;
        m->stop_t[k] = k * share + 0.3 + (room > 0 ? uni(r, 0, room) : 0);
    }
}

/* 1 when [a, b] overlaps a stop (braking, hold or start). */
static int during_stop(const motion *m, double a, double b)
{
    for (int k = 0; k < m->nstops; k++)
        if (b > m->stop_t[k] && a < m->stop_t[k] + 0.8 + m->stop_hold[k] + 1.2) return 1;
    return 0;
}

/* Turns: the peak heading rate is drawn in 0.85–0.95° per frame; sharp turns
 * of 2–3 s, one per 6 s of sequence (at least 2 from 8 s), centred where the
 * vehicle cruises and apart from the turn before (when its share of the
 * sequence has such a time), push the curvature to its bound. */
static void draw_turns(nj_rng *r, double duration, double dt, motion *m)
{
    double peak = uni(r, 0.85, 0.95) * PI / 180 / dt;      /* rad/s */
    m->kmax = peak / m->v0;
    int n = (int)(duration / 6);
    if (n < 2) n = duration >= 8 ? 2 : 1;
    if (n > MAX_TURNS) n = MAX_TURNS;
    m->nturns = n;
    double t0 = 0.1 * duration, share = 0.8 * duration / n;
    for (int k = 0; k < n; k++) {
        m->turn_w[k] = uni(r, 1.0, 1.5);
        double free_c[256];          /* centres on a 0.1 s grid of the share at cruising speed, */
        int nfree = 0;               /* the turn not overlapping the one before */
        for (double c = t0 + share * k; c < t0 + share * (k + 1) && nfree < 256; c += 0.1)
            if (!during_stop(m, c - 0.4, c + 0.4) && (k == 0 || c - m->turn_c[k - 1] >= m->turn_w[k - 1] + m->turn_w[k]))
                free_c[nfree++] = c;
        m->turn_c[k] = nfree ? free_c[nj_rng_below(r, (uint32_t)nfree)] : t0 + share * (k + 0.5);
        m->turn_a[k] = 3.0 * m->kmax * (nj_rng_uniform(r) < 0.5 ? -1 : 1);
    }
}

static double shake(const motion *m, int a, double t)
{
    return 0.5 * (sin(2 * PI * m->jf[a][0] * t + m->jp[a][0]) + sin(2 * PI * m->jf[a][1] * t + m->jp[a][1]));
}

void nj_rotation_ypr(double yaw, double pitch, double roll, double R[9])
{
    double cy = cos(yaw), sy = sin(yaw), cp = cos(pitch), sp = sin(pitch), cr = cos(roll), sr = sin(roll);
    double Ry[9] = {cy, 0, sy, 0, 1, 0, -sy, 0, cy};
    double Rx[9] = {1, 0, 0, 0, cp, -sp, 0, sp, cp};
    double Rz[9] = {cr, -sr, 0, sr, cr, 0, 0, 0, 1};
    double T[9];
    for (int i = 0; i < 3; i++)
        for (int j = 0; j < 3; j++) {
            T[3 * i + j] = 0;
            for (int k = 0; k < 3; k++) T[3 * i + j] += Rx[3 * i + k] * Rz[3 * k + j];
        }
    for (int i = 0; i < 3; i++)
        for (int j = 0; j < 3; j++) {
            R[3 * i + j] = 0;
            for (int k = 0; k < 3; k++) R[3 * i + j] += Ry[3 * i + k] * T[3 * k + j];
        }
}

static void camera_pose(const motion *m, double t, double x, double z, double psi, double height, nj_rig_pose *p)
{
    double s = stop_factor(m, t), deg = PI / 180;
    double pitch = m->pitch0 + 0.5 * deg * shake(m, 0, t) * s;
    double roll = 0.4 * deg * shake(m, 1, t) * s;
    nj_rotation_ypr(psi, pitch, roll, p->R);
    p->c[0] = x;
    p->c[1] = -(height + 0.008 * shake(m, 2, t) * s);
    p->c[2] = z;
}

int nj_trajectory_make(nj_rng *r, int n, double dt, nj_trajectory *tr)
{
    return nj_trajectory_make_fleet(r, NULL, n, dt, 0, 0, tr);
}

int nj_trajectory_make_fleet(nj_rng *r, nj_rng *fleet, int n, double dt, int halts, int turns, nj_trajectory *tr)
{
    memset(tr, 0, sizeof *tr);
    tr->n = n;
    tr->dt = dt;
    tr->pose = malloc((size_t)n * sizeof(nj_rig_pose));
    tr->px = malloc((size_t)n * sizeof(float));
    tr->pz = malloc((size_t)n * sizeof(float));
    tr->heading = malloc((size_t)n * sizeof(float));
    tr->speed = malloc((size_t)n * sizeof(float));
    if (!tr->pose || !tr->px || !tr->pz || !tr->heading || !tr->speed) { nj_trajectory_free(tr); return -1; }
    motion m;
    draw_motion(r, n * dt, &m);
    m.nturns = 0;
    m.kmax = 0;
    if (fleet && halts) draw_halts(fleet, n * dt, &m);
    if (fleet && turns) draw_turns(fleet, n * dt, dt, &m);
    tr->stops = m.nstops;
    tr->height = uni(r, 0.8, 1.2);
    double x = 0, z = 0, psi = uni(r, 0, 2 * PI), h = dt / SUBSTEPS;
    for (int i = 0; i < n; i++) {
        double t = i * dt;
        camera_pose(&m, t, x, z, psi, tr->height, &tr->pose[i]);
        tr->px[i] = (float)x;
        tr->pz[i] = (float)z;
        tr->heading[i] = (float)psi;
        tr->speed[i] = (float)(m.v0 * stop_factor(&m, t));
        for (int k = 0; k < SUBSTEPS; k++) {      /* midpoint integration to the next frame */
            double tm = t + (k + 0.5) * h, v = m.v0 * stop_factor(&m, tm);
            double pm = psi + 0.5 * h * v * curvature(&m, tm);
            x += h * v * sin(pm);
            z += h * v * cos(pm);
            psi += h * v * curvature(&m, tm);
        }
    }
    for (int i = 1; i < n; i++) {
        double d = fabs((double)tr->heading[i] - tr->heading[i - 1]);
        if (d > tr->peak_turn) tr->peak_turn = d;
    }
    return 0;
}

void nj_trajectory_free(nj_trajectory *tr)
{
    free(tr->pose);
    free(tr->px);
    free(tr->pz);
    free(tr->heading);
    free(tr->speed);
    memset(tr, 0, sizeof *tr);
}

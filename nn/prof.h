/* nn/prof.h — an optional per-category wall-clock profile of a training step.
 *
 * Off by default: nj_prof_start() then returns 0 and nj_prof_stop() does
 * nothing, so instrumented ops pay one branch.  When enabled (./nightjar bench
 * --profile), an instrumented op adds its elapsed time to a category it names
 * itself ("conv_forward", "warping", ...): the categories are registered by the
 * ops on first use, so this file knows no op by name.  An op's backward is
 * timed by the tape replay (nn/graph.c) under the category the op stored in
 * its tape entry (nj_op.prof; NULL = not timed).  Only the main thread's ops
 * count (they parallelise inside), or replica 0's when a step runs as
 * per-thread replicas, so the totals need no locking. */
#ifndef NJ_PROF_H
#define NJ_PROF_H

/* At most this many categories; later new names are not timed. */
#define NJ_PROF_MAX 16

void nj_prof_enable(int on);
/* Zeroes every total (the categories stay registered). */
void nj_prof_reset(void);
/* A start time (seconds) when profiling, else 0. */
double nj_prof_start(void);
/* Adds now − t0 to the category's total when profiling, registering the
 * category on its first use.  `category` must outlive the program (a literal). */
void nj_prof_stop(const char *category, double t0);
/* The registered categories, in order of first use. */
int nj_prof_count(void);
const char *nj_prof_name(int i);
double nj_prof_seconds(int i);
/* The total of a category by name; 0 when it never ran. */
double nj_prof_seconds_of(const char *category);

#endif

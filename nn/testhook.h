/* nn/testhook.h — the one way tests reach inside the product.
 *
 * Some behaviours can only be tested end to end if the running program is
 * nudged: a loss must turn NaN at a chosen step, a file write must stay open
 * long enough to be killed half-way.  Every such nudge is a named hook read
 * from one environment variable,
 *
 *     NJ_TEST_HOOKS="name=value[,name=value...]"
 *
 * set by the test for the program it runs.  Without it every hook is off.
 * The hooks (and the tests that use them):
 *
 *   nonfinite=STEP:COUNT  train: the next COUNT step losses from STEP on are
 *                         replaced by NaN, to exercise skip / reload / halved
 *                         LR recovery (train/loop/trainer.c; test_train_loop)
 *   write_pause_ms=MS     every atomic file write (data/atomic.c) and the
 *                         checkpoint writer pause MS ms half-way, so a kill
 *                         lands inside a write (test_kill_random)
 *
 * A new hook is added here, to this list, and nowhere else. */
#ifndef NJ_TESTHOOK_H
#define NJ_TESTHOOK_H

/* The values of hook `name` ("A" or "A:B", integers) into v[0..1]; returns
 * how many were given (0: the hook is off or malformed). */
int nj_test_hook(const char *name, long v[2]);

#endif

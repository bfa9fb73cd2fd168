/* tests/test_testhook.c — nn/testhook.h: the NJ_TEST_HOOKS parser finds a
 * hook by its exact name among several, reads one or two integers, and treats
 * malformed values and absent hooks as off (so a typo can never switch a
 * hook on with a garbage value). */
#include "nn/testhook.h"
#include "tests/check.h"
#include <stdlib.h>

static int hook(const char *env, const char *name, long *a, long *b)
{
    long v[2] = {-99, -99};
    if (env) setenv("NJ_TEST_HOOKS", env, 1);
    else unsetenv("NJ_TEST_HOOKS");
    int n = nj_test_hook(name, v);
    *a = v[0];
    *b = v[1];
    return n;
}

int main(void)
{
    long a, b;
    int n = hook(NULL, "nonfinite", &a, &b);
    check(n == 0, "no NJ_TEST_HOOKS: every hook off", "got %d", n);
    n = hook("nonfinite=120:3", "nonfinite", &a, &b);
    check(n == 2 && a == 120 && b == 3, "nonfinite=120:3 gives two values", "n %d, %ld:%ld", n, a, b);
    n = hook("write_pause_ms=12,nonfinite=5:2", "write_pause_ms", &a, &b);
    check(n == 1 && a == 12, "first of two hooks: one value", "n %d, %ld", n, a);
    n = hook("write_pause_ms=12,nonfinite=5:2", "nonfinite", &a, &b);
    check(n == 2 && a == 5 && b == 2, "second of two hooks: two values", "n %d, %ld:%ld", n, a, b);
    n = hook("write_pause_ms_x=12", "write_pause_ms", &a, &b);
    check(n == 0, "a longer name with the hook's name as prefix is another hook", "n %d", n);
    n = hook("x_write_pause_ms=12", "write_pause_ms", &a, &b);
    check(n == 0, "a name ending in the hook's name is another hook", "n %d", n);
    n = hook("nonfinite=abc", "nonfinite", &a, &b);
    check(n == 0, "a value that is not a number: off", "n %d", n);
    n = hook("nonfinite=3:x", "nonfinite", &a, &b);
    check(n == 0, "a malformed second value: off", "n %d", n);
    n = hook("nonfinite=3x", "nonfinite", &a, &b);
    check(n == 0, "trailing junk after the value: off", "n %d", n);
    n = hook("nonfinite", "nonfinite", &a, &b);
    check(n == 0, "a hook without '=': off", "n %d", n);
    return test_failures() ? 1 : 0;
}

/* tests/check.c — PASS/FAIL lines and the failure count (see check.h). */
#include "tests/check.h"
#include <stdarg.h>
#include <stdio.h>

static int failures;

int check(int cond, const char *name, const char *fmt, ...)
{
    if (cond) {
        printf("PASS %s\n", name);
    } else {
        va_list ap;
        printf("FAIL %s: ", name);
        va_start(ap, fmt);
        vprintf(fmt, ap);
        va_end(ap);
        printf("\n");
        failures++;
    }
    fflush(stdout);
    return cond;
}

int test_failures(void) { return failures; }
int test_exit(void) { return failures ? 1 : 0; }

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

int checkv(int cond, const char *name, const char *fmt, ...)
{
    char msg[1024];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(msg, sizeof msg, fmt, ap);
    va_end(ap);
    if (cond) printf("info %s: %s\n", name, msg);
    return check(cond, name, "%s", msg);
}

int test_failures(void) { return failures; }
int test_exit(void) { return failures ? 1 : 0; }

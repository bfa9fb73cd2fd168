/* tests/check.h — the test suite's tiny assertion layer.
 * Every check prints one line: "PASS name" or "FAIL name: why".  tests/run.sh
 * counts those lines over all test programs and prints "N passed, N failed".
 * A test program ends with `return test_exit();`: non-zero if any check failed. */
#ifndef NJ_CHECK_H
#define NJ_CHECK_H

/* Prints PASS/FAIL for `name`; the printf-style message explains a failure
 * (the values seen).  Returns cond. */
int check(int cond, const char *name, const char *fmt, ...)
    __attribute__((format(printf, 3, 4)));
/* check() that also prints the measured values of a passing check, on an
 * "info NAME: ..." line before its PASS line (run.sh counts only PASS/FAIL). */
int checkv(int cond, const char *name, const char *fmt, ...)
    __attribute__((format(printf, 3, 4)));
/* Number of failed checks so far in this program. */
int test_failures(void);
int test_exit(void);

/* UNDER_ASAN: 1 when this test program is built with AddressSanitizer (gcc
 * defines __SANITIZE_ADDRESS__, clang has the feature test), else 0. */
#if defined(__SANITIZE_ADDRESS__)
#define UNDER_ASAN 1
#elif defined(__has_feature)
#if __has_feature(address_sanitizer)
#define UNDER_ASAN 1
#endif
#endif
#ifndef UNDER_ASAN
#define UNDER_ASAN 0
#endif

#endif

/* tests/e2e_support.h — running ./nightjar from tests: temp folders, shell
 * commands with captured output, small file helpers, JSON number lookup. */
#ifndef NJ_E2E_SUPPORT_H
#define NJ_E2E_SUPPORT_H
#include <stddef.h>

/* Runs `cmd` through sh with stdout+stderr into `log`; returns the exit status
 * (128+signal when killed, -1 when it could not run). */
int e2e_run(const char *cmd, const char *log);
/* Whole file as a NUL-terminated string (malloc'd), NULL when unreadable;
 * *len (when len is non-NULL) gets its size in bytes. */
char *e2e_slurp(const char *path, size_t *len);
/* Writes text to path; returns 0 or -1. */
int e2e_write(const char *path, const char *text);
/* Number at a dotted key path ("baseline_constant.absrel") in a JSON file;
 * NAN when missing. */
double e2e_json_number(const char *path, const char *key);
/* Number of lines of `text` containing `needle`. */
int e2e_count(const char *text, const char *needle);
/* The program under test: $NJ_BIN when set (make sanitize points it at the
 * sanitizer build), else ./nightjar (tests run from the repository root). */
const char *e2e_bin(void);
/* 1 when e2e_bin() exists and is executable. */
int e2e_have_binary(void);

/* The validation AbsRel values of a run's log.jsonl text, in step order
 * (at most max; the count is returned). */
int e2e_val_absrels(const char *text, double *v, int max);
/* Runs second(dir) in a child process beside first(dir) in this one (two
 * one-thread trainings on the two cores), then prints the child's PASS/FAIL
 * lines after the parent's and checks that the child passed (check named
 * `second_name`).  The child's lines go through DIR/TAG-checks.txt. */
void e2e_side_by_side(const char *dir, void (*first)(const char *), void (*second)(const char *),
                      const char *tag, const char *second_name);

#endif

/* data/problems.h — the list of problems found in a dataset.
 * Every problem is one line naming the file and what is wrong
 * ("yard-03/cam0/000012.png: corrupt image (...)").  Warnings are listed the
 * same way but do not stop training. */
#ifndef NJ_PROBLEMS_H
#define NJ_PROBLEMS_H
#include <stdio.h>

typedef struct nj_problems {
    int n, nwarn;
    char **msg;        /* n problem lines */
    char **warn;       /* nwarn warning lines */
    int cap, wcap;
} nj_problems;

void nj_problems_init(nj_problems *p);
void nj_problems_free(nj_problems *p);
/* Appends one problem (printf-style; newlines are replaced by spaces). */
void nj_problem(nj_problems *p, const char *fmt, ...) __attribute__((format(printf, 2, 3)));
void nj_warning(nj_problems *p, const char *fmt, ...) __attribute__((format(printf, 2, 3)));
/* Prints "problem: ..." / "warning: ..." lines to f. */
void nj_problems_print(const nj_problems *p, FILE *f);

#endif

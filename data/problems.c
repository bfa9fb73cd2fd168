/* data/problems.c — collecting one-line problem and warning messages. */
#include "data/problems.h"
#include <stdarg.h>
#include <stdlib.h>
#include <string.h>

void nj_problems_init(nj_problems *p) { memset(p, 0, sizeof *p); }

void nj_problems_free(nj_problems *p)
{
    for (int i = 0; i < p->n; i++) free(p->msg[i]);
    for (int i = 0; i < p->nwarn; i++) free(p->warn[i]);
    free(p->msg);
    free(p->warn);
    memset(p, 0, sizeof *p);
}

static void push(char ***list, int *n, int *cap, const char *fmt, va_list ap)
{
    char buf[1024];
    vsnprintf(buf, sizeof buf, fmt, ap);
    for (char *c = buf; *c; c++)
        if (*c == '\n' || *c == '\r') *c = ' ';
    if (*n == *cap) {
        int nc = *cap ? 2 * *cap : 16;
        char **m = realloc(*list, (size_t)nc * sizeof(char *));
        if (!m) return;
        *list = m;
        *cap = nc;
    }
    char *s = strdup(buf);
    if (s) (*list)[(*n)++] = s;
}

void nj_problem(nj_problems *p, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    push(&p->msg, &p->n, &p->cap, fmt, ap);
    va_end(ap);
}

void nj_warning(nj_problems *p, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    push(&p->warn, &p->nwarn, &p->wcap, fmt, ap);
    va_end(ap);
}

void nj_problems_print(const nj_problems *p, FILE *f)
{
    for (int i = 0; i < p->nwarn; i++) fprintf(f, "warning: %s\n", p->warn[i]);
    for (int i = 0; i < p->n; i++) fprintf(f, "problem: %s\n", p->msg[i]);
}

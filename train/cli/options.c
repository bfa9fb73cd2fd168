/* train/cli/options.c — the option parser and its generated help (options.h). */
#include "train/cli/options.h"
#include <ctype.h>
#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdlib.h>
#include <string.h>

#define HELP_WIDTH 100      /* usage lines wrap here */
#define NAME_COLUMN 24      /* "--name META" wider than this puts the help on the next line */

/* ---- values ----------------------------------------------------------------- */

/* A whole number, strictly: optional sign and digits, nothing else. */
static int parse_integer(const char *s, long long *out)
{
    char *end;
    if (!*s || isspace((unsigned char)*s)) return -1;
    errno = 0;
    long long v = strtoll(s, &end, 10);
    if (*end || errno) return -1;
    *out = v;
    return 0;
}

/* A finite number in decimal or exponent notation; no nan, inf or blanks. */
static int parse_real(const char *s, double *out)
{
    char *end;
    if (!*s || isspace((unsigned char)*s)) return -1;
    double v = strtod(s, &end);
    if (*end || !isfinite(v)) return -1;
    *out = v;
    return 0;
}

/* `count` numbers separated by any of `seps` into out (integers only when
 * `integer`), each in [lo, hi]. */
static int parse_list(const char *s, const char *seps, int count, int integer, double lo, double hi, double *out)
{
    const char *p = s;
    for (int k = 0; k < count; k++) {
        size_t n = k + 1 < count ? strcspn(p, seps) : strlen(p);
        char part[64];
        if ((k + 1 < count && !p[n]) || n >= sizeof part) return -1;
        memcpy(part, p, n);
        part[n] = 0;
        long long iv;
        if (integer ? parse_integer(part, &iv) : parse_real(part, &out[k])) return -1;
        if (integer) out[k] = (double)iv;
        if (!(out[k] >= lo && out[k] <= hi)) return -1;
        p += n + 1;
    }
    return 0;
}

static int set_value(nj_opt *o, const char *v)
{
    long long iv;
    double x, list[2];
    switch (o->kind) {
    case NJ_OPT_STRING:
    case NJ_OPT_ARG:
        *o->str = v;
        return 0;
    case NJ_OPT_INT:
    case NJ_OPT_LONG:
        if (parse_integer(v, &iv) || !((double)iv >= o->lo && (double)iv <= o->hi)) return -1;
        if (o->kind == NJ_OPT_INT) *o->i = (int)iv;
        else *o->l = (long)iv;
        return 0;
    case NJ_OPT_U64: {
        char *end;
        if (!isdigit((unsigned char)*v)) return -1;
        errno = 0;
        unsigned long long u = strtoull(v, &end, 10);
        if (*end || errno) return -1;
        *o->u64 = (uint64_t)u;
        return 0;
    }
    case NJ_OPT_NUMBER:
    case NJ_OPT_FLOAT:
        if (parse_real(v, &x) || !(x >= o->lo && x <= o->hi)) return -1;
        if (o->kind == NJ_OPT_NUMBER) *o->d = x;
        else *o->f = (float)x;
        return 0;
    case NJ_OPT_CHOICE:
        for (int k = 0; o->choices[k]; k++)
            if (!strcmp(v, o->choices[k])) {
                *o->i = k;
                return 0;
            }
        return -1;
    case NJ_OPT_SIZE:
        if (parse_list(v, "xX", 2, 1, o->lo, o->hi, list)) return -1;
        o->size[0] = (int)list[0];
        o->size[1] = (int)list[1];
        return 0;
    case NJ_OPT_NUMBERS: {
        double tmp[16];
        if (o->count < 1 || o->count > 16 || parse_list(v, ",", o->count, 0, o->lo, o->hi, tmp)) return -1;
        memcpy(o->list, tmp, (size_t)o->count * sizeof *tmp);
        return 0;
    }
    case NJ_OPT_FLAG:
        break;
    }
    return -1;
}

/* ---- wording ---------------------------------------------------------------- */

/* "from 0 to 1024", "of at least 0", "" (unbounded). */
static void range_text(const nj_opt *o, char *buf, size_t len)
{
    if (isfinite(o->lo) && isfinite(o->hi)) snprintf(buf, len, "from %.15g to %.15g", o->lo, o->hi);
    else if (isfinite(o->lo)) snprintf(buf, len, "of at least %.15g", o->lo);
    else if (isfinite(o->hi)) snprintf(buf, len, "of at most %.15g", o->hi);
    else buf[0] = 0;
}

static void choices_text(const nj_opt *o, const char *sep, const char *last, char *buf, size_t len)
{
    size_t at = 0;
    buf[0] = 0;
    for (int k = 0; o->choices[k] && at < len; k++)
        at += (size_t)snprintf(buf + at, len - at, "%s%s", k == 0 ? "" : o->choices[k + 1] ? sep : last,
                               o->choices[k]);
}

/* What the option's value must be: "an integer from 0 to 1024", "one of c, onnx or safetensors". */
static void what_text(const nj_opt *o, char *buf, size_t len)
{
    char r[96];
    range_text(o, r, sizeof r);
    const char *sp = r[0] ? " " : "";
    switch (o->kind) {
    case NJ_OPT_INT:
    case NJ_OPT_LONG: snprintf(buf, len, "an integer%s%s", sp, r); break;
    case NJ_OPT_U64: snprintf(buf, len, "an integer from 0 to %llu", (unsigned long long)UINT64_MAX); break;
    case NJ_OPT_NUMBER:
    case NJ_OPT_FLOAT: snprintf(buf, len, "a number%s%s", sp, r); break;
    case NJ_OPT_CHOICE: {
        char c[256];
        choices_text(o, ", ", " or ", c, sizeof c);
        snprintf(buf, len, "one of %s", c);
        break;
    }
    case NJ_OPT_SIZE: snprintf(buf, len, "%s with integers%s%s", o->meta ? o->meta : "WxH", sp, r); break;
    case NJ_OPT_NUMBERS: snprintf(buf, len, "%s: %d numbers%s%s", o->meta, o->count, sp, r); break;
    default: snprintf(buf, len, "%s", o->meta ? o->meta : "a value"); break;
    }
}

static int message(const nj_opt_spec *s, char *msg, size_t len, const char *fmt, ...)
    __attribute__((format(printf, 4, 5)));
static int message(const nj_opt_spec *s, char *msg, size_t len, const char *fmt, ...)
{
    int n = snprintf(msg, len, "nightjar %s: ", s->command);
    va_list ap;
    va_start(ap, fmt);
    if (n >= 0 && (size_t)n < len) vsnprintf(msg + n, len - (size_t)n, fmt, ap);
    va_end(ap);
    return NJ_OPT_BAD;
}

static int needs(const nj_opt_spec *s, const nj_opt *o, const char *v, const char *condition, char *msg,
                 size_t len)
{
    char w[512];
    what_text(o, w, 320);
    if (condition) snprintf(w + strlen(w), sizeof w - strlen(w), " %s", condition);
    if (!v) return message(s, msg, len, "%s needs %s, none given", o->name, w);
    return message(s, msg, len, "%s needs %s, not '%.200s'", o->name, w, v);
}

/* ---- parsing ------------------------------------------------------------------ */

static nj_opt *find_option(nj_opt_spec *s, const char *name)
{
    for (int k = 0; k < s->nopts; k++)
        if (s->opts[k].kind != NJ_OPT_ARG && s->opts[k].name && !strcmp(s->opts[k].name, name)) return &s->opts[k];
    return NULL;
}

static nj_opt *next_positional(nj_opt_spec *s)
{
    for (int k = 0; k < s->nopts; k++)
        if (s->opts[k].kind == NJ_OPT_ARG && !s->opts[k].given) return &s->opts[k];
    return NULL;
}

int nj_opt_parse(nj_opt_spec *s, int argc, char **argv, char *msg, size_t msglen)
{
    msg[0] = 0;
    for (int i = 1; i < argc; i++)
        if (!strcmp(argv[i], "--help") || !strcmp(argv[i], "-h")) return NJ_OPT_HELP;
    for (int k = 0; k < s->nopts; k++) {
        s->opts[k].given = 0;
        s->opts[k].value = NULL;
    }
    for (int i = 1; i < argc; i++) {
        const char *a = argv[i];
        int positional = a[0] != '-';
        nj_opt *o = positional ? next_positional(s) : find_option(s, a);
        if (!o)
            return message(s, msg, msglen, "%s '%.200s' (see 'nightjar %s --help')",
                           positional ? "unexpected argument" : "unknown option", a, s->command);
        if (o->given) return message(s, msg, msglen, "%s given twice", o->name);
        o->given = 1;
        if (o->kind == NJ_OPT_FLAG) {
            *o->flag = 1;
            continue;
        }
        const char *v = positional ? a : i + 1 < argc ? argv[++i] : NULL;
        o->value = v;
        if (!v || set_value(o, v)) return needs(s, o, v, NULL, msg, msglen);
    }
    for (int k = 0; k < s->nopts; k++) {
        const nj_opt *o = &s->opts[k];
        if (!o->required || o->given) continue;
        if (o->kind == NJ_OPT_ARG) return message(s, msg, msglen, "%s is required", o->meta);
        return message(s, msg, msglen, "%s %s is required", o->name, o->meta ? o->meta : "");
    }
    return NJ_OPT_OK;
}

int nj_opt_main(nj_opt_spec *s, int argc, char **argv)
{
    char msg[1024];
    int rc = nj_opt_parse(s, argc, argv, msg, sizeof msg);
    if (rc == NJ_OPT_HELP) nj_opt_usage(s, stdout);
    else if (rc == NJ_OPT_BAD) fprintf(stderr, "%s\n", msg);
    return rc;
}

int nj_opt_status(int rc)
{
    return rc == NJ_OPT_HELP ? 0 : 2;
}

const nj_opt *nj_opt_find(const nj_opt_spec *s, const char *name)
{
    for (int k = 0; k < s->nopts; k++) {
        const nj_opt *o = &s->opts[k];
        const char *n = o->kind == NJ_OPT_ARG ? o->meta : o->name;
        if (n && !strcmp(n, name)) return o;
    }
    return NULL;
}

int nj_opt_fail(const nj_opt_spec *s, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    fprintf(stderr, "nightjar %s: ", s->command);
    vfprintf(stderr, fmt, ap);
    fputc('\n', stderr);
    va_end(ap);
    return NJ_OPT_BAD;
}

int nj_opt_bad_value(const nj_opt_spec *s, const char *name, const char *condition)
{
    char msg[1024];
    const nj_opt *o = nj_opt_find(s, name);
    if (o) needs(s, o, o->value, condition, msg, sizeof msg);
    else message(s, msg, sizeof msg, "%s: bad value", name);
    fprintf(stderr, "%s\n", msg);
    return NJ_OPT_BAD;
}

/* ---- help ---------------------------------------------------------------------- */

/* "--name META", "[--name META]" (optional) or the positional's META. */
static void synopsis(const nj_opt *o, int brackets, char *buf, size_t len)
{
    char meta[256] = "";
    if (o->kind == NJ_OPT_CHOICE && !o->meta) choices_text(o, "|", "|", meta, sizeof meta);
    else if (o->meta && o->kind != NJ_OPT_FLAG) snprintf(meta, sizeof meta, "%s", o->meta);
    const char *open = brackets && !o->required ? "[" : "", *close = brackets && !o->required ? "]" : "";
    if (o->kind == NJ_OPT_ARG) snprintf(buf, len, "%s%s%s", open, meta, close);
    else snprintf(buf, len, "%s%s%s%s%s", open, o->name, meta[0] ? " " : "", meta, close);
}

/* The default as the help states it, "" when there is none to state. */
static void default_text(const nj_opt *o, char *buf, size_t len)
{
    buf[0] = 0;
    if (o->dflt) snprintf(buf, len, "%s", o->dflt);
    else if (o->required) return;
    else if (o->kind == NJ_OPT_STRING && *o->str) snprintf(buf, len, "%s", *o->str);
    else if (o->kind == NJ_OPT_INT) snprintf(buf, len, "%d", *o->i);
    else if (o->kind == NJ_OPT_LONG) snprintf(buf, len, "%ld", *o->l);
    else if (o->kind == NJ_OPT_U64) snprintf(buf, len, "%llu", (unsigned long long)*o->u64);
    else if (o->kind == NJ_OPT_NUMBER) snprintf(buf, len, "%.15g", *o->d);
    else if (o->kind == NJ_OPT_FLOAT) snprintf(buf, len, "%g", (double)*o->f);
    else if (o->kind == NJ_OPT_CHOICE) snprintf(buf, len, "%s", o->choices[*o->i]);
    else if (o->kind == NJ_OPT_SIZE) snprintf(buf, len, "%dx%d", o->size[0], o->size[1]);
}

/* "(required)", "(from 0 to 1024; default 0)", "" — what the parser enforces. */
static void note_text(const nj_opt *o, char *buf, size_t len)
{
    char part[3][128], r[96] = "", d[112];
    int n = 0;
    if (o->required) snprintf(part[n++], sizeof part[0], "required");
    if (o->kind == NJ_OPT_INT || o->kind == NJ_OPT_LONG || o->kind == NJ_OPT_NUMBER || o->kind == NJ_OPT_FLOAT ||
        o->kind == NJ_OPT_SIZE || o->kind == NJ_OPT_NUMBERS)
        range_text(o, r, sizeof r);
    if (r[0]) snprintf(part[n++], sizeof part[0], "%s", r);
    default_text(o, d, sizeof d);
    if (d[0]) snprintf(part[n++], sizeof part[0], "default %s", d);
    buf[0] = 0;
    if (n) snprintf(buf, len, "(%s%s%s%s%s)", part[0], n > 1 ? "; " : "", n > 1 ? part[1] : "", n > 2 ? "; " : "",
                    n > 2 ? part[2] : "");
}

static void usage_line(const nj_opt_spec *s, FILE *f)
{
    char head[64], item[320];
    int indent = snprintf(head, sizeof head, "usage: nightjar %s", s->command), col = indent;
    fputs(head, f);
    for (int k = 0; k < s->nopts; k++) {
        synopsis(&s->opts[k], 1, item, sizeof item);
        int n = (int)strlen(item);
        if (col > indent && col + 1 + n > HELP_WIDTH) {
            fprintf(f, "\n%*s", indent, "");
            col = indent;
        }
        fprintf(f, " %s", item);
        col += 1 + n;
    }
    fputc('\n', f);
}

/* One option: "  --name META  help" with continuation lines under the help,
 * then what the parser enforces (note_text). */
static void option_lines(const nj_opt *o, int column, FILE *f)
{
    char name[320], note[400];
    synopsis(o, 0, name, sizeof name);
    note_text(o, note, sizeof note);
    int indent = column + 4, col = 0;
    const char *h = o->help ? o->help : "";
    if ((int)strlen(name) > column) fprintf(f, "  %s\n", name);
    else col = fprintf(f, "  %-*s  ", column, name);
    for (;;) {
        size_t len = strcspn(h, "\n");
        if (col == 0) col = fprintf(f, "%*s", indent, "");
        col += fprintf(f, "%.*s", (int)len, h);
        h += len;
        if (!*h) break;
        h++;
        fputc('\n', f);
        col = 0;
    }
    if (note[0]) {
        if (col + 1 + (int)strlen(note) > HELP_WIDTH) fprintf(f, "\n%*s", indent, "");
        else if (col > indent) fputc(' ', f);
        fputs(note, f);
    }
    fputc('\n', f);
}

void nj_opt_usage(const nj_opt_spec *s, FILE *f)
{
    usage_line(s, f);
    if (s->about) fputs(s->about, f);
    int column = 0;
    for (int k = 0; k < s->nopts; k++) {
        char name[320];
        synopsis(&s->opts[k], 0, name, sizeof name);
        int n = (int)strlen(name);
        if (n <= NAME_COLUMN && n > column) column = n;
    }
    fputs("options:\n", f);
    for (int k = 0; k < s->nopts; k++) option_lines(&s->opts[k], column, f);
    fprintf(f, "  %-*s  this text\n", column, "--help, -h");
    if (s->epilogue) fputs(s->epilogue, f);
    fprintf(f, "  Exit status: %s.\n", s->exit_status ? s->exit_status : NJ_OPT_EXIT_STATUS);
}

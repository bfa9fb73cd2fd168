/* train/cli/options.h — the one option parser of the ./nightjar subcommands.
 *
 * A command declares its options in a table (nj_opt): long name, value kind,
 * valid range, placeholder, help line, destination, whether required.  The
 * same table drives the parsing and the --help text, so the two cannot
 * drift apart.  Parsing never exits: it returns NJ_OPT_OK, NJ_OPT_HELP or
 * NJ_OPT_BAD and the entry decides (nj_opt_status: 0 after help, 2 after a
 * usage error).
 *
 * Rules, the same for every command:
 *   --help or -h anywhere: help (before anything else is parsed, so the
 *     help shows the destinations' defaults);
 *   a value-taking option consumes the next argument, even one starting
 *     with '-' (so --max-depth -3 is a value out of range, not an option);
 *   each option at most once; arguments not starting with '-' fill the
 *     positional entries (NJ_OPT_ARG) in table order.
 * Every usage error is one line, "nightjar CMD: ...":
 *   unknown option '--x' (see 'nightjar CMD --help')
 *   unexpected argument 'x' (see 'nightjar CMD --help')
 *   --opt needs WHAT, not 'VALUE'      (malformed or out of range)
 *   --opt needs WHAT, none given       (the value is missing)
 *   --opt given twice
 *   --opt META is required             (META alone for a positional)
 * where WHAT says the kind and range, e.g. "an integer from 0 to 1024". */
#ifndef NJ_OPTIONS_H
#define NJ_OPTIONS_H
#include <stdint.h>
#include <stdio.h>

typedef enum nj_opt_kind {
    NJ_OPT_FLAG,       /* no value: *flag = 1 */
    NJ_OPT_STRING,     /* any text: *str */
    NJ_OPT_ARG,        /* positional (no --name; meta names it): *str */
    NJ_OPT_INT,        /* whole number in [lo, hi]: *i */
    NJ_OPT_LONG,       /* whole number in [lo, hi]: *l */
    NJ_OPT_U64,        /* whole number from 0 to 2^64-1 (seeds): *u64 */
    NJ_OPT_NUMBER,     /* finite number in [lo, hi]: *d */
    NJ_OPT_FLOAT,      /* the same, stored as a float: *f */
    NJ_OPT_CHOICE,     /* one of choices[]: *i gets its index */
    NJ_OPT_SIZE,       /* WxH (or WXH), integers in [lo, hi]: size[0] = W, size[1] = H */
    NJ_OPT_NUMBERS,    /* `count` finite numbers in [lo, hi] separated by commas: list[0..count-1] */
} nj_opt_kind;

typedef struct nj_opt {
    const char *name;            /* "--threads"; NULL for NJ_OPT_ARG */
    nj_opt_kind kind;
    const char *meta;            /* placeholder: "N", "CKPT", "fx,fy,cx,cy"; a choice's default is "a|b|c" */
    const char *help;            /* help text; '\n' continues it on the next line */
    double lo, hi;               /* valid range (numeric kinds; ±INFINITY = open) */
    const char *const *choices;  /* NJ_OPT_CHOICE: the words, NULL-terminated */
    int count;                   /* NJ_OPT_NUMBERS: how many numbers */
    const char *dflt;            /* default as the help states it, instead of the destination's
                                    value ("" = state none) */
    int required;
    union {                      /* the destination, typed by kind */
        int *flag;
        const char **str;
        int *i;
        long *l;
        uint64_t *u64;
        double *d;
        float *f;
        int *size;
        double *list;
    };
    int given;                   /* set by the parser: 1 when the option was on the command line */
    const char *value;           /* set by the parser: the value's text as given */
} nj_opt;

typedef struct nj_opt_spec {
    const char *command;         /* "eval": messages start "nightjar eval: " */
    const char *about;           /* printed after the usage line, as written */
    const char *epilogue;        /* printed after the options (outputs), as written */
    nj_opt *opts;
    int nopts;
    const char *exit_status;     /* the help's last line "Exit status: ..."; NULL: NJ_OPT_EXIT_STATUS */
} nj_opt_spec;

#define NJ_OPT_EXIT_STATUS "0 done, 1 failure, 2 bad usage"

enum { NJ_OPT_OK = 0, NJ_OPT_HELP = 1, NJ_OPT_BAD = 2 };

#define NJ_OPT_COUNT(table) (int)(sizeof(table) / sizeof((table)[0]))

/* The --threads option of the commands that compute (0 = all cores);
 * dflt as in nj_opt (NULL: the destination's value). */
#define NJ_OPT_THREADS(dest, max, default_text) \
    {.name = "--threads", .kind = NJ_OPT_INT, .meta = "N", .lo = 0, .hi = (max), .help = "threads; 0 = all cores", \
     .dflt = (default_text), .i = (dest)}

/* Parses argv[1..argc-1] into the destinations.  NJ_OPT_BAD leaves the
 * one-line message (no newline) in msg; NJ_OPT_HELP prints nothing. */
int nj_opt_parse(nj_opt_spec *s, int argc, char **argv, char *msg, size_t msglen);
/* The help text generated from the table. */
void nj_opt_usage(const nj_opt_spec *s, FILE *f);
/* nj_opt_parse, then the help on stdout or the message on stderr. */
int nj_opt_main(nj_opt_spec *s, int argc, char **argv);
/* Exit status of a parse result other than NJ_OPT_OK: 0 after help, 2 after an error. */
int nj_opt_status(int rc);

/* The entry of the table named `name` ("--threads", or the meta of a
 * positional), NULL when none. */
const nj_opt *nj_opt_find(const nj_opt_spec *s, const char *name);
/* A usage error found after parsing (options that conflict): prints
 * "nightjar CMD: <message>" on stderr and returns NJ_OPT_BAD. */
int nj_opt_fail(const nj_opt_spec *s, const char *fmt, ...) __attribute__((format(printf, 2, 3)));
/* The standard "--opt needs WHAT CONDITION, not 'VALUE'" line (on stderr)
 * for a value of option `name` the entry refuses after parsing, e.g. a
 * camera with condition "with fx, fy > 0"; returns NJ_OPT_BAD. */
int nj_opt_bad_value(const nj_opt_spec *s, const char *name, const char *condition);

#endif

/* tests/test_options.c — the one option parser of the subcommands
 * (train/cli/options.h, issue #19).
 *
 * On a table with every value kind: valid input lands in the destination
 * exactly (range bounds included); every usage error (unknown option,
 * unexpected argument, missing value, out of range, malformed numbers such as
 * "3x", "nan", "inf" or "", option given twice, required option missing) is
 * status 2 and one line of the documented wording; --help is status 0 and
 * its text, generated from the table, lists every option.  Through
 * ./nightjar (tests/run_support.h; run from the repository root): every
 * subcommand of train/cli/commands.h rejects an unknown option with the same
 * line and status 2, prints its help with status 0, and every option its
 * help lists is known to its parser. */
#include "tests/check.h"
#include "tests/e2e_support.h"
#include "tests/run_support.h"
#include "train/cli/commands.h"
#include "train/cli/options.h"
#include <math.h>
#include <stdarg.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

/* ---- the table under test ------------------------------------------------------ */

static const char *const COLOURS[] = {"red", "green", "blue", NULL};

typedef struct dests {
    int flag, count, colour, size[2];
    long big;
    uint64_t seed;
    double ratio, cam[4];
    float gain;
    const char *name, *file;
} dests;

static dests D;
static nj_opt OPTS[11];
static nj_opt_spec SPEC = {.command = "test", .about = "  ABOUT-TEXT line\n", .epilogue = "  EPILOGUE-TEXT line\n",
                           .opts = OPTS, .nopts = 11, .exit_status = "EXIT-STATUS"};

/* Fresh defaults and table (the parser writes `given` into it). */
static void reset(void)
{
    D = (dests){.count = 3, .colour = 2, .size = {320, 96}, .big = 5, .seed = 1, .ratio = 0.5, .gain = 1.0f};
    nj_opt t[11] = {
        {.kind = NJ_OPT_ARG, .meta = "FILE", .help = "input file", .required = 1, .str = &D.file},
        {.name = "--name", .kind = NJ_OPT_STRING, .meta = "NAME", .help = "a name", .required = 1, .str = &D.name},
        {.name = "--flag", .kind = NJ_OPT_FLAG, .help = "a switch", .flag = &D.flag},
        {.name = "--count", .kind = NJ_OPT_INT, .meta = "N", .lo = -10, .hi = 10, .help = "an int", .i = &D.count},
        {.name = "--big", .kind = NJ_OPT_LONG, .meta = "N", .lo = 0, .hi = 1e12, .help = "a long", .l = &D.big},
        {.name = "--seed", .kind = NJ_OPT_U64, .meta = "N", .help = "a seed", .u64 = &D.seed},
        {.name = "--ratio", .kind = NJ_OPT_NUMBER, .meta = "X", .lo = 0.25, .hi = 4, .help = "a number",
         .d = &D.ratio},
        {.name = "--gain", .kind = NJ_OPT_FLOAT, .meta = "G", .lo = 0, .hi = 1, .help = "a float", .f = &D.gain},
        {.name = "--colour", .kind = NJ_OPT_CHOICE, .choices = COLOURS, .help = "a choice", .i = &D.colour},
        {.name = "--size", .kind = NJ_OPT_SIZE, .meta = "WxH", .lo = 8, .hi = 8192, .help = "a size",
         .size = D.size},
        {.name = "--camera", .kind = NJ_OPT_NUMBERS, .meta = "fx,fy,cx,cy", .count = 4, .lo = -INFINITY, .hi = INFINITY,
         .help = "four numbers\non two lines", .dflt = "centred", .list = D.cam},
    };
    memcpy(OPTS, t, sizeof t);
}

/* Parses "ARGS..." (argv[0] "test" added); the message into msg. */
static int parse(char *msg, size_t len, int n, ...)
{
    char *argv[32] = {"test"};
    va_list ap;
    va_start(ap, n);
    for (int i = 0; i < n && i < 30; i++) argv[i + 1] = va_arg(ap, char *);
    va_end(ap);
    reset();
    return nj_opt_parse(&SPEC, n + 1, argv, msg, len);
}

#define PARSE(msg, ...) parse(msg, sizeof msg, (int)(sizeof((char *[]){__VA_ARGS__}) / sizeof(char *)), __VA_ARGS__)

/* ---- valid input ------------------------------------------------------------------ */

static void test_valid(void)
{
    char m[512];
    int rc = PARSE(m, "in.txt", "--name", "", "--flag", "--count", "-10", "--big", "1000000000000", "--seed",
                   "18446744073709551615", "--ratio", "2.5e-1", "--gain", "0.1", "--colour", "green", "--size",
                   "640X480", "--camera", "1,-2.5,3e2,0");
    check(rc == NJ_OPT_OK && !strcmp(D.file, "in.txt") && !strcmp(D.name, "") && D.flag == 1 && D.count == -10 &&
              D.big == 1000000000000L && D.seed == UINT64_MAX && D.ratio == 0.25 && D.gain == 0.1f &&
              D.colour == 1 && D.size[0] == 640 && D.size[1] == 480 && D.cam[0] == 1 && D.cam[1] == -2.5 &&
              D.cam[2] == 300 && D.cam[3] == 0,
          "every kind parses its value exactly (lower bounds, empty string, WXH)", "rc %d: %s", rc, m);
    rc = PARSE(m, "--count", "10", "--ratio", "4", "--gain", "1", "--size", "8192x8", "--big", "0", "--name", "n",
               "f", "--seed", "0");
    check(rc == NJ_OPT_OK && D.count == 10 && D.ratio == 4 && D.gain == 1.0f && D.size[0] == 8192 && D.size[1] == 8 &&
              D.big == 0 && D.seed == 0 && !strcmp(D.file, "f"),
          "upper bounds are accepted, options before the positional", "rc %d: %s", rc, m);
    rc = PARSE(m, "--name", "-x", "--count", "-3", "f");
    check(rc == NJ_OPT_OK && !strcmp(D.name, "-x") && D.count == -3,
          "a value starting with '-' belongs to its option", "rc %d: %s name %s count %d", rc, m, D.name, D.count);
    rc = PARSE(m, "--name", "n", "f");
    check(rc == NJ_OPT_OK && D.count == 3 && D.colour == 2 && D.size[0] == 320 && D.gain == 1.0f && D.flag == 0 &&
              OPTS[1].given && !OPTS[3].given && !strcmp(OPTS[0].value, "f"),
          "options not given keep their defaults; given and value are recorded", "rc %d: %s", rc, m);
}

/* ---- errors ------------------------------------------------------------------------- */

static void expect_error(const char *what, int rc, const char *msg, const char *want)
{
    char name[256];
    snprintf(name, sizeof name, "error: %s", what);
    check(rc == NJ_OPT_BAD && nj_opt_status(rc) == 2 && !strcmp(msg, want) && !strchr(msg, '\n'), name,
          "rc %d status %d, message \"%s\", want \"%s\"", rc, nj_opt_status(rc), msg, want);
}

/* Each of values[n] given to opt is refused: "nightjar test: OPT needs WHAT, not 'VALUE'". */
static void expect_refused(const char *opt, const char *what, char *const *values, size_t n)
{
    for (size_t k = 0; k < n; k++) {
        char m[512], want[300], name[128];
        snprintf(want, sizeof want, "nightjar test: %s needs %s, not '%s'", opt, what, values[k]);
        snprintf(name, sizeof name, "%s '%s' refused", opt, values[k]);
        expect_error(name, PARSE(m, "f", (char *)opt, values[k]), m, want);
    }
}

#define REFUSED(opt, what, ...) \
    expect_refused(opt, what, (char *const[]){__VA_ARGS__}, sizeof((char *[]){__VA_ARGS__}) / sizeof(char *))

static void test_errors(void)
{
    char m[512];
    expect_error("unknown option", PARSE(m, "f", "--name", "n", "--nope"), m,
                 "nightjar test: unknown option '--nope' (see 'nightjar test --help')");
    expect_error("lone dash", PARSE(m, "f", "-"), m, "nightjar test: unknown option '-' (see 'nightjar test --help')");
    expect_error("unexpected argument", PARSE(m, "f", "g", "--name", "n"), m,
                 "nightjar test: unexpected argument 'g' (see 'nightjar test --help')");
    expect_error("missing value", PARSE(m, "f", "--name", "n", "--count"), m,
                 "nightjar test: --count needs an integer from -10 to 10, none given");
    expect_error("missing string value", PARSE(m, "f", "--name"), m, "nightjar test: --name needs NAME, none given");
    /* out of range (bounds are inclusive: the values just outside) and malformed */
    REFUSED("--count", "an integer from -10 to 10", "11", "-11", "3x", "", " 3", "3.0", "1e1", "0x5",
            "99999999999999999999");
    REFUSED("--big", "an integer from 0 to 1000000000000", "1000000000001", "-1");
    REFUSED("--seed", "an integer from 0 to 18446744073709551615", "-1", "18446744073709551616", "+1");
    REFUSED("--ratio", "a number from 0.25 to 4", "0.2499", "4.0001", "nan", "inf", "-inf", "1e999", "", "3x",
            " 1");
    REFUSED("--gain", "a number from 0 to 1", "1.5", "-0.001");
    REFUSED("--colour", "one of red, green or blue", "Red", "", "re");
    REFUSED("--size", "WxH with integers from 8 to 8192", "7x100", "100x8193", "12x", "x12", "12x12x", "12*12",
            "1.5x20", "");
    int rc = PARSE(m, "f", "--size", "100x7");
    check(rc == NJ_OPT_BAD && D.size[0] == 320 && D.size[1] == 96, "a refused size leaves the destination alone",
          "%dx%d", D.size[0], D.size[1]);
    /* unbounded: nan and inf are still refused */
    REFUSED("--camera", "fx,fy,cx,cy: 4 numbers", "1,2,3,nan", "1,2,inf,4", "-inf,2,3,4", "1,2,3,1e999", "1,2,3",
            "1,2,3,4,5", "1,,3,4", "1;2;3;4");
    expect_error("given twice", PARSE(m, "f", "--name", "a", "--count", "1", "--count", "1"), m,
                 "nightjar test: --count given twice");
    expect_error("flag given twice", PARSE(m, "f", "--name", "a", "--flag", "--flag"), m,
                 "nightjar test: --flag given twice");
    expect_error("required option missing", PARSE(m, "f", "--count", "1"), m, "nightjar test: --name NAME is required");
    expect_error("required positional missing", PARSE(m, "--name", "a"), m, "nightjar test: FILE is required");
}

/* ---- help ------------------------------------------------------------------------------- */

static void test_help(void)
{
    char m[512];
    int rc = PARSE(m, "--help");
    check(rc == NJ_OPT_HELP && nj_opt_status(rc) == 0, "--help: status 0", "rc %d", rc);
    rc = PARSE(m, "f", "--nope", "--count", "99", "-h");
    check(rc == NJ_OPT_HELP && nj_opt_status(rc) == 0, "-h wins over errors anywhere on the line", "rc %d: %s", rc, m);
    char *text = NULL;
    size_t len = 0;
    FILE *f = open_memstream(&text, &len);
    reset();
    nj_opt_usage(&SPEC, f);
    fclose(f);
    int missing = 0;
    char first[128] = "";
    for (int k = 0; k < SPEC.nopts; k++) {
        const nj_opt *o = &OPTS[k];
        char line[128];   /* each option starts a line: "  --name META" or "  META" */
        if (o->kind == NJ_OPT_ARG) snprintf(line, sizeof line, "\n  %s ", o->meta);
        else if (o->kind == NJ_OPT_FLAG) snprintf(line, sizeof line, "\n  %s ", o->name);
        else if (o->kind == NJ_OPT_CHOICE) snprintf(line, sizeof line, "\n  %s red|green|blue ", o->name);
        else snprintf(line, sizeof line, "\n  %s %s ", o->name, o->meta);
        char help[128];   /* and its help's first line */
        snprintf(help, sizeof help, "%.*s", (int)strcspn(o->help, "\n"), o->help);
        if ((!strstr(text, line) || !strstr(text, help)) && !missing++) snprintf(first, sizeof first, "%s", line + 3);
    }
    check(missing == 0, "help lists every option of the table with its placeholder and help",
          "%d missing, first '%s':\n%s", missing, first, text);
    const char *usage = "usage: nightjar test FILE --name NAME [--flag] [--count N] [--big N] [--seed N]";
    check(!strncmp(text, usage, strlen(usage)) && strstr(text, "[--colour red|green|blue]") &&
              strstr(text, "ABOUT-TEXT") && strstr(text, "EPILOGUE-TEXT") &&
              strstr(text, "\n  Exit status: EXIT-STATUS.\n") && strstr(text, "\n  --help, -h "),
          "help: usage line from the table, about and epilogue text, exit status, --help itself", "%s", text);
    check(strstr(text, "(required)") && strstr(text, "(from -10 to 10; default 3)") && strstr(text, "default blue") &&
              strstr(text, "default 320x96") && strstr(text, "on two lines (default centred)") &&
              strstr(text, "\n  NAME") == NULL,
          "help: ranges and defaults as the parser enforces them", "%s", text);
    free(text);
}

/* ---- through ./nightjar ------------------------------------------------------------------ */

static char dir[64];

/* Runs ./nightjar CMD ARGS... (NULL-terminated); stdout+stderr into *out. */
static int run_nightjar(char **out, const char *cmd, ...)
{
    char *argv[16] = {"nightjar", (char *)cmd}, log[128];
    int n = 2;
    va_list ap;
    va_start(ap, cmd);
    for (char *a; n < 15 && (a = va_arg(ap, char *));) argv[n++] = a;
    va_end(ap);
    argv[n] = NULL;
    snprintf(log, sizeof log, "%s/log.txt", dir);
    unlink(log);
    int rc = rs_run(argv, log, NULL);
    *out = e2e_slurp(log, NULL);
    if (!*out) *out = strdup("");
    return rc;
}

static int count_lines(const char *s)
{
    int n = 0;
    for (; *s; s++) n += *s == '\n';
    return n;
}

/* Every option its help lists is known to its parser: "CMD --opt
 * --no-such-option --no-such-option" must not be refused as an unknown --opt
 * (a flag then meets the unknown option, a value-taking option takes the
 * first as its value and meets the second: either way nothing runs). */
static int help_options_known(const nj_command *c, const char *help, char *bad, size_t len)
{
    const char *p = strstr(help, "\noptions:\n"), *end = strstr(help, "\n  --help, -h ");
    int n = 0;
    for (p = p ? strstr(p + 1, "\n  --") : NULL; p && p < end; p = strstr(p + 1, "\n  --")) {
        char opt[64], *out, refused[128];
        size_t k = strcspn(p + 3, " ,\n");
        snprintf(opt, sizeof opt, "%.*s", (int)(k < 60 ? k : 60), p + 3);
        int rc = run_nightjar(&out, c->name, opt, "--no-such-option", "--no-such-option", (char *)NULL);
        snprintf(refused, sizeof refused, "unknown option '%s'", opt);
        int ok = rc == 2 && !strstr(out, refused);
        if (!ok) snprintf(bad, len, "%s (status %d: %s)", opt, rc, out);
        free(out);
        if (!ok) return -1;
        n++;
    }
    return n;
}

static void test_commands(void)
{
    for (int k = 0; k < nj_ncommands; k++) {
        const nj_command *c = &nj_commands[k];
        char name[160], want[256], *out, bad[1024] = "";
        int rc = run_nightjar(&out, c->name, "--no-such-option", (char *)NULL);
        snprintf(want, sizeof want, "nightjar %s: unknown option '--no-such-option' (see 'nightjar %s --help')\n",
                 c->name, c->name);
        snprintf(name, sizeof name, "nightjar %s --no-such-option: status 2, the one unknown-option line", c->name);
        check(rc == 2 && !strcmp(out, want), name, "status %d, output: %s", rc, out);
        free(out);
        rc = run_nightjar(&out, c->name, "--help", (char *)NULL);
        snprintf(want, sizeof want, "usage: nightjar %s ", c->name);
        snprintf(name, sizeof name, "nightjar %s --help: status 0, generated help", c->name);
        check(rc == 0 && !strncmp(out, want, strlen(want)) && strstr(out, "\noptions:\n") &&
                  strstr(out, "\n  --help, -h ") && count_lines(out) > 4,
              name, "status %d, output: %s", rc, out);
        int n = help_options_known(c, out, bad, sizeof bad);
        snprintf(name, sizeof name, "nightjar %s: every option of its help is known to its parser", c->name);
        checkv(n > 0, name, "%d options%s%s", n, bad[0] ? "; refused: " : "", bad);
        free(out);
    }
}

int main(void)
{
    test_valid();
    test_errors();
    test_help();
    snprintf(dir, sizeof dir, "/tmp/nj_options_XXXXXX");
    if (!check(mkdtemp(dir) != NULL, "temp folder", "%s", dir)) return test_exit();
    if (check(e2e_have_binary(), "the binary under test is built", "%s: run from the repository root after make",
              e2e_bin()))
        test_commands();
    char log[128];
    snprintf(log, sizeof log, "%s/log.txt", dir);
    unlink(log);
    rmdir(dir);
    return test_exit();
}

/* tests/test_cli_commands.c — the command line itself, as a user meets it:
 *  - `nightjar` alone: exit 2, the usage on stderr, nothing on stdout;
 *  - `nightjar help`, `--help`, `-h`: exit 0, the same usage on stdout,
 *    nothing on stderr; it lists exactly the commands this test expects
 *    (written out here: help, version, check-data, synth, train, eval,
 *    predict, export, report, bench) and each one's `--help` exits 0 with
 *    its "usage: nightjar NAME" line;
 *  - `nightjar version`, `--version`: exit 0, "nightjar X.Y.Z" (the
 *    version in train/version.h) and the library lines;
 *  - an unknown command: exit 2, one line on stderr naming it, nothing on
 *    stdout;
 *  - `nightjar report` on a real tiny run (tests/train_runs.h): the page is
 *    written to RUN/report.html or --out FILE and its path printed; the
 *    metrics come from RUN/metrics.json or --metrics FILE and the exported
 *    files from RUN/export or --export DIR (values written here, found on
 *    the page); a folder with nothing in it yet still gets a page saying so;
 *    exit 2 for bad usage (no folder, unknown option, option without value,
 *    extra argument) and 1 for a missing run folder or an unwritable --out,
 *    each with one line on stderr and nothing on stdout. */
#include "tests/check.h"
#include "tests/e2e_support.h"
#include "tests/torch_ref.h"
#include "tests/train_runs.h"
#include "train/version.h"
#include <ctype.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

static char dir[256], data[512];

typedef struct out_t {
    int rc;
    char *out, *err;
} out_t;

/* Runs `BIN ARGS` with stdout and stderr into separate files. */
static out_t run(const char *args)
{
    char cmd[4096], o[600], e[600];
    static int k;
    snprintf(o, sizeof o, "%s/cmd%d.out", dir, k);
    snprintf(e, sizeof e, "%s/cmd%d.err", dir, k++);
    snprintf(cmd, sizeof cmd, "%s %s > %s 2> %s", e2e_bin(), args, o, e);
    out_t r;
    fflush(stdout);
    int st = system(cmd);
    r.rc = st == -1 ? -1 : WIFEXITED(st) ? WEXITSTATUS(st) : 128 + WTERMSIG(st);
    r.out = e2e_slurp(o, NULL);
    r.err = e2e_slurp(e, NULL);
    if (!r.out) r.out = calloc(1, 1);
    if (!r.err) r.err = calloc(1, 1);
    return r;
}

static void out_free(out_t *r)
{
    free(r->out);
    free(r->err);
}

static int lines(const char *s) { return e2e_count(s, "\n"); }

/* ---- help, version, unknown commands ---------------------------------------- */

static const char *const EXPECTED[] = {"help", "version", "check-data", "synth", "train",
                                       "eval", "predict", "map", "export", "report", "bench"};
#define NEXPECTED (int)(sizeof EXPECTED / sizeof EXPECTED[0])

/* The command names of the usage text: the first word of each line after
 * "commands:" up to the blank line. */
static int listed_commands(const char *usage, char names[][32], int max)
{
    const char *p = strstr(usage, "commands:\n");
    int n = 0;
    if (!p) return 0;
    p += strlen("commands:\n");
    while (*p == ' ' && n < max) {
        while (*p == ' ') p++;
        int k = 0;
        while (p[k] && p[k] != ' ' && p[k] != '\n' && k < 31) k++;
        snprintf(names[n++], 32, "%.*s", k, p);
        p = strchr(p, '\n');
        if (!p) break;
        p++;
    }
    return n;
}

static void help_and_version(void)
{
    out_t none = run(""), help = run("help"), dash = run("--help"), h = run("-h");
    check(none.rc == 2 && !none.out[0] && strstr(none.err, "usage: nightjar <command>"),
          "nightjar without a command: exit 2, the usage on stderr, nothing on stdout", "exit %d, stdout '%s'",
          none.rc, none.out);
    int same = !strcmp(help.out, dash.out) && !strcmp(help.out, h.out) && !strcmp(help.out, none.err);
    check(help.rc == 0 && dash.rc == 0 && h.rc == 0 && !help.err[0] && !dash.err[0] && !h.err[0] && same &&
              strstr(help.out, "usage: nightjar <command>"),
          "help, --help and -h: exit 0, one usage text on stdout, nothing on stderr",
          "exits %d %d %d, same text %d, stderr '%s'", help.rc, dash.rc, h.rc, same, help.err);
    char names[32][32];
    int n = listed_commands(help.out, names, 32), all = n == NEXPECTED;
    char missing[512] = "";
    for (int i = 0; i < NEXPECTED; i++) {
        int found = 0;
        for (int j = 0; j < n; j++) found |= !strcmp(names[j], EXPECTED[i]);
        if (!found) snprintf(missing + strlen(missing), sizeof missing - strlen(missing), " %s", EXPECTED[i]);
        all &= found;
    }
    check(all, "help lists exactly the eleven commands", "%d listed, missing:%s\n%s", n, missing, help.out);
    char bad[1024] = "";
    for (int j = 0; j < n; j++) {
        if (!strcmp(names[j], "help") || !strcmp(names[j], "version")) continue;
        char args[96], want[96];
        snprintf(args, sizeof args, "%.31s --help", names[j]);
        snprintf(want, sizeof want, "usage: nightjar %.31s", names[j]);
        out_t c = run(args);
        if (c.rc != 0 || strncmp(c.out, want, strlen(want)) || c.err[0])
            snprintf(bad + strlen(bad), sizeof bad - strlen(bad), " %.31s (exit %d)", names[j], c.rc);
        out_free(&c);
    }
    check(n > 0 && !bad[0], "every listed command's --help: exit 0, its usage line on stdout", "failing:%s", bad);
    out_free(&none);
    out_free(&help);
    out_free(&dash);
    out_free(&h);

    out_t v = run("version"), dv = run("--version");
    char first[128];
    snprintf(first, sizeof first, "nightjar %s\n", NJ_VERSION);
    int digits = 1, dots = 0;
    for (const char *s = NJ_VERSION; *s; s++) {
        dots += *s == '.';
        digits &= isdigit((unsigned char)*s) || *s == '.';
    }
    check(v.rc == 0 && dv.rc == 0 && !strcmp(v.out, dv.out) && !strncmp(v.out, first, strlen(first)) &&
              digits && dots == 2 && strstr(v.out, "\nopenblas: ") && strstr(v.out, "\nmpi: ") && !v.err[0],
          "version and --version: exit 0, \"nightjar X.Y.Z\" then the libraries", "exits %d %d, stdout:\n%s",
          v.rc, dv.rc, v.out);
    out_free(&v);
    out_free(&dv);

    out_t b = run("bogus");
    check(b.rc == 2 && !b.out[0] && lines(b.err) == 1 && strstr(b.err, "'bogus'") && strstr(b.err, "--help"),
          "an unknown command: exit 2, one line on stderr naming it", "exit %d, stdout '%s', stderr '%s'", b.rc,
          b.out, b.err);
    out_free(&b);
}

/* ---- report ------------------------------------------------------------------ */

static int write_bytes(const char *path, size_t n)
{
    FILE *f = fopen(path, "wb");
    if (!f) return -1;
    for (size_t i = 0; i < n; i++) fputc('x', f);
    return fclose(f);
}

static void report_command(void)
{
    char cfg[600], log[600], runp[600], page[800], args[4096];
    snprintf(cfg, sizeof cfg, "%s/report.json", dir);
    snprintf(log, sizeof log, "%s/train.log", dir);
    snprintf(runp, sizeof runp, "%s/reportrun", dir);
    tr_config(cfg, "\"validate_every\": 3, \"checkpoint_minutes\": 1000, \"max_steps\": 3", "",
              "\"lr\": 1e-4, \"warmup_steps\": 0");
    int rc = tr_wait(tr_start(log, "train --config %s --data %s --out %s", cfg, data, runp), 600);
    if (!check(rc == 0, "report: a 3-step run to report on", "exit %d, see %s", rc, log)) return;

    /* the defaults: RUN/report.html, RUN/metrics.json, RUN/export */
    snprintf(page, sizeof page, "%s/report.html", runp);
    unlink(page);
    snprintf(args, sizeof args, "report %s", runp);
    out_t r = run(args);
    char want[900];
    snprintf(want, sizeof want, "%s\n", page);
    char *html = e2e_slurp(page, NULL);
    check(r.rc == 0 && !strcmp(r.out, want) && !r.err[0] && html && !strncmp(html, "<!DOCTYPE html>", 15) &&
              strstr(html, "<h1>Run t</h1>") && strstr(html, "budget reached") && strstr(html, "No metrics") &&
              strstr(html, "Not exported."),
          "report RUN: exit 0, RUN/report.html written (run name, end, no metrics, not exported), path printed",
          "exit %d, stdout '%s', stderr '%s', page %s", r.rc, r.out, r.err, html ? "written" : "missing");
    free(html);
    out_free(&r);

    char metrics[700], exp[700], file[800];
    snprintf(metrics, sizeof metrics, "%s/metrics.json", runp);
    e2e_write(metrics, "{\"absrel\": 0.5, \"pose\": {\"ate\": 2.5, \"snippets\": 3}}\n");
    snprintf(exp, sizeof exp, "%s/export", runp);
    mkdir(exp, 0777);
    snprintf(file, sizeof file, "%s/model.c", exp);
    write_bytes(file, 1000);
    unlink(page);
    r = run(args);
    html = e2e_slurp(page, NULL);
    check(r.rc == 0 && html && strstr(html, "Pose: ATE 2.5000 m over 3 snippets") &&
              strstr(html, "<td>model.c</td><td>1.0 kB</td>"),
          "report RUN: RUN/metrics.json and the files in RUN/export are on the page",
          "exit %d, stderr '%s'", r.rc, r.err);
    free(html);
    out_free(&r);

    /* the options */
    char other[700], odir[700], out[700];
    snprintf(other, sizeof other, "%s/other.json", dir);
    e2e_write(other, "{\"absrel\": 0.5, \"pose\": {\"ate\": 1.234567, \"snippets\": 7}}\n");
    snprintf(odir, sizeof odir, "%s/elsewhere", dir);
    mkdir(odir, 0777);
    snprintf(file, sizeof file, "%s/net.onnx", odir);
    write_bytes(file, 2500);
    snprintf(out, sizeof out, "%s/page.html", dir);
    unlink(page);
    snprintf(args, sizeof args, "report %s --out %s --metrics %s --export %s", runp, out, other, odir);
    r = run(args);
    snprintf(want, sizeof want, "%s\n", out);
    html = e2e_slurp(out, NULL);
    check(r.rc == 0 && !strcmp(r.out, want) && html && !tr_exists(page) &&
              strstr(html, "Pose: ATE 1.2346 m over 7 snippets") && !strstr(html, "ATE 2.5000") &&
              strstr(html, "<td>net.onnx</td><td>2.5 kB</td>") && !strstr(html, "model.c"),
          "report --out --metrics --export: the page goes to --out (path printed) with those metrics and files",
          "exit %d, stdout '%s', stderr '%s', page %s, default page %s", r.rc, r.out, r.err,
          html ? "written" : "missing", tr_exists(page) ? "written too" : "not written");
    free(html);
    out_free(&r);

    /* a run folder with nothing in it yet */
    char empty[600];
    snprintf(empty, sizeof empty, "%s/fresh", dir);
    mkdir(empty, 0777);
    snprintf(args, sizeof args, "report %s", empty);
    r = run(args);
    snprintf(page, sizeof page, "%s/report.html", empty);
    html = e2e_slurp(page, NULL);
    check(r.rc == 0 && html && strstr(html, "no steps logged") && strstr(html, "no end record"),
          "report on a run folder with nothing in it yet: exit 0, a page that says so", "exit %d, stderr '%s'",
          r.rc, r.err);
    free(html);
    out_free(&r);

    /* errors */
    struct { const char *args; int code; const char *says; const char *name; } bad[] = {
        {"report", 2, "RUN_DIR is required", "report without a run folder: exit 2"},
        {"report RUN --bogus", 2, "--bogus", "report with an unknown option: exit 2"},
        {"report RUN --out", 2, "--out", "report --out without a value: exit 2"},
        {"report RUN RUN", 2, "unexpected argument", "report with two run folders: exit 2"},
        {"report DIR/missing", 1, "DIR/missing", "report on a missing run folder: exit 1 naming it"},
        {"report RUN --out DIR/no/such/page.html", 1, "DIR/no/such/page.html",
         "report --out into a missing folder: exit 1 naming it"},
    };
    for (size_t i = 0; i < sizeof bad / sizeof bad[0]; i++) {
        char a[2048] = "", says[800] = "", *d = a;
        for (const char *s = bad[i].args; *s;) {
            if (!strncmp(s, "RUN", 3)) { d += sprintf(d, "%s", runp); s += 3; }
            else if (!strncmp(s, "DIR", 3)) { d += sprintf(d, "%s", dir); s += 3; }
            else *d++ = *s++, *d = 0;
        }
        const char *w = bad[i].says;
        if (!strncmp(w, "DIR", 3)) snprintf(says, sizeof says, "%s%s", dir, w + 3);
        else snprintf(says, sizeof says, "%s", w);
        r = run(a);
        check(r.rc == bad[i].code && !r.out[0] && lines(r.err) == 1 && strstr(r.err, says), bad[i].name,
              "exit %d (want %d), stdout '%s', stderr '%s' (want '%s')", r.rc, bad[i].code, r.out, r.err, says);
        out_free(&r);
    }
}

int main(void)
{
    if (tr_setup("cli", dir, sizeof dir, data, sizeof data)) return test_exit();
    help_and_version();
    report_command();
    if (!test_failures()) ref_rmtree(dir);
    else printf("# kept %s for inspection\n", dir);
    return test_exit();
}

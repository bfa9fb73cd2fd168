/* tests/test_bench_cli.c — the `nightjar bench` command line (issue #7's
 * contract): the closing line `ms_per_step=X peak_rss_mb=Y gflops=Z`, the
 * --profile shares, --paced stepping (a line on standard input per step, a
 * `step_ms=X` line after each) and bad input.  Times are not judged here
 * (speed targets live in `make bench`); only that the figures are present,
 * positive and consistent with each other: ms_per_step is the median of the
 * timed steps' step_ms lines, the profile's shares add up to 100 %.
 * ./nightjar is run with system() on a small size (128x64, batch 1). */
#include "tests/check.h"
#include "tests/e2e_support.h"
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

static char dir[64], bin[1024];

#define SMALL "--size 128x64 --batch 1 --threads 1 --steps 2 --warmup 1"

/* Runs "[printf INPUT |] nightjar bench ARGS", stdout and stderr into DIR/out.txt
 * and DIR/err.txt; input NULL: standard input from /dev/null.  Exit status. */
static int run(const char *input, const char *args)
{
    char cmd[4096];
    if (input)
        snprintf(cmd, sizeof cmd, "printf '%s' | '%s' bench %s > '%s/out.txt' 2> '%s/err.txt'", input, bin,
                 args, dir, dir);
    else
        snprintf(cmd, sizeof cmd, "'%s' bench %s < /dev/null > '%s/out.txt' 2> '%s/err.txt'", bin, args, dir,
                 dir);
    int rc = system(cmd);
    return rc == -1 ? -1 : (rc >> 8) & 0xff;
}

static char *output(const char *which)
{
    char p[256];
    snprintf(p, sizeof p, "%s/%s.txt", dir, which);
    char *s = e2e_slurp(p, NULL);
    return s ? s : calloc(1, 1);
}

static int count_lines(const char *s)
{
    int n = 0;
    for (; *s; s++) n += *s == '\n';
    return n;
}

/* The closing line's three figures; 1 when the last line has that form. */
static int closing_line(const char *out, double *ms, double *rss, double *gf)
{
    size_t n = strlen(out);
    if (n < 2 || out[n - 1] != '\n') return 0;
    const char *last = out + n - 2;
    while (last > out && last[-1] != '\n') last--;
    char tail[16];
    return sscanf(last, "ms_per_step=%lf peak_rss_mb=%lf gflops=%lf%15s", ms, rss, gf, tail) == 3;
}

static void test_plain(void)
{
    int rc = run(NULL, SMALL);
    char *out = output("out");
    double ms = 0, rss = 0, gf = 0;
    int ok = closing_line(out, &ms, &rss, &gf);
    check(rc == 0 && ok && ms > 0 && rss > 0 && gf > 0, "bench ends with ms_per_step= peak_rss_mb= gflops=",
          "rc %d, closing line %s (%g %g %g)", rc, ok ? "found" : "missing", ms, rss, gf);
    check(strstr(out, "step_ms: min ") && !strstr(out, "profile (") && !strstr(out, "step_ms="),
          "bench without --profile or --paced prints neither", "output:\n%s", out);
    free(out);
}

static void test_profile(void)
{
    int rc = run(NULL, SMALL " --profile");
    char *out = output("out");
    const char *p = strstr(out, "profile (share of step time):");
    /* the categories are registered by the ops on first use (nn/prof.h):
     * read every name=share% pair up to rest= in whatever order they come */
    const char *want[4] = {"conv_forward", "conv_backward", "warping", "ssim"};
    double s[4] = {-1, -1, -1, -1}, rest = -1, sum = 0, lo = 100;
    int got = 0, fields = 0;
    const char *q = p ? p + strlen("profile (share of step time):") : NULL;
    char name[64];
    double v;
    int n;
    while (q && sscanf(q, " %63[a-z_]=%lf%%%n", name, &v, &n) == 2) {
        q += n;
        fields++;
        sum += v;
        lo = fmin(lo, v);
        if (!strcmp(name, "rest")) { rest = v; break; }
        for (int k = 0; k < 4; k++)
            if (!strcmp(name, want[k]) && s[k] < 0) { s[k] = v; got++; }
    }
    check(rc == 0 && got == 4 && fields == 5 && rest >= 0 && lo >= 0 && fabs(sum - 100) < 0.3 && s[0] > 0 &&
              s[1] > 0,
          "bench --profile: conv_forward, conv_backward, warping, ssim and rest, each >= 0, adding up to 100%",
          "rc %d, %d named of %d fields, sum %.2f, min %.2f", rc, got, fields, sum, lo);
    check(strstr(out, "conv_gflops=") != NULL, "bench --profile prints conv_gflops", "output:\n%s", out);
    free(out);
}

static void test_paced(void)
{
    /* warm-up 1 + 2 timed steps: three go lines */
    int rc = run("\\n\\n\\n", SMALL " --paced");
    char *out = output("out");
    double st[3] = {0}, ms = 0, rss, gf;
    int n = 0;
    for (const char *p = out; p && *p; p = strchr(p, '\n') ? strchr(p, '\n') + 1 : NULL)
        if (!strncmp(p, "step_ms=", 8) && n++ < 3) st[n - 1] = atof(p + 8);
    int ok = closing_line(out, &ms, &rss, &gf);
    check(rc == 0 && n == 3 && st[0] > 0 && st[1] > 0 && st[2] > 0, "bench --paced: a step_ms line per step",
          "rc %d, %d step_ms lines", rc, n);
    /* the median of two timed steps is their mean (printed to 0.01 and 0.1 ms) */
    check(ok && fabs(ms - 0.5 * (st[1] + st[2])) < 0.06, "bench --paced: ms_per_step is the median of the timed steps",
          "ms_per_step %.2f, timed steps %.2f %.2f", ms, st[1], st[2]);
    free(out);

    rc = run("\\n", SMALL " --paced");
    out = output("out");
    char *err = output("err");
    check(rc != 0 && count_lines(err) == 1 && strstr(err, "--paced") && strstr(err, "standard input") &&
              !strstr(out, "ms_per_step="),
          "bench --paced: input ending early is a one-line error, no result", "rc %d, stderr: %s", rc, err);
    free(out);
    free(err);
}

static void test_bad_input(void)
{
    static const char *bad[] = {"--size 12x", "--size 100x64", "--steps 0", "--threads x", "--frobnicate"};
    for (size_t i = 0; i < sizeof bad / sizeof bad[0]; i++) {
        int rc = run(NULL, bad[i]);
        char *out = output("out"), *err = output("err");
        char name[128];
        snprintf(name, sizeof name, "bench %s: a one-line error, no result", bad[i]);
        check(rc != 0 && count_lines(err) == 1 && strstr(err, "nightjar bench:") && !strstr(out, "ms_per_step="),
              name, "rc %d, stderr: %s", rc, err);
        free(out);
        free(err);
    }
}

int main(void)
{
    snprintf(bin, sizeof bin, "%s", e2e_bin());
    if (!check(access(bin, X_OK) == 0, "./nightjar is built", "%s not executable", bin)) return test_exit();
    snprintf(dir, sizeof dir, "/tmp/nj_bench_cli_XXXXXX");
    if (!check(mkdtemp(dir) != NULL, "temporary folder", "mkdtemp failed")) return test_exit();
    test_plain();
    test_profile();
    test_paced();
    test_bad_input();
    char cmd[128];
    snprintf(cmd, sizeof cmd, "rm -rf '%s'", dir);
    if (system(cmd) != 0) printf("# could not remove %s\n", dir);
    return test_exit();
}

/* tests/test_data_util.h — small helpers shared by the data/ and synth tests:
 * a scratch folder, running an outside-reference script with /usr/bin/python3,
 * and comparing float arrays. */
#ifndef NJ_TEST_DATA_UTIL_H
#define NJ_TEST_DATA_UTIL_H
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

/* Creates a fresh scratch folder; its path is written to dir (≥ 64 bytes). */
static inline int tdu_tmpdir(char *dir, size_t n)
{
    snprintf(dir, n, "/tmp/nj_data_test_XXXXXX");
    return mkdtemp(dir) ? 0 : -1;
}

static inline void tdu_rmtree(const char *dir)
{
    char cmd[512];
    if (strncmp(dir, "/tmp/nj_data_test_", 18) != 0) return;
    snprintf(cmd, sizeof cmd, "rm -rf '%s'", dir);
    if (system(cmd) != 0) fprintf(stderr, "warning: could not remove %s\n", dir);
}

/* Path of tests/ref/NAME, found from the working directory or from the test
 * binary's location (build/tests/test_x → ../../tests/ref). */
static inline void tdu_ref_path(const char *argv0, const char *name, char *out, size_t n)
{
    snprintf(out, n, "tests/ref/%s", name);
    if (access(out, R_OK) == 0) return;
    const char *slash = strrchr(argv0, '/');
    int len = slash ? (int)(slash - argv0) : 1;
    snprintf(out, n, "%.*s/../../tests/ref/%s", len, slash ? argv0 : ".", name);
}

/* Runs "/usr/bin/python3 SCRIPT ARGS"; returns the exit status (0 = ok). */
static inline int tdu_python(const char *script, const char *args)
{
    char cmd[4096];
    snprintf(cmd, sizeof cmd, "/usr/bin/python3 '%s' %s", script, args);
    int rc = system(cmd);
    return rc == 0 ? 0 : (rc == -1 ? -1 : (rc >> 8 ? rc >> 8 : 1));
}

static inline double tdu_max_abs_diff(const float *a, const float *b, size_t n)
{
    double m = 0;
    for (size_t i = 0; i < n; i++) {
        double d = fabs((double)a[i] - b[i]);
        if (!(d <= m)) m = d;
    }
    return m;
}

#endif

/* tests/torch_ref.c — temporary folders, reference scripts, .npy loading and
 * relative error for the outside-reference tests (see torch_ref.h). */
#include "tests/torch_ref.h"
#include "data/npy.h"
#include <dirent.h>
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

int ref_mkdtemp(char *out, size_t len, const char *tag)
{
    const char *base = getenv("TMPDIR");
    if (!base || !*base) base = "/tmp";
    if ((size_t)snprintf(out, len, "%s/nj_%s_XXXXXX", base, tag) >= len) {
        snprintf(out, len, "temporary folder name too long");
        return -1;
    }
    if (!mkdtemp(out)) {
        int e = errno;
        snprintf(out, len, "mkdtemp in %s failed: %s", base, strerror(e));
        return -1;
    }
    return 0;
}

void ref_rmtree(const char *dir)
{
    DIR *d = opendir(dir);
    if (d) {
        struct dirent *e;
        char path[4096];
        while ((e = readdir(d))) {
            if (!strcmp(e->d_name, ".") || !strcmp(e->d_name, "..")) continue;
            snprintf(path, sizeof path, "%s/%s", dir, e->d_name);
            struct stat st;
            if (lstat(path, &st) == 0 && S_ISDIR(st.st_mode)) ref_rmtree(path);
            else unlink(path);
        }
        closedir(d);
    }
    rmdir(dir);
}

int ref_python_present(char *why, size_t len)
{
    if (access(REF_PYTHON, X_OK) == 0) return 1;
    snprintf(why, len, "%s is missing (%s): the reference tests need Debian's python3, "
             "python3-numpy and python3-torch (make deps-test installs them)",
             REF_PYTHON, strerror(errno));
    return 0;
}

/* Strips `levels` trailing path components from p in place. */
static int strip_components(char *p, int levels)
{
    while (levels-- > 0) {
        char *s = strrchr(p, '/');
        if (!s) return -1;
        *s = 0;
    }
    return 0;
}

int ref_script_path(const char *name, char *out, size_t len)
{
    snprintf(out, len, "tests/ref/%s", name);
    if (access(out, R_OK) == 0) return 0;
    char exe[4096];
    ssize_t n = readlink("/proc/self/exe", exe, sizeof exe - 1);
    if (n > 0) {
        exe[n] = 0;
        /* <repo>/build/tests/test_x -> <repo> */
        if (strip_components(exe, 3) == 0) {
            snprintf(out, len, "%s/tests/ref/%s", exe, name);
            if (access(out, R_OK) == 0) return 0;
        }
    }
    snprintf(out, len, "cannot find tests/ref/%s (run from the repository root)", name);
    return -1;
}

int ref_run_python(const char *script, const char *arg)
{
    if (strchr(script, '\'') || strchr(arg, '\'')) return -1;
    char cmd[8400];
    snprintf(cmd, sizeof cmd, "%s '%s' '%s'", REF_PYTHON, script, arg);
    fflush(stdout);
    int st = system(cmd);
    if (st == -1) return -1;
    if (WIFEXITED(st)) return WEXITSTATUS(st);
    if (WIFSIGNALED(st)) return 128 + WTERMSIG(st);
    return -1;
}

float *ref_load(const char *dir, const char *name, int shape4[4], char *err, size_t errlen)
{
    char path[4096];
    snprintf(path, sizeof path, "%s/%s.npy", dir, name);
    float *data = NULL;
    int shape[NJ_NPY_MAX_DIMS], nd = 0;
    if (nj_npy_read(path, &data, shape, &nd, err, errlen) != NJ_NPY_OK) return NULL;
    for (int d = 0; d < 4; d++) shape4[d] = 1;
    for (int d = 0; d < nd; d++) shape4[4 - nd + d] = shape[d];
    return data;
}

double ref_rel_err(const float *a, const float *b, size_t n)
{
    double diff = 0, scale = 0;
    for (size_t i = 0; i < n; i++) {
        double d = fabs((double)a[i] - (double)b[i]);
        if (isnan(d)) return INFINITY;
        if (d > diff) diff = d;
        if (fabs((double)b[i]) > scale) scale = fabs((double)b[i]);
    }
    return diff / (scale > 1e-6 ? scale : 1e-6);
}

/* tests/losses_support.c — see losses_support.h. */
#include "tests/losses_support.h"
#include "tests/check.h"
#include "tests/torch_ref.h"
#include <stdio.h>
#include <stdlib.h>

int losses_ref_run(const char *mode, char *dir, size_t len, const char *name)
{
    char why[512], script[4096], arg[4400];
    if (!ref_python_present(why, sizeof why)) { check(0, name, "%s", why); return -1; }
    if (ref_script_path("losses_ref.py", script, sizeof script)) { check(0, name, "%s", script); return -1; }
    if (ref_mkdtemp(dir, len, "losses")) { check(0, name, "%s", dir); return -1; }
    snprintf(arg, sizeof arg, "%s:%s", mode, dir);
    int st = ref_run_python(script, arg);
    if (st != 0) {
        check(0, name, "reference script %s %s exited with status %d", script, mode, st);
        ref_rmtree(dir);
        return -1;
    }
    return 0;
}

nj_tensor *losses_ref_tensor(nj_graph *g, const char *dir, const char *name, int with_grad)
{
    char err[512];
    int s[4];
    float *d = ref_load(dir, name, s, err, sizeof err);
    if (!d) { check(0, name, "%s", err); return NULL; }
    nj_tensor *t = nj_tensor_from(g, s[0], s[1], s[2], s[3], d, with_grad);
    free(d);
    return t;
}

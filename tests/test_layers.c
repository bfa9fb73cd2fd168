/* tests/test_layers.c — the dependency rule of the source tree (DEVELOPERS.md,
 * "Modules and the way dependencies point"), checked on every #include "..."
 * of the product's C files:
 *
 *   1. arrows point one way: a module includes only itself and modules of a
 *      lower layer.  nn/ is the bottom; losses/ and data/ stand side by side
 *      on it (neither includes the other); train/'s sub-modules come in the
 *      order model < measure < loop < {eval, export} < map < {report, bench} < cli,
 *      modules on one line not including each other.  train/version.h is a
 *      fact any train module may include.
 *   2. a train/ sub-module is entered through one public header, named after
 *      its folder (train/loop/loop.h, ...): other modules include no other
 *      header of it.
 *   3. every quoted include names a file that exists (a move that left a
 *      stale path fails here before it fails to compile somewhere else).
 *
 * tests/, bench/ and fuzz/ sit above everything and may look inside modules
 * (white-box tests), so only rule 3 applies to them. */
#include "tests/check.h"
#include <dirent.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

typedef struct layer {
    const char *dir;         /* folder prefix, "train/loop/" */
    int rank;
    int has_public;          /* rule 2 applies */
} layer;

/* Lower rank = lower layer.  Equal ranks are siblings. */
static const layer LAYERS[] = {
    {"nn/", 0, 0},
    {"losses/", 1, 0},
    {"data/", 1, 0},
    {"train/version.h", 2, 0},
    {"train/model/", 3, 1},
    {"train/measure/", 4, 1},
    {"train/loop/", 5, 1},
    {"train/eval/", 6, 1},
    {"train/export/", 6, 1},
    {"train/map/", 7, 1},
    {"train/report/", 8, 1},
    {"train/bench/", 8, 1},
    {"train/cli/", 9, 1},
};
#define NLAYERS (int)(sizeof LAYERS / sizeof LAYERS[0])

static int layer_of(const char *path)
{
    for (int i = 0; i < NLAYERS; i++)
        if (!strncmp(path, LAYERS[i].dir, strlen(LAYERS[i].dir))) return i;
    return -1;
}

/* "train/loop/" → "train/loop/loop.h" */
static void public_header(const layer *l, char *out, size_t n)
{
    size_t len = strlen(l->dir);
    const char *p = l->dir + len - 1;                 /* the trailing '/' */
    const char *name = p;
    while (name > l->dir && name[-1] != '/') name--;
    snprintf(out, n, "%s%.*s.h", l->dir, (int)(p - name), name);
}

static int files_seen, includes_seen, wrong_way, private_use, missing;
static char first_problem[3][2600];

/* Keeps the first problem of each kind for the check's message and lists
 * every one as a comment line. */
static void note(int kind, const char *fmt, const char *a, const char *b)
{
    char msg[2600];
    snprintf(msg, sizeof msg, fmt, a, b);
    if (!first_problem[kind][0]) snprintf(first_problem[kind], sizeof first_problem[kind], "%s", msg);
    printf("# %s\n", msg);
}

static void check_file(const char *path, int check_rules)
{
    FILE *f = fopen(path, "r");
    if (!f) return;
    files_seen++;
    int from = layer_of(path);
    char line[1024];
    while (fgets(line, sizeof line, f)) {
        char inc[512];
        if (sscanf(line, " # include \"%511[^\"]\"", inc) != 1) continue;
        includes_seen++;
        struct stat st;
        if (stat(inc, &st) != 0) {
            missing++;
            note(2, "%s includes \"%s\", which does not exist", path, inc);
            continue;
        }
        if (!check_rules || from < 0) continue;
        int to = layer_of(inc);
        if (to < 0 || to == from) continue;
        if (LAYERS[to].rank >= LAYERS[from].rank) {
            wrong_way++;
            note(0, "%s includes %s: a lower or sibling module must not include a higher one", path, inc);
        } else if (LAYERS[to].has_public) {
            char pub[256];
            public_header(&LAYERS[to], pub, sizeof pub);
            if (strcmp(inc, pub)) {
                private_use++;
                note(1, "%s includes %s: outside its module only the public header may be included", path, inc);
            }
        }
    }
    fclose(f);
}

static void walk(const char *dir, int check_rules)
{
    DIR *d = opendir(dir);
    if (!d) return;
    struct dirent *e;
    while ((e = readdir(d))) {
        if (e->d_name[0] == '.') continue;
        char path[1024];
        snprintf(path, sizeof path, "%s/%s", dir, e->d_name);
        struct stat st;
        if (stat(path, &st)) continue;
        size_t n = strlen(e->d_name);
        if (S_ISDIR(st.st_mode)) {
            if (strcmp(e->d_name, "fuzz_corpus") && strcmp(e->d_name, "ref")) walk(path, check_rules);
        } else if (n > 2 && (!strcmp(e->d_name + n - 2, ".c") || !strcmp(e->d_name + n - 2, ".h"))) {
            check_file(path, check_rules);
        }
    }
    closedir(d);
}

int main(void)
{
    const char *product[] = {"nn", "losses", "data", "train"};
    for (int i = 0; i < 4; i++) walk(product[i], 1);
    int product_files = files_seen;
    const char *above[] = {"tests", "bench", "fuzz"};
    for (int i = 0; i < 3; i++) walk(above[i], 0);
    check(product_files > 100 && includes_seen > 500, "the source tree is found and read",
          "%d product files, %d includes (run from the repository root)", product_files, includes_seen);
    check(wrong_way == 0, "no include points from a lower module to a higher one (or between siblings)",
          "%d, first: %s", wrong_way, first_problem[0]);
    check(private_use == 0, "train/ modules are entered only through their public header",
          "%d, first: %s", private_use, first_problem[1]);
    check(missing == 0, "every quoted include names an existing file", "%d, first: %s", missing,
          first_problem[2]);
    return test_failures() ? 1 : 0;
}

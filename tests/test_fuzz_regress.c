/* tests/test_fuzz_regress.c — every fuzz seed (tests/fuzz_corpus/<target>/)
 * and every kept fuzz finding (tests/fuzz_regress/<target>/) through the
 * reader its target exercises (tests/hostile_files.h: hf_reader_for), each in
 * a child process: the reader must return — success, or an error whose
 * message is one line naming the file — and the child must not crash
 * (under make sanitize: no ASan/UBSan report either, those abort).
 * fuzz_checkpoint inputs get their CRC-32 appended first, as the target does.
 * The inputs must be there: every target has seeds of its own, and every kept
 * finding listed in KEPT exists and was read (so an emptied or renamed folder
 * cannot turn this test into one that checks nothing). */
#include "tests/check.h"
#include "tests/hostile_files.h"
#include "tests/torch_ref.h"
#include "train/loop/checkpoint_format.h"
#include "data/crc32.h"
#include "tests/e2e_support.h"
#include <dirent.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/wait.h>
#include <unistd.h>

static char tmp[256];

/* The path to read: the file itself, or a copy with the CRC appended. */
static const char *prepare(const char *target, const char *path, char *out, size_t len)
{
    if (strcmp(target, "fuzz_checkpoint")) return path;
    size_t n = 0;
    char *b = e2e_slurp(path, &n);
    if (!b) return path;
    char *c = realloc(b, n + 4);
    if (!c) { free(b); return path; }
    nj_le_put32((uint8_t *)c + n, nj_crc32(c, n));
    snprintf(out, len, "%s/%s", tmp, strrchr(path, '/') + 1);
    hf_write(out, c, n + 4);
    free(c);
    return out;
}

static void one(const char *target, const char *path)
{
    hf_reader fn = hf_reader_for(target);
    char copy[600], name[900];
    snprintf(name, sizeof name, "fuzz input %s", path);
    if (!fn) { check(0, name, "no reader for target %s", target); return; }
    const char *p = prepare(target, path, copy, sizeof copy);
    int fd[2];
    if (pipe(fd)) { check(0, name, "pipe"); return; }
    pid_t pid = fork();
    if (pid == 0) {
        close(fd[0]);
        char err[1024] = "";
        int rc = fn(p, err, sizeof err);
        if (write(fd[1], err, strlen(err)) < 0) _exit(3);
        _exit(rc ? 1 : 0);
    }
    close(fd[1]);
    char msg[1200];
    size_t n = 0;
    ssize_t k;
    while (n + 1 < sizeof msg && (k = read(fd[0], msg + n, sizeof msg - 1 - n)) > 0) n += (size_t)k;
    msg[n] = 0;
    close(fd[0]);
    int st = 0;
    waitpid(pid, &st, 0);
    int code = WIFEXITED(st) ? WEXITSTATUS(st) : -1;
    int clean = code == 0 || (code == 1 && strstr(msg, p) && !strchr(msg, '\n'));
    check(clean, name, "%s (exit %d): %s", WIFSIGNALED(st) ? "crashed" : "unclean", code, msg);
}

/* Every fuzz target (fuzz/fuzz_*.c, tests/hostile_files.c: hf_reader_for). */
static const char *const TARGETS[] = {"fuzz_checkpoint", "fuzz_config_json", "fuzz_dataset_json", "fuzz_image",
                                      "fuzz_npy", "fuzz_pfm", "fuzz_png16", "fuzz_safetensors"};
#define NTARGETS (int)(sizeof TARGETS / sizeof TARGETS[0])

/* The kept findings that must stay (tests/fuzz_regress/README.md): each one
 * once broke its reader.  Add a line here with every new finding. */
static const char *const KEPT[] = {"tests/fuzz_regress/fuzz_png16/oom-idat-2gb.png"};
#define NKEPT (int)(sizeof KEPT / sizeof KEPT[0])

static int target_index(const char *name)
{
    for (int t = 0; t < NTARGETS; t++)
        if (!strcmp(TARGETS[t], name)) return t;
    return -1;
}

/* Every regular file under ROOT/<target>/; per_target[t] counts the files of
 * TARGETS[t]; every path is appended to `seen` (newline-separated). */
static int walk(const char *root, int *per_target, char *seen, size_t seen_len)
{
    int count = 0;
    DIR *d = opendir(root);
    if (!d) return 0;
    struct dirent *e;
    while ((e = readdir(d))) {
        if (e->d_name[0] == '.' || strncmp(e->d_name, "fuzz_", 5)) continue;
        char sub[512];
        snprintf(sub, sizeof sub, "%s/%s", root, e->d_name);
        DIR *s = opendir(sub);
        if (!s) continue;
        int t = target_index(e->d_name);
        struct dirent *f;
        while ((f = readdir(s))) {
            if (f->d_name[0] == '.') continue;
            char path[800];
            snprintf(path, sizeof path, "%s/%s", sub, f->d_name);
            one(e->d_name, path);
            count++;
            if (t >= 0) per_target[t]++;
            size_t used = strlen(seen);
            snprintf(seen + used, seen_len - used, "%s\n", path);
        }
        closedir(s);
    }
    closedir(d);
    return count;
}

static int file_exists(const char *p) { return access(p, R_OK) == 0; }

int main(void)
{
    if (ref_mkdtemp(tmp, sizeof tmp, "fuzzreg")) { check(0, "temp folder", "%s", tmp); return test_exit(); }
    static char seen[65536];
    int seeds_per[NTARGETS] = {0}, found_per[NTARGETS] = {0};
    int seeds = walk("tests/fuzz_corpus", seeds_per, seen, sizeof seen);
    int found = walk("tests/fuzz_regress", found_per, seen, sizeof seen);
    printf("# %d seed inputs, %d kept findings\n", seeds, found);
    /* every target has seeds of its own (a renamed or emptied corpus folder
     * would otherwise drop its inputs from this test without a word) */
    char missing[512] = "";
    for (int t = 0; t < NTARGETS; t++) {
        char src[128];
        snprintf(src, sizeof src, "fuzz/%s.c", TARGETS[t]);
        if (seeds_per[t] == 0 || !file_exists(src)) {
            size_t used = strlen(missing);
            snprintf(missing + used, sizeof missing - used, " %s (%d seeds%s)", TARGETS[t], seeds_per[t],
                     file_exists(src) ? "" : ", no fuzz source");
        }
    }
    check(!missing[0], "every fuzz target has its seed corpus in tests/fuzz_corpus/ (run from the repository root)",
          "missing:%s", missing);
    int kept_ok = 1;
    char why[1024] = "";
    for (int k = 0; k < NKEPT; k++) {
        char line[800];
        snprintf(line, sizeof line, "%s\n", KEPT[k]);
        if (!file_exists(KEPT[k]) || !strstr(seen, line)) {
            kept_ok = 0;
            size_t used = strlen(why);
            snprintf(why + used, sizeof why - used, " %s", KEPT[k]);
        }
    }
    check(kept_ok && found >= NKEPT, "the kept fuzz findings are present and were read",
          "%d kept findings read; missing or not read:%s", found, why);
    if (!test_failures()) ref_rmtree(tmp);
    return test_exit();
}

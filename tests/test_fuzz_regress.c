/* tests/test_fuzz_regress.c — every fuzz seed (tests/fuzz_corpus/<target>/)
 * and every kept fuzz finding (tests/fuzz_regress/<target>/) through the
 * reader its target exercises (tests/hostile_files.h: hf_reader_for), each in
 * a child process: the reader must return — success, or an error whose
 * message is one line naming the file — and the child must not crash
 * (under make sanitize: no ASan/UBSan report either, those abort).
 * fuzz_checkpoint inputs get their CRC-32 appended first, as the target does. */
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

/* Every regular file under ROOT/<target>/. */
static int walk(const char *root)
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
        struct dirent *f;
        while ((f = readdir(s))) {
            if (f->d_name[0] == '.') continue;
            char path[800];
            snprintf(path, sizeof path, "%s/%s", sub, f->d_name);
            one(e->d_name, path);
            count++;
        }
        closedir(s);
    }
    closedir(d);
    return count;
}

int main(void)
{
    if (ref_mkdtemp(tmp, sizeof tmp, "fuzzreg")) { check(0, "temp folder", "%s", tmp); return test_exit(); }
    int seeds = walk("tests/fuzz_corpus");
    int found = walk("tests/fuzz_regress");
    check(seeds >= 8, "fuzz seed corpora are present (run from the repository root)", "%d files", seeds);
    printf("# %d seed inputs, %d kept findings\n", seeds, found);
    if (!test_failures()) ref_rmtree(tmp);
    return test_exit();
}

/* tests/e2e_support.c — see e2e_support.h. */
#include "tests/e2e_support.h"
#include "tests/check.h"
#include <cjson/cJSON.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/wait.h>
#include <unistd.h>

int e2e_run(const char *cmd, const char *log)
{
    char *full = malloc(strlen(cmd) + strlen(log) + 32);
    sprintf(full, "(%s) > '%s' 2>&1", cmd, log);
    fflush(stdout);
    int st = system(full);
    free(full);
    if (st == -1) return -1;
    if (WIFEXITED(st)) return WEXITSTATUS(st);
    if (WIFSIGNALED(st)) return 128 + WTERMSIG(st);
    return -1;
}

char *e2e_slurp(const char *path, size_t *len)
{
    FILE *f = fopen(path, "rb");
    if (!f) return NULL;
    fseek(f, 0, SEEK_END);
    long n = ftell(f);
    fseek(f, 0, SEEK_SET);
    char *s = malloc((size_t)(n > 0 ? n : 0) + 1);
    size_t got = s && n > 0 ? fread(s, 1, (size_t)n, f) : 0;
    if (s) s[got] = 0;
    if (len) *len = got;
    fclose(f);
    return s;
}

int e2e_write(const char *path, const char *text)
{
    FILE *f = fopen(path, "w");
    if (!f) return -1;
    int ok = fputs(text, f) >= 0;
    return (fclose(f) == 0 && ok) ? 0 : -1;
}

double e2e_json_number(const char *path, const char *key)
{
    char *text = e2e_slurp(path, NULL);
    if (!text) return NAN;
    cJSON *root = cJSON_Parse(text), *node = root;
    free(text);
    char buf[256];
    snprintf(buf, sizeof buf, "%s", key);
    for (char *part = strtok(buf, "."); part && node; part = strtok(NULL, "."))
        node = cJSON_GetObjectItemCaseSensitive(node, part);
    double v = cJSON_IsNumber(node) ? node->valuedouble : NAN;
    cJSON_Delete(root);
    return v;
}

int e2e_count(const char *text, const char *needle)
{
    int n = 0;
    for (const char *p = text; p && (p = strstr(p, needle)); p += strlen(needle)) n++;
    return n;
}

const char *e2e_bin(void)
{
    const char *b = getenv("NJ_BIN");
    return b && b[0] ? b : "./nightjar";
}

int e2e_have_binary(void) { return access(e2e_bin(), X_OK) == 0; }

void e2e_side_by_side(const char *dir, void (*first)(const char *), void (*second)(const char *),
                      const char *tag, const char *second_name)
{
    char out[300];
    snprintf(out, sizeof out, "%s/%s-checks.txt", dir, tag);
    fflush(stdout);
    pid_t pid = fork();
    if (pid == 0) {
        if (!freopen(out, "w", stdout)) _exit(3);
        second(dir);
        fflush(stdout);
        _exit(test_failures() ? 1 : 0);
    }
    if (pid < 0) second(dir);
    first(dir);
    if (pid > 0) {
        int st = 0;
        pid_t w = waitpid(pid, &st, 0);
        char *text = e2e_slurp(out, NULL);
        if (text) fputs(text, stdout);
        free(text);
        check(w == pid && WIFEXITED(st) && WEXITSTATUS(st) == 0, second_name, "child status %d", st);
    }
}

int e2e_val_absrels(const char *text, double *v, int max)
{
    int n = 0;
    for (const char *p = text; p && (p = strstr(p, "\"type\":\"val\"")) && n < max; p++) {
        const char *a = strstr(p, "\"absrel\":"), *nl = strchr(p, '\n');
        if (a && (!nl || a < nl)) v[n++] = atof(a + 9);
    }
    return n;
}

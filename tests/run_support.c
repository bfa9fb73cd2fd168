/* tests/run_support.c — see run_support.h. */
#include "tests/run_support.h"
#include "tests/e2e_support.h"
#include "train/loop/checkpoint.h"
#include <cjson/cJSON.h>
#include <dirent.h>
#include <math.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <sys/wait.h>
#include <time.h>
#include <unistd.h>

pid_t rs_spawn(char *const argv[], const char *log, const rs_limits *lim)
{
    fflush(stdout);
    pid_t pid = fork();
    if (pid != 0) return pid;
    if (!freopen(log, "a", stdout) || !freopen(log, "a", stderr)) _exit(127);
    if (lim && lim->fsize > 0) {
        struct rlimit r = {(rlim_t)lim->fsize, (rlim_t)lim->fsize};
        signal(SIGXFSZ, SIG_IGN);                  /* survives exec: writes fail with EFBIG */
        if (setrlimit(RLIMIT_FSIZE, &r)) _exit(126);
    }
    if (lim && lim->as > 0) {
        struct rlimit r = {(rlim_t)lim->as, (rlim_t)lim->as};
        if (setrlimit(RLIMIT_AS, &r)) _exit(126);
    }
    execv(e2e_bin(), argv);   /* the binary under test (NJ_BIN), not always ./nightjar */
    _exit(127);
}

int rs_wait(pid_t pid)
{
    int st;
    if (pid < 0 || waitpid(pid, &st, 0) != pid) return -1;
    return WIFEXITED(st) ? WEXITSTATUS(st) : 128 + WTERMSIG(st);
}

int rs_run(char *const argv[], const char *log, const rs_limits *lim)
{
    return rs_wait(rs_spawn(argv, log, lim));
}

int rs_run_peak(char *const argv[], const char *log, const rs_limits *lim, double *peak_mib)
{
    pid_t pid = rs_spawn(argv, log, lim);
    int st;
    struct rusage ru;
    *peak_mib = 0;
    if (pid < 0 || wait4(pid, &st, 0, &ru) != pid) return -1;
    *peak_mib = ru.ru_maxrss / 1024.0;
    return WIFEXITED(st) ? WEXITSTATUS(st) : 128 + WTERMSIG(st);
}

static int ends_with(const char *s, const char *tail)
{
    size_t n = strlen(s), k = strlen(tail);
    return n >= k && !strcmp(s + n - k, tail);
}

int rs_check_checkpoints(const char *dir, int *count, char *why, size_t len)
{
    DIR *d = opendir(dir);
    int bad = 0;
    *count = 0;
    if (why && len) why[0] = 0;
    if (!d) return 0;
    struct dirent *e;
    while ((e = readdir(d))) {
        if (!ends_with(e->d_name, ".ckpt")) continue;
        char path[2048], err[512];
        snprintf(path, sizeof path, "%s/%s", dir, e->d_name);
        nj_model m;
        (*count)++;
        if (nj_checkpoint_load(path, &m, NULL, NULL, err, sizeof err)) {
            if (!bad++) snprintf(why, len, "%s", err);
            continue;
        }
        nj_model_free(&m);
    }
    closedir(d);
    return bad;
}

int rs_count_temps(const char *dir)
{
    DIR *d = opendir(dir);
    int n = 0;
    if (!d) return 0;
    struct dirent *e;
    while ((e = readdir(d))) n += ends_with(e->d_name, ".tmp");
    closedir(d);
    return n;
}

int rs_log_check(const char *path, rs_log_stats *s)
{
    memset(s, 0, sizeof *s);
    s->last_end_step = -1;
    size_t len;
    char *text = e2e_slurp(path, &len);
    if (!text) return -1;
    char *p = text;
    for (char *nl; (nl = memchr(p, '\n', len - (size_t)(p - text))); p = nl + 1) {
        *nl = 0;
        s->lines++;
        cJSON *o = cJSON_Parse(p);
        if (!cJSON_IsObject(o)) s->bad++;
        const cJSON *type = cJSON_GetObjectItemCaseSensitive(o, "type");
        const cJSON *step = cJSON_GetObjectItemCaseSensitive(o, "step");
        if (cJSON_IsString(type) && !strcmp(type->valuestring, "end") && cJSON_IsNumber(step))
            s->last_end_step = (long)step->valuedouble;
        cJSON_Delete(o);
    }
    s->torn_tail = p < text + len;
    free(text);
    return 0;
}

double rs_weight_diff(const char *a, const char *b, char *err, size_t len)
{
    nj_model ma, mb;
    if (nj_checkpoint_load(a, &ma, NULL, NULL, err, len)) return INFINITY;
    if (nj_checkpoint_load(b, &mb, NULL, NULL, err, len)) { nj_model_free(&ma); return INFINITY; }
    double worst = 0;
    nj_params *pa[2] = {&ma.params, &ma.buffers}, *pb[2] = {&mb.params, &mb.buffers};
    for (int s = 0; s < 2; s++) {
        if (pa[s]->count != pb[s]->count) { snprintf(err, len, "tensor counts differ"); worst = INFINITY; break; }
        for (int i = 0; i < pa[s]->count; i++) {
            size_t k = nj_param_numel(pa[s]->items[i]);
            if (k != nj_param_numel(pb[s]->items[i])) { snprintf(err, len, "tensor sizes differ"); worst = INFINITY; break; }
            for (size_t j = 0; j < k; j++) {
                double d = fabs((double)pa[s]->items[i]->data[j] - pb[s]->items[i]->data[j]);
                if (!(d <= worst)) worst = d;
            }
        }
    }
    nj_model_free(&ma);
    nj_model_free(&mb);
    return worst;
}

void rs_sleep_ms(double ms)
{
    if (ms <= 0) return;
    struct timespec ts = {(time_t)(ms / 1000), (long)(fmod(ms, 1000.0) * 1e6)};
    nanosleep(&ts, NULL);
}

double rs_now(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return ts.tv_sec + ts.tv_nsec * 1e-9;
}

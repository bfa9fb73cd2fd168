/* train/loop/memneed.c — what the process uses and may still use (see memneed.h):
 * /proc/self/status, /proc/meminfo, RLIMIT_AS and the cgroup v2 (or v1)
 * memory limit. */
#include "train/loop/memneed.h"
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>

/* Value of "Key:   N kB" in a /proc file, in bytes; -1 when missing. */
static double proc_kb(const char *path, const char *key)
{
    FILE *f = fopen(path, "r");
    if (!f) return -1;
    char line[256];
    size_t n = strlen(key);
    double v = -1;
    while (fgets(line, sizeof line, f))
        if (!strncmp(line, key, n) && line[n] == ':') {
            v = strtod(line + n + 1, NULL) * 1024.0;
            break;
        }
    fclose(f);
    return v;
}

double nj_mem_rss(int peak)
{
    double v = proc_kb("/proc/self/status", peak ? "VmHWM" : "VmRSS");
    return v > 0 ? v : 0;
}

double nj_mem_vm(int peak)
{
    double v = proc_kb("/proc/self/status", peak ? "VmPeak" : "VmSize");
    return v > 0 ? v : 0;
}

/* A number in a sysfs file ("max" → HUGE_VAL); -1 when unreadable. */
static double sys_number(const char *path)
{
    FILE *f = fopen(path, "r");
    if (!f) return -1;
    char buf[64] = "";
    double v = -1;
    if (fgets(buf, sizeof buf, f)) v = !strncmp(buf, "max", 3) ? HUGE_VAL : strtod(buf, NULL);
    fclose(f);
    return v;
}

/* cgroup v2: the smallest memory.max − memory.current from our cgroup up to
 * the root (a limit may be set on any ancestor); v1: the memory controller's
 * limit_in_bytes − usage_in_bytes. */
static double cgroup_room(void)
{
    FILE *f = fopen("/proc/self/cgroup", "r");
    if (!f) return HUGE_VAL;
    char line[1024], v2[1024] = "", v1[1024] = "";
    while (fgets(line, sizeof line, f)) {
        line[strcspn(line, "\n")] = 0;
        if (!strncmp(line, "0::", 3)) snprintf(v2, sizeof v2, "%s", line + 3);
        else if (strstr(line, ":memory:")) snprintf(v1, sizeof v1, "%s", strstr(line, ":memory:") + 8);
    }
    fclose(f);
    double room = HUGE_VAL;
    char path[1200];
    if (v1[0]) {
        snprintf(path, sizeof path, "/sys/fs/cgroup/memory%s/memory.limit_in_bytes", v1);
        double max = sys_number(path);
        snprintf(path, sizeof path, "/sys/fs/cgroup/memory%s/memory.usage_in_bytes", v1);
        double cur = sys_number(path);
        if (max > 0 && max < 1e18 && cur >= 0) room = max - cur;
    }
    for (char *end; v2[0]; *end = 0) {
        snprintf(path, sizeof path, "/sys/fs/cgroup%s/memory.max", strcmp(v2, "/") ? v2 : "");
        double max = sys_number(path);
        snprintf(path, sizeof path, "/sys/fs/cgroup%s/memory.current", strcmp(v2, "/") ? v2 : "");
        double cur = sys_number(path);
        if (max > 0 && isfinite(max) && cur >= 0 && max - cur < room) room = max - cur;
        end = strrchr(v2, '/');
        if (!end || end == v2) break;
    }
    return room;
}

double nj_mem_available(double virt_extra, const char **limit)
{
    double best = HUGE_VAL;
    *limit = "unknown";
    double avail = proc_kb("/proc/meminfo", "MemAvailable");
    if (avail >= 0) { best = avail; *limit = "MemAvailable"; }
    struct rlimit rl;
    if (getrlimit(RLIMIT_AS, &rl) == 0 && rl.rlim_cur != RLIM_INFINITY) {
        double vm = proc_kb("/proc/self/status", "VmSize");
        double room = (double)rl.rlim_cur - (vm > 0 ? vm : 0) - virt_extra;
        if (room < best) { best = room > 0 ? room : 0; *limit = "RLIMIT_AS (ulimit -v)"; }
    }
    double cg = cgroup_room();
    if (cg < best) { best = cg > 0 ? cg : 0; *limit = "the cgroup memory limit"; }
    return best;
}

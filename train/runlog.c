/* train/runlog.c — JSONL log and terminal progress (see runlog.h). */
#include "train/runlog.h"
#include <errno.h>
#include <fcntl.h>
#include <stdarg.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

/* Cuts a torn last line (no trailing newline) left by a crash. */
static void cut_torn_line(int fd)
{
    off_t end = lseek(fd, 0, SEEK_END);
    off_t pos = end;
    char c;
    while (pos > 0) {
        if (pread(fd, &c, 1, pos - 1) != 1) return;
        if (c == '\n') break;
        pos--;
    }
    if (pos != end && ftruncate(fd, pos) == 0) fsync(fd);
}

int nj_runlog_open(nj_runlog *l, const char *dir, char *err, size_t errlen)
{
    char path[4096];
    snprintf(path, sizeof path, "%s/log.jsonl", dir);
    l->fd = open(path, O_RDWR | O_CREAT | O_APPEND, 0644);
    l->tty = isatty(STDOUT_FILENO);
    l->line_open = 0;
    if (l->fd < 0) {
        snprintf(err, errlen, "%s: cannot open the run log: %s", path, strerror(errno));
        return -1;
    }
    cut_torn_line(l->fd);
    return 0;
}

void nj_runlog_quiet(nj_runlog *l)
{
    l->fd = -1;
    l->tty = 0;
    l->line_open = 0;
    l->quiet = 1;
    l->held[0] = 0;
}

void nj_runlog_close(nj_runlog *l)
{
    if (l->line_open) { fputc('\n', stdout); l->line_open = 0; }
    fflush(stdout);
    if (l->fd >= 0) close(l->fd);
    l->fd = -1;
}

int nj_runlog_json(nj_runlog *l, const char *json)
{
    char line[4096];
    if (l->quiet) return 0;
    int n = snprintf(line, sizeof line, "%s\n", json);
    if (n <= 0 || n >= (int)sizeof line) return -1;
    if (write(l->fd, line, (size_t)n) != n) return -1;
    return fdatasync(l->fd);
}

void nj_runlog_progress(nj_runlog *l, const char *text)
{
    if (l->quiet) return;
    if (l->tty) {
        printf("\r\033[K%s", text);
        l->line_open = 1;
    } else {
        printf("%s\n", text);
    }
    fflush(stdout);
}

void nj_runlog_say(nj_runlog *l, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    if (l->quiet) {
        vsnprintf(l->held, sizeof l->held, fmt, ap);
        va_end(ap);
        return;
    }
    if (l->line_open) { fputc('\n', stdout); l->line_open = 0; }
    vprintf(fmt, ap);
    va_end(ap);
    fputc('\n', stdout);
    fflush(stdout);
}

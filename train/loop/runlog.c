/* train/loop/runlog.c — JSONL log and terminal progress (see runlog.h). */
#include "train/loop/runlog.h"
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
    memset(l, 0, sizeof *l);
    snprintf(l->path, sizeof l->path, "%s/log.jsonl", dir);
    l->fd = open(l->path, O_RDWR | O_CREAT | O_APPEND, 0644);
    l->tty = isatty(STDOUT_FILENO);
    l->line_open = 0;
    if (l->fd < 0) {
        snprintf(err, errlen, "%s: cannot open the run log: %s", l->path, strerror(errno));
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

static int log_failed(nj_runlog *l, int e)
{
    if (!l->error[0]) snprintf(l->error, sizeof l->error, "%s: write failed: %s", l->path, strerror(e));
    return -1;
}

int nj_runlog_json(nj_runlog *l, const char *json)
{
    char line[4096];
    if (l->quiet) return 0;
    int n = snprintf(line, sizeof line, "%s\n", json);
    if (n <= 0 || n >= (int)sizeof line) return -1;
    if (l->fd < 0) return -1;
    off_t before = lseek(l->fd, 0, SEEK_END);
    size_t done = 0;
    int e = 0;
    while (done < (size_t)n && !e) {          /* one write(); the loop only finishes a short one */
        ssize_t k = write(l->fd, line + done, (size_t)n - done);
        if (k > 0) done += (size_t)k;
        else if (k == 0) e = ENOSPC;
        else if (errno != EINTR) e = errno;
    }
    if (e) {
        /* cut the partial line off again so the log stays parseable */
        if (done > 0 && before >= 0 && ftruncate(l->fd, before) != 0) { /* nothing more to do */ }
        return log_failed(l, e);
    }
    if (fdatasync(l->fd) != 0 && errno != EINVAL && errno != EROFS) return log_failed(l, errno);
    return 0;
}

const char *nj_runlog_error(const nj_runlog *l) { return l->error[0] ? l->error : NULL; }

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

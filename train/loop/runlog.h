/* train/loop/runlog.h — what a run tells the world while it trains:
 * RUN_DIR/log.jsonl (one JSON object per line: every logged step and every
 * validation; each line is written with a single write() and fsync'ed, and a
 * torn last line left by a crash is cut off when the log is reopened) and the
 * terminal progress (one updating line on a TTY, plain lines otherwise). */
#ifndef NJ_RUNLOG_H
#define NJ_RUNLOG_H
#include <stdio.h>

typedef struct nj_runlog {
    int fd;
    int tty;
    int line_open;          /* an updating progress line is on screen */
    char path[1100];        /* RUN_DIR/log.jsonl */
    char error[1400];       /* first write failure ("PATH: write failed: why"), "" if none */
    int quiet;              /* nj_runlog_quiet: writes nothing */
    char held[512];         /* quiet: the last message passed to nj_runlog_say */
} nj_runlog;

/* Opens (appends to) dir/log.jsonl.  Returns 0 or -1 with a message. */
int nj_runlog_open(nj_runlog *l, const char *dir, char *err, size_t errlen);
void nj_runlog_close(nj_runlog *l);
/* A log that writes nothing (the non-zero ranks of a data-parallel run): the
 * JSON lines and progress are dropped, the last message is kept in `held`. */
void nj_runlog_quiet(nj_runlog *l);
/* Appends one JSON object line (text without the newline) with a single
 * write() and fdatasync.  On failure (disk full, I/O error) a partly written
 * line is cut off again, so the file stays parseable, and the first failure
 * is kept (nj_runlog_error).  Returns 0 or -1. */
int nj_runlog_json(nj_runlog *l, const char *json);
/* The first failed log write as a one-line message naming the file and the
 * system's reason, or NULL while every write has succeeded. */
const char *nj_runlog_error(const nj_runlog *l);
/* Progress: replaces the updating line on a TTY, else prints a plain line. */
void nj_runlog_progress(nj_runlog *l, const char *text);
/* A message on its own line (ends any updating line first). */
void nj_runlog_say(nj_runlog *l, const char *fmt, ...) __attribute__((format(printf, 2, 3)));

#endif

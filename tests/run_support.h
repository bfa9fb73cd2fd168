/* tests/run_support.h — helpers for the run-robustness tests (kill at random,
 * disk full, memory limits): starting ./nightjar with resource limits,
 * inspecting a run folder (every checkpoint loadable? the JSONL log whole?),
 * comparing the weights of two checkpoints. */
#ifndef NJ_RUN_SUPPORT_H
#define NJ_RUN_SUPPORT_H
#include <stddef.h>
#include <sys/types.h>

/* Limits for rs_spawn (0 = unchanged). */
typedef struct rs_limits {
    long long fsize;         /* RLIMIT_FSIZE in bytes; SIGXFSZ is ignored so writes fail with EFBIG */
    long long as;            /* RLIMIT_AS in bytes */
} rs_limits;

/* Starts ./nightjar with argv (argv[0] is "nightjar", NULL-terminated),
 * stdout+stderr appended to `log`.  Returns the pid, or -1. */
pid_t rs_spawn(char *const argv[], const char *log, const rs_limits *lim);
/* Waits for pid: exit status, or 128+signal. */
int rs_wait(pid_t pid);
/* rs_spawn + rs_wait. */
int rs_run(char *const argv[], const char *log, const rs_limits *lim);
/* rs_run, also giving the child's peak resident set in MiB (getrusage
 * through wait4: ru_maxrss). */
int rs_run_peak(char *const argv[], const char *log, const rs_limits *lim, double *peak_mib);

/* Loads every *.ckpt file in dir with the checkpoint loader.  Returns the
 * number that failed (0: all readable); *count gets the number of files; the
 * first failure's message goes to why. */
int rs_check_checkpoints(const char *dir, int *count, char *why, size_t len);
/* Number of "*.tmp" files in dir. */
int rs_count_temps(const char *dir);

typedef struct rs_log_stats {
    int lines;               /* complete lines (ending in '\n') */
    int bad;                 /* complete lines that cJSON cannot parse as an object */
    int torn_tail;           /* 1 when the file ends in a partial line */
    long last_end_step;      /* "step" of the last {"type":"end"} line, -1 when none */
} rs_log_stats;
/* Parses a JSONL file line by line with cJSON.  Returns 0, or -1 when the
 * file cannot be read. */
int rs_log_check(const char *path, rs_log_stats *s);

/* Max |a − b| over all parameters and buffers of two checkpoints; INFINITY
 * (message in err) when either cannot be loaded or the tensors differ in
 * number or size. */
double rs_weight_diff(const char *a, const char *b, char *err, size_t len);

void rs_sleep_ms(double ms);
double rs_now(void);

#endif

/* tests/test_data_scale.c — what a start costs on many frames does not grow with
 * them (DEVELOPERS.md "Large datasets"), checked by mechanism, not by timing:
 *  - the scan cache gives exactly the kept frames, sizes and duplicate counts
 *    of a full scan (cold, warm, after one frame is re-linked, with a damaged
 *    cache entry), and a warm open decodes no image;
 *  - `train` on 20,000 frames (20 sequences of symlinks to 10 real 48x32
 *    frames) decodes all 20,000 at its first start and none at the next one
 *    (its "data check:" line);
 *  - peak RSS of a one-step run on 20,000 frames exceeds that on 1,000 by
 *    less than MEM_BOUND_BYTES_PER_FRAME per extra frame, at a first start
 *    (every frame decoded) and at a cached one: the file list and a few index
 *    arrays (50-130 bytes a frame measured) pass; a scan that keeps every
 *    frame's thumbnail (32x21 floats) measured 2845 bytes a frame and failed.
 * The scan cache lives in the scratch folder (XDG_CACHE_HOME). */
#include "tests/check.h"
#include "tests/e2e_support.h"
#include "tests/test_data_util.h"
#include "data/dataset.h"
#include "data/image.h"
#include "data/scancache.h"
#include <dirent.h>
#include <errno.h>
#include <fcntl.h>
#include <sys/resource.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <time.h>

#define RW 48
#define RH 32
#define NREAL 10
#define SEQ_FRAMES 1000
#define NSEQ 20
#define MEM_BOUND_BYTES_PER_FRAME 400.0

/* AddressSanitizer keeps freed memory in a quarantine (up to 256 MB), so RSS
 * grows with every decoded frame: the bound is not applied there (UNDER_ASAN,
 * tests/check.h). */
static char top[64], real[128], cache[128];

static const char *CONFIG =
    "{ \"run\": { \"name\": \"scale\", \"seed\": 1, \"threads\": 1, \"log_every\": 1, \"validate_every\": 0,\n"
    "           \"checkpoint_minutes\": 1000, \"keep_last\": 1, \"max_steps\": 1 },\n"
    "  \"data\": { \"width\": 64, \"height\": 32, \"batch\": 2, \"frame_offsets\": [1], \"video\": true,\n"
    "            \"duplicate_threshold\": 0.003 },\n"
    "  \"model\": { \"width\": 0.25, \"stages\": 4, \"pose_width\": 0.25, \"pose_stages\": 4 } }\n";

/* Real frame k: a shifted crop of a fixed texture; frames 4 and 5 are the
 * same picture (a stop), so the stop filter has something to skip. */
static void write_real(int k)
{
    int shift = k == 5 ? 4 : k;
    nj_image im;
    nj_image_alloc(&im, RW, RH);
    for (int c = 0; c < 3; c++)
        for (int y = 0; y < RH; y++)
            for (int x = 0; x < RW; x++) {
                unsigned s = (unsigned)((x + 3 * shift) / 3 * 7919 + y / 3 * 104729 + c * 1299709);
                s ^= s >> 13; s *= 0x5bd1e995u; s ^= s >> 15;
                im.data[(c * RH + y) * RW + x] = (float)(s % 256) / 255.0f;
            }
    char path[256], err[256];
    snprintf(path, sizeof path, "%s/%02d.png", real, k);
    if (nj_png_write_rgb(path, &im, err, sizeof err)) printf("note: %s\n", err);
    nj_image_free(&im);
}

/* seq-NNNN/cam0 (and cam1 when stereo) of n links, frame i → real (s + i) % NREAL. */
static void make_sequence(int s, int n, int stereo)
{
    char dir[256], link[300], target[256];
    for (int cam = 0; cam <= stereo; cam++) {
        snprintf(dir, sizeof dir, "%s/seq-%04d", top, s);
        mkdir(dir, 0755);
        snprintf(dir, sizeof dir, "%s/seq-%04d/cam%d", top, s, cam);
        mkdir(dir, 0755);
        for (int i = 0; i < n; i++) {
            snprintf(link, sizeof link, "%s/%06d.png", dir, i);
            snprintf(target, sizeof target, "%s/%02d.png", real, (s + i) % NREAL);
            if (symlink(target, link) && errno != EEXIST) printf("note: symlink %s failed\n", link);
        }
    }
}

/* NAME.json listing sequences [0, nseq), all "train"; `stereo` on sequence 1. */
static void write_dataset(const char *name, int nseq, int stereo)
{
    char path[256], part[512];
    snprintf(path, sizeof path, "%s/%s.json", top, name);
    FILE *f = fopen(path, "w");
    if (!f) return;
    fputs("{ \"sequences\": [\n", f);
    for (int s = 0; s < nseq; s++) {
        part[0] = 0;
        if (stereo && s == 1)
            snprintf(part, sizeof part, " \"right_images\": \"seq-%04d/cam1\", \"baseline\": 0.1,", s);
        fprintf(f, "%s{ \"name\": \"seq-%04d\", \"images\": \"seq-%04d/cam0\",%s \"camera\": {\"fx\": 40, \"fy\": 40, "
                   "\"cx\": 23.5, \"cy\": 15.5}, \"split\": \"train\" }\n", s ? "," : "", s, s, part);
    }
    fputs("] }\n", f);
    fclose(f);
}

typedef struct opened {
    nj_dataset ds;
    int problems, decoded, cached;
} opened;

/* nj_dataset_open with the cache off (mode 0), written (1) or read (2). */
static void open_with(const char *name, int mode, opened *o)
{
    char path[256];
    snprintf(path, sizeof path, "%s/%s.json", top, name);
    nj_data_options opt;
    nj_data_options_default(&opt);
    opt.scan_cache = mode ? cache : NULL;
    opt.scan_cache_read = mode == 2;
    nj_problems pr;
    nj_problems_init(&pr);
    o->problems = nj_dataset_open(path, &opt, &o->ds, &pr);
    nj_problems_print(&pr, stdout);
    nj_problems_free(&pr);
    o->decoded = o->cached = 0;
    for (int i = 0; i < o->ds.nseq; i++) {
        o->decoded += o->ds.seq[i].decoded;
        o->cached += o->ds.seq[i].scan_cached;
    }
}

/* Same sizes, kept frames and duplicate counts in every sequence. */
static int same_result(const nj_dataset *a, const nj_dataset *b, char *why, size_t n)
{
    if (a->nseq != b->nseq) { snprintf(why, n, "%d vs %d sequences", a->nseq, b->nseq); return 0; }
    for (int i = 0; i < a->nseq; i++) {
        const nj_sequence *p = &a->seq[i], *q = &b->seq[i];
        if (p->width != q->width || p->height != q->height || p->nkept != q->nkept || p->duplicates != q->duplicates ||
            memcmp(p->kept, q->kept, (size_t)p->nkept * sizeof(int))) {
            snprintf(why, n, "sequence %d: %dx%d kept %d dup %d vs %dx%d kept %d dup %d", i, p->width, p->height,
                     p->nkept, p->duplicates, q->width, q->height, q->nkept, q->duplicates);
            return 0;
        }
    }
    return 1;
}

static void scan_cache_equivalence(void)
{
    for (int s = 0; s < 3; s++) make_sequence(s, 300, s == 1);
    write_dataset("small", 3, 1);
    opened plain, cold, warm, relinked, fresh, damaged;
    char why[256] = "";
    open_with("small", 0, &plain);
    open_with("small", 1, &cold);
    open_with("small", 2, &warm);
    int dups = 0;
    for (int i = 0; i < plain.ds.nseq; i++) dups += plain.ds.seq[i].duplicates;
    check(plain.problems == 0 && dups > 0 && plain.decoded == 1200 && cold.decoded == 1200,
          "scale_full_scan_decodes_every_image", "problems %d, duplicates %d, decoded %d / %d (want 1200: 900 "
          "frames + 300 partners)", plain.problems, dups, plain.decoded, cold.decoded);
    check(warm.problems == 0 && warm.decoded == 0 && warm.cached == 3 && same_result(&plain.ds, &warm.ds, why, sizeof why),
          "scale_cache_warm_open_decodes_nothing_same_result", "decoded %d, cached %d sequences; %s", warm.decoded,
          warm.cached, why);
    /* re-link frame 150 of sequence 2 to another picture: only that sequence is scanned again */
    char link[256], target[256];
    snprintf(link, sizeof link, "%s/seq-0002/cam0/000150.png", top);
    snprintf(target, sizeof target, "%s/%02d.png", real, 4);
    unlink(link);
    if (symlink(target, link)) printf("note: re-link failed\n");
    open_with("small", 2, &relinked);
    open_with("small", 0, &fresh);
    check(relinked.decoded == 300 && relinked.cached == 2 && same_result(&fresh.ds, &relinked.ds, why, sizeof why),
          "scale_cache_changed_frame_rescans_its_sequence", "decoded %d (want 300), cached %d (want 2); %s",
          relinked.decoded, relinked.cached, why);
    /* a damaged entry is a miss, never a wrong result */
    char dir[256];
    snprintf(dir, sizeof dir, "%s", cache);
    int damaged_files = 0;
    DIR *d = opendir(dir);
    for (struct dirent *e; d && (e = readdir(d));) {
        if (!strstr(e->d_name, ".scan")) continue;
        char p[512];
        snprintf(p, sizeof p, "%s/%s", dir, e->d_name);
        int fd = open(p, O_RDWR);
        struct stat st;
        if (fd >= 0 && fstat(fd, &st) == 0 && st.st_size > 40) {
            unsigned char c;
            if (pread(fd, &c, 1, st.st_size - 12) == 1) {
                c ^= 0x40;
                damaged_files += pwrite(fd, &c, 1, st.st_size - 12) == 1;
            }
        }
        if (fd >= 0) close(fd);
    }
    if (d) closedir(d);
    open_with("small", 2, &damaged);
    check(damaged_files >= 3 && damaged.cached == 0 && damaged.decoded == 1200 &&
          same_result(&fresh.ds, &damaged.ds, why, sizeof why),
          "scale_cache_damaged_entry_is_a_miss", "%d entries damaged; cached %d, decoded %d; %s", damaged_files,
          damaged.cached, damaged.decoded, why);
    opened *all[] = {&plain, &cold, &warm, &relinked, &fresh, &damaged};
    for (int i = 0; i < 6; i++) nj_dataset_free(&all[i]->ds);
}

/* Entries unused for 30 days and day-old temporaries go when an entry is
 * written and the last sweep ("pruned") is a day old; recent ones stay. */
static void scan_cache_pruning(void)
{
    const char *names[4] = {"0000000000000001.scan", "0000000000000002.scan", "x.scan.AbCdEf.tmp", "pruned"};
    const long age_days[4] = {31, 29, 2, 2};
    char p[4][300];
    for (int i = 0; i < 4; i++) {
        snprintf(p[i], sizeof p[i], "%s/%s", cache, names[i]);
        e2e_write(p[i], "x");
        struct timespec t[2];
        clock_gettime(CLOCK_REALTIME, &t[0]);
        t[0].tv_sec -= age_days[i] * 86400L;
        t[1] = t[0];
        utimensat(AT_FDCWD, p[i], t, 0);
    }
    opened o;
    open_with("small", 1, &o);   /* writes 3 entries */
    nj_dataset_free(&o.ds);
    struct stat st;
    int gone31 = stat(p[0], &st) != 0, kept29 = stat(p[1], &st) == 0, gone_tmp = stat(p[2], &st) != 0;
    int swept = stat(p[3], &st) == 0 && time(NULL) - st.st_mtime < 3600;
    check(gone31 && kept29 && gone_tmp && swept, "scale_cache_prunes_old_entries",
          "31-day entry %s, 29-day entry %s, 2-day temporary %s, sweep stamp %s", gone31 ? "removed" : "KEPT",
          kept29 ? "kept" : "REMOVED", gone_tmp ? "removed" : "KEPT", swept ? "renewed" : "NOT RENEWED");
}

/* Runs `train` with stdout+stderr in LOG; *maxrss_kb gets its peak RSS. */
static int run_train(const char *data, const char *out, const char *log, long *maxrss_kb)
{
    char cmd[2048], cfg[256];
    snprintf(cfg, sizeof cfg, "%s/config.json", top);
    snprintf(cmd, sizeof cmd, "exec %s train --config %s --data %s/%s.json --out %s/%s --steps 1 > %s/%s 2>&1",
             e2e_bin(), cfg, top, data, top, out, top, log);
    fflush(stdout);
    pid_t pid = fork();
    if (pid == 0) {
        execl("/bin/sh", "sh", "-c", cmd, (char *)NULL);
        _exit(127);
    }
    int st = 0;
    struct rusage ru;
    memset(&ru, 0, sizeof ru);
    if (pid < 0 || wait4(pid, &st, 0, &ru) < 0) return -1;
    *maxrss_kb = ru.ru_maxrss;
    return WIFEXITED(st) ? WEXITSTATUS(st) : 128;
}

/* "N images decoded" and "M of K sequences" of the run's "data check:" line. */
static int data_check_line(const char *log, long *decoded, int *cached)
{
    char path[256];
    snprintf(path, sizeof path, "%s/%s", top, log);
    char *text = e2e_slurp(path, NULL), *at = text ? strstr(text, "data check: ") : NULL;
    long frames = -1;
    int nseq = -1;
    *decoded = -1;
    *cached = -1;
    if (at) sscanf(at, "data check: %ld frames, %ld images decoded, %d of %d", &frames, decoded, cached, &nseq);
    free(text);
    return at ? 0 : -1;
}

/* LIST.json: sequences first..first+n-1 of the train split. */
static void write_list(const char *name, int first, int n)
{
    char path[256];
    snprintf(path, sizeof path, "%s/%s.json", top, name);
    FILE *f = fopen(path, "w");
    if (!f) return;
    fputs("{ \"sequences\": [\n", f);
    for (int s = first; s < first + n; s++)
        fprintf(f, "%s{ \"name\": \"s%d\", \"images\": \"seq-%04d/cam0\", \"camera\": {\"fx\": 40, \"fy\": 40, "
                   "\"cx\": 23.5, \"cy\": 15.5}, \"split\": \"train\" }\n", s > first ? "," : "", s, s);
    fputs("] }\n", f);
    fclose(f);
}

/* Bytes of peak RSS per extra frame between a run on `big` and one on `small` frames. */
static double per_frame(long rss_big, long rss_small, long big, long small)
{
    return (double)(rss_big - rss_small) * 1024.0 / (double)(big - small);
}

static void train_starts(void)
{
    /* "big": sequences 10..29 (20 x 1000 frames); "one": sequence 40 alone */
    for (int s = 0; s < NSEQ; s++) make_sequence(s + 10, SEQ_FRAMES, 0);
    make_sequence(40, SEQ_FRAMES, 0);
    write_list("big", 10, NSEQ);
    write_list("one", 40, 1);
    enum { ONE_COLD, BIG_COLD, BIG_WARM, ONE_WARM, NRUNS };
    const char *data[NRUNS] = {"one", "big", "big", "one"};
    const char *logs[NRUNS] = {"one_cold.log", "big_cold.log", "big_warm.log", "one_warm.log"};
    const char *outs[NRUNS] = {"run_one_cold", "run_big_cold", "run_big_warm", "run_one_warm"};
    long rss[NRUNS], decoded[NRUNS];
    int cached[NRUNS], rc[NRUNS];
    for (int i = 0; i < NRUNS; i++) {
        rc[i] = run_train(data[i], outs[i], logs[i], &rss[i]);
        if (data_check_line(logs[i], &decoded[i], &cached[i])) decoded[i] = -2;
    }
    long total = (long)NSEQ * SEQ_FRAMES;
    check(rc[BIG_COLD] == 0 && decoded[BIG_COLD] == total && cached[BIG_COLD] == 0,
          "scale_train_first_start_decodes_every_frame", "exit %d, decoded %ld of %ld, %d sequences cached (log %s/%s)",
          rc[BIG_COLD], decoded[BIG_COLD], total, cached[BIG_COLD], top, logs[BIG_COLD]);
    check(rc[BIG_WARM] == 0 && decoded[BIG_WARM] == 0 && cached[BIG_WARM] == NSEQ,
          "scale_train_next_start_decodes_nothing", "exit %d, decoded %ld, %d of %d sequences cached (log %s/%s)",
          rc[BIG_WARM], decoded[BIG_WARM], cached[BIG_WARM], NSEQ, top, logs[BIG_WARM]);
    double cold = per_frame(rss[BIG_COLD], rss[ONE_COLD], total, SEQ_FRAMES);
    double warm = per_frame(rss[BIG_WARM], rss[ONE_WARM], total, SEQ_FRAMES);
    if (UNDER_ASAN) {
        printf("# AddressSanitizer build: %.0f / %.0f bytes per extra frame, bound not applied\n", cold, warm);
        cold = warm = 0;
    }
    checkv(rc[ONE_COLD] == 0 && decoded[ONE_COLD] == SEQ_FRAMES && cold < MEM_BOUND_BYTES_PER_FRAME,
           "scale_train_memory_per_frame_first_start",
           "peak RSS %ld kB at %ld frames, %ld kB at %d frames, both decoding every frame: %.0f bytes per extra "
           "frame (bound %.0f)", rss[BIG_COLD], total, rss[ONE_COLD], SEQ_FRAMES, cold, MEM_BOUND_BYTES_PER_FRAME);
    checkv(rc[ONE_WARM] == 0 && decoded[ONE_WARM] == 0 && warm < MEM_BOUND_BYTES_PER_FRAME,
           "scale_train_memory_per_frame_cached_start",
           "peak RSS %ld kB at %ld frames, %ld kB at %d frames, both from the scan cache: %.0f bytes per extra "
           "frame (bound %.0f)", rss[BIG_WARM], total, rss[ONE_WARM], SEQ_FRAMES, warm, MEM_BOUND_BYTES_PER_FRAME);
}

int main(void)
{
    if (!e2e_have_binary()) {
        check(0, "scale_binary", "%s missing: build ./nightjar first", e2e_bin());
        return test_exit();
    }
    if (tdu_tmpdir(top, sizeof top)) return 1;
    snprintf(real, sizeof real, "%s/real", top);
    snprintf(cache, sizeof cache, "%s/xdg/nightjar/scan", top);
    mkdir(real, 0755);
    char xdg[128];
    snprintf(xdg, sizeof xdg, "%s/xdg", top);
    setenv("XDG_CACHE_HOME", xdg, 1);   /* for the train runs: their default folder is `cache` */
    for (int k = 0; k < NREAL; k++) write_real(k);
    char cfg[256];
    snprintf(cfg, sizeof cfg, "%s/config.json", top);
    e2e_write(cfg, CONFIG);
    scan_cache_equivalence();
    scan_cache_pruning();
    train_starts();
    if (!getenv("NJ_KEEP")) tdu_rmtree(top);
    return test_exit();
}

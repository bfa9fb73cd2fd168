/* tests/test_frame_store.c — the frame store (data/framestore.h).
 *  - batches read through a store are bit-identical to decoded ones, with
 *    1, 2 and 3 workers, and a loader resumed at step s with the store
 *    repeats step s of one without it;
 *  - the size is printed before anything is written (the message callback
 *    looks for the store and its temporary file), and it is the file's size;
 *  - a second open uses the file as it is ("checked"); build = 0 without a
 *    store refuses, naming it;
 *  - a source frame rewritten (new pixels, mtime moved) → rebuilt, the
 *    message names the source, the other frames are copied, and the store
 *    then holds the new pixels; a source only touched (same bytes, new
 *    mtime) → rebuilt too; another camera block → rebuilt;
 *  - a truncated store, a damaged frame, a damaged index and a header
 *    claiming 2^24 frames are detected (one line naming the store) and
 *    rebuilt; without building, a damaged store is refused;
 *  - a frame damaged while the store is in use: the read fails naming the
 *    store, and so does the loader's step;
 *  - a build that fails (an unreadable source) leaves neither a store nor a
 *    temporary file, and names the source; an interrupted build's old
 *    temporary file is removed. */
#define _GNU_SOURCE
#include "data/dataset.h"
#include "data/framestore.h"
#include "data/image.h"
#include "data/loader.h"
#include "data/loader_item.h"
#include "data/synth.h"
#include "tests/check.h"
#include "tests/test_data_util.h"
#include <dirent.h>
#include <fcntl.h>
#include <sys/stat.h>
#include <sys/time.h>
#include <time.h>

#define SW 96
#define SH 72
#define TW 64
#define TH 48

static char dir[64], json[320], store_dir[256];

static int open_dataset(const char *path, nj_dataset *ds, nj_sample **samples, int *n)
{
    nj_data_options o;
    nj_data_options_default(&o);
    o.dup_threshold = 0;
    nj_problems pr;
    nj_problems_init(&pr);
    int bad = nj_dataset_open(path, &o, ds, &pr);
    if (bad) nj_problems_print(&pr, stdout);
    nj_problems_free(&pr);
    *n = bad ? 0 : nj_dataset_samples(ds, NJ_SPLIT_TRAIN, &o, samples);
    return bad || *n <= 0 ? -1 : 0;
}

/* ---- what the store says, and whether its file exists at that moment ---- */

typedef struct said {
    char text[8192];
    int files_when_sizing;   /* store files (final or temporary) present when the size was said; -1: not said */
} said;

static int store_files(void)
{
    DIR *d = opendir(store_dir);
    int n = 0;
    for (struct dirent *e; d && (e = readdir(d));) n += !strncmp(e->d_name, "frames-", 7);
    if (d) closedir(d);
    return n;
}

static ssize_t said_write(void *cookie, const char *buf, size_t size)
{
    said *s = cookie;
    size_t len = strlen(s->text);
    snprintf(s->text + len, sizeof s->text - len, "%.*s", (int)size, buf);
    if (strstr(s->text, "writing") && s->files_when_sizing < 0) s->files_when_sizing = store_files();
    return (ssize_t)size;
}

static nj_framestore *open_store(const nj_dataset *ds, const nj_sample *s, int n, int build, said *out,
                                 char *err, size_t errlen)
{
    memset(out, 0, sizeof *out);
    out->files_when_sizing = -1;
    FILE *f = fopencookie(out, "w", (cookie_io_functions_t){.write = said_write});
    setvbuf(f, NULL, _IONBF, 0);
    nj_framestore_config c = {.width = TW, .height = TH, .dir = store_dir, .threads = 2, .build = build, .say = f};
    nj_framestore *fs = nj_framestore_open(ds, s, n, &c, err, errlen);
    fclose(f);
    return fs;
}

/* ---- batches ---------------------------------------------------------------- */

static size_t batch_floats(const nj_batch *b) { return (size_t)b->n * 3 * b->w * b->h; }

static int same_batch(const nj_batch *a, const nj_batch *b)
{
    size_t n = batch_floats(a);
    return a->n == b->n && a->step == b->step && !memcmp(a->sample, b->sample, sizeof(int) * a->n) &&
           !memcmp(a->flipped, b->flipped, sizeof(int) * a->n) && !memcmp(a->target, b->target, n * 4) &&
           !memcmp(a->sources, b->sources, n * a->nsrc * 4) && !memcmp(a->partner, b->partner, n * 4) &&
           !memcmp(a->target_in, b->target_in, n * 4) && !memcmp(a->sources_in, b->sources_in, n * a->nsrc * 4) &&
           !memcmp(a->partner_in, b->partner_in, n * 4) && !memcmp(a->camera, b->camera, sizeof(nj_camera) * a->n) &&
           !memcmp(a->stereo_tx, b->stereo_tx, sizeof(float) * a->n) &&
           !memcmp(a->has_partner, b->has_partner, sizeof(int) * a->n);
}

/* Copies of `steps` batches from a loader (workers, start step, store). */
static nj_batch *take(const nj_dataset *ds, const nj_sample *s, int n, int workers, long start, int steps,
                      const nj_framestore *fs)
{
    nj_loader_config c;
    char err[512];
    nj_loader_config_default(&c);
    c.width = TW;
    c.height = TH;
    c.batch = 3;
    c.seed = 21;
    c.workers = workers;
    c.start_step = start;
    c.store = fs;
    nj_loader *L = nj_loader_create(ds, s, n, &c, err, sizeof err);
    nj_batch *out = calloc((size_t)steps, sizeof(nj_batch));
    for (int i = 0; L && i < steps; i++) {
        const nj_batch *b = nj_loader_next(L, err, sizeof err);
        if (!b) { printf("note: %s\n", err); continue; }
        nj_batch_alloc(&out[i], b->n, b->h, b->w, b->nsrc, b->stereo, 1, 0, 0);
        size_t f = batch_floats(b) * 4;
        out[i].step = b->step;
        memcpy(out[i].target, b->target, f);
        memcpy(out[i].sources, b->sources, f * b->nsrc);
        memcpy(out[i].partner, b->partner, f);
        memcpy(out[i].target_in, b->target_in, f);
        memcpy(out[i].sources_in, b->sources_in, f * b->nsrc);
        memcpy(out[i].partner_in, b->partner_in, f);
        memcpy(out[i].camera, b->camera, sizeof(nj_camera) * b->n);
        memcpy(out[i].stereo_tx, b->stereo_tx, sizeof(float) * b->n);
        memcpy(out[i].has_partner, b->has_partner, sizeof(int) * b->n);
        memcpy(out[i].flipped, b->flipped, sizeof(int) * b->n);
        memcpy(out[i].sample, b->sample, sizeof(int) * b->n);
    }
    nj_loader_destroy(L);
    return out;
}

static void drop(nj_batch *b, int steps)
{
    for (int i = 0; i < steps; i++) nj_batch_free(&b[i]);
    free(b);
}

static void test_batches(const nj_dataset *ds, const nj_sample *s, int n, const nj_framestore *fs)
{
    enum { STEPS = 8 };
    nj_batch *ref = take(ds, s, n, 1, 0, STEPS, NULL);
    int same[4] = {1, 1, 1, 1};
    for (int w = 1; w <= 3; w++) {
        nj_batch *b = take(ds, s, n, w, 0, STEPS, fs);
        for (int i = 0; i < STEPS; i++) same[w] &= same_batch(&ref[i], &b[i]);
        drop(b, STEPS);
    }
    nj_batch *r = take(ds, s, n, 2, 5, 3, fs);
    int resumed = 1;
    for (int i = 0; i < 3; i++) resumed &= same_batch(&ref[5 + i], &r[i]);
    check(same[1] && same[2] && same[3], "store_batches_bit_identical_1_2_3_workers",
          "with the store vs decoding: 1 worker %s, 2 %s, 3 %s", same[1] ? "same" : "DIFFERENT",
          same[2] ? "same" : "DIFFERENT", same[3] ? "same" : "DIFFERENT");
    check(resumed, "store_resume_repeats_steps", "steps 5-7 of a loader started at 5 with the store differ");
    drop(ref, STEPS);
    drop(r, 3);
}

/* ---- files ------------------------------------------------------------------- */

static long file_size(const char *p)
{
    struct stat st;
    return stat(p, &st) == 0 ? (long)st.st_size : -1;
}

static void poke(const char *path, long off)
{
    int fd = open(path, O_RDWR);
    unsigned char c = 0;
    if (fd >= 0 && pread(fd, &c, 1, off) == 1) {
        c ^= 0x5A;
        if (pwrite(fd, &c, 1, off) != 1) printf("note: cannot write %s\n", path);
    }
    if (fd >= 0) close(fd);
}

/* Sets the mtime of p to `sec` seconds past the epoch (+ 123 ns). */
static void set_mtime(const char *p, long sec)
{
    struct timespec t[2] = {{sec, 123}, {sec, 123}};
    utimensat(AT_FDCWD, p, t, 0);
}

/* The frame of frame index f (left) read from a store, vs decoded now. */
static int store_frame_is_source(const nj_framestore *fs, const nj_dataset *ds, int f)
{
    size_t n = (size_t)3 * TW * TH;
    float *a = malloc(n * 4), *b = malloc(n * 4);
    int sw, sh, sw2, sh2, ok;
    char err[512];
    ok = a && b && nj_framestore_read(fs, 0, 0, f, a, &sw, &sh, err, sizeof err) == 0 &&
         nj_loader_frame(&ds->seq[0], 0, f, TW, TH, b, &sw2, &sh2, err, sizeof err) == 0 &&
         !memcmp(a, b, n * 4) && sw == sw2 && sh == sh2;
    free(a);
    free(b);
    return ok;
}

static void test_size_first_and_reuse(const nj_dataset *ds, const nj_sample *s, int n, char *path, size_t plen)
{
    said o;
    char err[512] = "", want[64];
    nj_framestore *fs = open_store(ds, s, n, 1, &o, err, sizeof err);
    if (!check(fs != NULL, "store_built", "%s", err)) return;
    snprintf(path, plen, "%s", nj_framestore_path(fs));
    long size = file_size(path);
    snprintf(want, sizeof want, "%.1f MB", size / 1e6);
    checkv(o.files_when_sizing == 0 && strstr(o.text, want) && (long)nj_framestore_bytes(fs) == size,
           "store_size_printed_before_writing", "store files when the size was said: %d; file %ld bytes; said: %s",
           o.files_when_sizing, size, o.text);
    test_batches(ds, s, n, fs);
    nj_framestore_close(fs);
    fs = open_store(ds, s, n, 0, &o, err, sizeof err);
    check(fs && strstr(o.text, "checked") && !strstr(o.text, "writing"), "store_reused_as_is", "%s%s", o.text, err);
    nj_framestore_close(fs);
}

static void test_source_changes(nj_dataset *ds, const nj_sample *s, int n, const char *path)
{
    said o;
    char err[512] = "", *src = nj_path_join(ds->seq[0].images, ds->seq[0].frames[3]);
    /* new pixels, and the time moved back by a day (a copy keeping another file's times) */
    nj_image im;
    nj_image_alloc(&im, SW, SH);
    for (int i = 0; i < 3 * SW * SH; i++) im.data[i] = (float)((i * 53) % 256) / 255.0f;
    struct stat st;
    stat(src, &st);
    nj_png_write_rgb(src, &im, err, sizeof err);
    nj_image_free(&im);
    set_mtime(src, (long)st.st_mtime - 86400);
    nj_framestore *fs = open_store(ds, s, n, 1, &o, err, sizeof err);
    int copied = 0, frames = fs ? nj_framestore_frames(fs) : 0;
    const char *w = strstr(o.text, "writing");
    if (w) sscanf(strstr(w, "MB (") ? strstr(w, "MB (") + 4 : w, "%d", &copied);
    check(fs && strstr(o.text, "1 source frame changed") && strstr(o.text, src) && strstr(o.text, path) &&
          copied == frames - 1 && store_frame_is_source(fs, ds, 3),
          "store_rebuilt_when_a_source_is_rewritten", "%s%s (copied %d of %d)", o.text, err, copied, frames);
    nj_framestore_close(fs);
    /* the same bytes, only a new mtime (touch): rebuilt all the same */
    set_mtime(src, (long)st.st_mtime + 5);
    fs = open_store(ds, s, n, 1, &o, err, sizeof err);
    check(fs && strstr(o.text, "changed") && strstr(o.text, src), "store_rebuilt_when_a_source_is_touched", "%s%s",
          o.text, err);
    nj_framestore_close(fs);
    free(src);
}

static void test_camera_change(nj_dataset *ds, const nj_sample *s, int n)
{
    said o;
    char err[512] = "", *old = ds->seq[0].camera_text;
    ds->seq[0].camera_text = strdup("{\"fx\":50,\"fy\":50,\"cx\":47.5,\"cy\":35.5,\"k1\":-0.1}");
    nj_framestore *fs = open_store(ds, s, n, 1, &o, err, sizeof err);
    check(fs && strstr(o.text, "other camera settings") && strstr(o.text, "0 from the old store"),
          "store_rebuilt_for_another_camera_block", "%s%s", o.text, err);
    nj_framestore_close(fs);
    free(ds->seq[0].camera_text);
    ds->seq[0].camera_text = old;
    nj_framestore_close(open_store(ds, s, n, 1, &o, err, sizeof err));   /* back to the original */
}

static void test_damage(const nj_dataset *ds, const nj_sample *s, int n, const char *path)
{
    said o;
    char err[512] = "";
    long size = file_size(path);
    if (truncate(path, size - 1000)) printf("note: truncate failed\n");
    nj_framestore *fs = open_store(ds, s, n, 1, &o, err, sizeof err);
    check(fs && strstr(o.text, path) && strstr(o.text, "truncated") && file_size(path) == size,
          "store_truncated_detected_and_rebuilt", "%s%s", o.text, err);
    nj_framestore_close(fs);
    poke(path, size - 5000);                       /* inside the last frame */
    fs = open_store(ds, s, n, 1, &o, err, sizeof err);
    check(fs && strstr(o.text, path) && strstr(o.text, "damaged: the checksum of the frame") &&
          store_frame_is_source(fs, ds, 3), "store_damaged_frame_detected_and_rebuilt", "%s%s", o.text, err);
    nj_framestore_close(fs);
    poke(path, 60);                                /* inside the index */
    fs = open_store(ds, s, n, 1, &o, err, sizeof err);
    check(fs && strstr(o.text, path) && strstr(o.text, "damaged: the checksum of its index"),
          "store_damaged_index_detected_and_rebuilt", "%s%s", o.text, err);
    nj_framestore_close(fs);
    poke(path, 27);                                /* the frame count's top byte: 2^24 frames or more */
    fs = open_store(ds, s, n, 1, &o, err, sizeof err);
    check(fs && strstr(o.text, path) && strstr(o.text, "its header is not one this program writes"),
          "store_absurd_header_detected_and_rebuilt", "%s%s", o.text, err);
    nj_framestore_close(fs);
    poke(path, 60);
    fs = open_store(ds, s, n, 0, &o, err, sizeof err);
    check(!fs && strstr(err, path) && strstr(err, "damaged"), "store_damaged_refused_without_build", "err '%s'", err);
    nj_framestore_close(fs);
    nj_framestore_close(open_store(ds, s, n, 1, &o, err, sizeof err));
}

/* Damage after the store was opened: the read (and the loader's step) fail
 * with a message naming the store. */
static void test_damage_in_use(const nj_dataset *ds, const nj_sample *s, int n, const char *path)
{
    said o;
    char err[512] = "";
    nj_framestore *fs = open_store(ds, s, n, 1, &o, err, sizeof err);
    if (!fs) { check(0, "store_damage_in_use", "%s", err); return; }
    long size = file_size(path), frame = 12L * TW * TH, frames = nj_framestore_frames(fs);
    for (long k = 0; k < frames; k++) poke(path, size - k * frame - 7);   /* every frame */
    float *buf = malloc((size_t)frame);
    int sw, sh, r = nj_framestore_read(fs, 0, 0, s[0].target, buf, &sw, &sh, err, sizeof err);
    free(buf);
    check(r == -1 && strstr(err, path) && strstr(err, "damaged"), "store_read_detects_damage_in_use", "r %d err '%s'",
          r, err);
    nj_loader_config c;
    nj_loader_config_default(&c);
    c.width = TW;
    c.height = TH;
    c.batch = 2;
    c.store = fs;
    nj_loader *L = nj_loader_create(ds, s, n, &c, err, sizeof err);
    err[0] = 0;
    const nj_batch *b = L ? nj_loader_next(L, err, sizeof err) : NULL;
    check(L && !b && strstr(err, path), "store_loader_step_fails_naming_the_store", "err '%s'", err);
    nj_loader_destroy(L);
    nj_framestore_close(fs);
    nj_framestore_close(open_store(ds, s, n, 1, &o, err, sizeof err));
}

static void test_failed_build(nj_dataset *ds, const nj_sample *s, int n, const char *path)
{
    said o;
    char err[512] = "", stale[1100];
    snprintf(stale, sizeof stale, "%s.AbCdEf.tmp", path);   /* an interrupted build's leftover, 2 minutes old */
    FILE *f = fopen(stale, "w");
    if (f) fclose(f);
    set_mtime(stale, (long)time(NULL) - 120);
    remove(path);
    char *src = nj_path_join(ds->seq[0].images, ds->seq[0].frames[s[0].target]);
    f = fopen(src, "w");                          /* not an image any more */
    if (f) { fputs("not a picture", f); fclose(f); }
    nj_framestore *fs = open_store(ds, s, n, 1, &o, err, sizeof err);
    check(!fs && strstr(err, src) && store_files() == 0, "store_failed_build_leaves_nothing",
          "err '%s', %d store files left", err, store_files());
    check(strstr(o.text, "removed 1 unfinished temporary file") != NULL, "store_stale_temporary_removed", "%s",
          o.text);
    nj_framestore_close(fs);
    fs = open_store(ds, s, n, 0, &o, err, sizeof err);
    check(!fs && strstr(err, path) && strstr(err, "no frame store"), "store_missing_refused_without_build",
          "err '%s'", err);
    nj_framestore_close(fs);
    free(src);
}

int main(void)
{
    if (tdu_tmpdir(dir, sizeof dir)) return 1;
    nj_synth_config sc;
    char out[256], err[512], path[1024] = "";
    nj_synth_config_default(&sc);
    snprintf(out, sizeof out, "%s/synth", dir);
    snprintf(store_dir, sizeof store_dir, "%s/store/sub", dir);
    sc.out = out;
    sc.frames = 8;
    sc.sequences = 1;
    sc.width = SW;
    sc.height = SH;
    sc.stereo = 1;
    sc.seed = 6;
    nj_dataset ds;
    nj_sample *s = NULL;
    int n = 0;
    snprintf(json, sizeof json, "%s/dataset.json", out);
    if (!check(!nj_synth_run(&sc, err, sizeof err) && !open_dataset(json, &ds, &s, &n), "store_dataset_ready", "%s",
               err))
        return test_exit();
    test_size_first_and_reuse(&ds, s, n, path, sizeof path);
    if (path[0]) {
        test_source_changes(&ds, s, n, path);
        test_camera_change(&ds, s, n);
        test_damage(&ds, s, n, path);
        test_damage_in_use(&ds, s, n, path);
        test_failed_build(&ds, s, n, path);
    }
    free(s);
    nj_dataset_free(&ds);
    tdu_rmtree(dir);
    return test_exit();
}

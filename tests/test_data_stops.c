/* tests/test_data_stops.c — the near-duplicate filter recognises stopped
 * stretches under sensor noise and exposure drift.
 *
 * Sets (rendered here with nj_synth_run, 160x120, 2 sequences x 120 frames):
 * `synth --fleet` (lead cart, halts, turns, exposure drift, sensor noise
 * 0.01, moving robot) and the clean default synth.  Ground truth from
 * poses.txt: a frame is stopped when its camera centre is within 1 mm of the
 * previous frame's (the trajectory holds the pose exactly while stopped),
 * moving when it moved 2 cm or more (0.2 m/s; cruising is 0.9–1.5 m/s), and
 * slow in between — braking into and starting from a stop, where a frame
 * moves 1–20 mm: against sensor noise of 0.01 that is not a measurable change
 * of the picture (the old rule skipped 8% of the clean set's frames that moved
 * more than 1 mm), so slow frames are reported, not checked.  Frame 0 counts
 * as none of these.  A skipped frame is one
 * nj_dataset_open leaves out of `kept` with the default options.
 * Targets: >= 90% of stopped frames skipped and < 2% of moving frames on the
 * fleet set; < 2% of moving frames on the clean set.  For comparison the old
 * rule (mean absolute difference of 64-pixel-wide grey thumbnails to the last
 * kept frame below 0.003) is applied here to the same frames and printed. */
#include "data/dataset.h"
#include "data/image.h"
#include "data/poses.h"
#include "data/synth.h"
#include "tests/check.h"
#include "tests/test_data_util.h"

static char dir[64];


typedef struct rates {
    int stopped, moving, slow, stopped_skipped, moving_skipped, slow_skipped;
    int old_stopped_skipped, old_moving_skipped, old_slow_skipped;
} rates;

/* Per frame: 1 stopped (camera centre moved less than 1 mm since the previous
 * frame), 0 moving (2 cm or more), 2 slow (between); -1 for frame 0.
 * Returns the frame count or -1. */
static int stopped_frames(const char *poses, int **out)
{
    double *p = NULL;
    char err[512];
    int n = nj_poses_read(poses, &p, err, sizeof err);
    if (n < 0) { printf("note: %s\n", err); return -1; }
    int *s = malloc((size_t)n * sizeof(int));
    for (int i = 0; i < n; i++) {
        if (i == 0) { s[i] = -1; continue; }
        double d = 0;
        for (int r = 0; r < 3; r++) {
            double e = p[12 * i + 4 * r + 3] - p[12 * (i - 1) + 4 * r + 3];
            d += e * e;
        }
        s[i] = sqrt(d) < 1e-3 ? 1 : sqrt(d) >= 0.02 ? 0 : 2;
    }
    free(p);
    *out = s;
    return n;
}

/* The old rule: 64-pixel-wide grey thumbnail, mean absolute difference to the
 * last kept frame below 0.003.  skip[i] = 1 when it skips frame i. */
static void old_rule(const nj_sequence *s, int *skip)
{
    int tw = s->width < 64 ? s->width : 64, th = (int)lround((double)s->height * tw / s->width);
    float *last = NULL;
    for (int i = 0; i < s->nframes; i++) {
        nj_image im;
        char err[512], *path = nj_path_join(s->images, s->frames[i]);
        skip[i] = 0;
        if (nj_image_load(path, &im, err, sizeof err)) { free(path); continue; }
        free(path);
        size_t n = (size_t)im.w * im.h;
        float *grey = malloc(n * sizeof(float)), *t = malloc((size_t)tw * th * sizeof(float));
        for (size_t k = 0; k < n; k++) grey[k] = (im.data[k] + im.data[n + k] + im.data[2 * n + k]) / 3.0f;
        nj_resize_plane(grey, im.w, im.h, t, tw, th);
        free(grey);
        nj_image_free(&im);
        double m = 0;
        for (int k = 0; last && k < tw * th; k++) m += fabs((double)t[k] - last[k]);
        if (last && m / (tw * th) < 0.003) { skip[i] = 1; free(t); continue; }
        free(last);
        last = t;
    }
    free(last);
}

static int measure(const char *json, rates *r)
{
    nj_data_options o;
    nj_data_options_default(&o);
    nj_dataset ds;
    nj_problems pr;
    nj_problems_init(&pr);
    memset(r, 0, sizeof *r);
    int bad = nj_dataset_open(json, &o, &ds, &pr);
    for (int q = 0; !bad && q < ds.nseq; q++) {
        nj_sequence *s = &ds.seq[q];
        int *stop = NULL, n = stopped_frames(s->poses, &stop);
        if (n < 1 || n != s->nframes) { bad = 1; free(stop); break; }
        int *skip = calloc((size_t)s->nframes, sizeof(int)), *old = calloc((size_t)s->nframes, sizeof(int));
        for (int i = 0; i < n; i++) skip[i] = 1;
        for (int k = 0; k < s->nkept; k++) skip[s->kept[k]] = 0;
        old_rule(s, old);
        for (int i = 1; i < n; i++) {
            if (stop[i] == 1) { r->stopped++; r->stopped_skipped += skip[i]; r->old_stopped_skipped += old[i]; }
            else if (stop[i] == 0) { r->moving++; r->moving_skipped += skip[i]; r->old_moving_skipped += old[i]; }
            else { r->slow++; r->slow_skipped += skip[i]; r->old_slow_skipped += old[i]; }
        }
        free(stop);
        free(skip);
        free(old);
    }
    nj_dataset_free(&ds);
    nj_problems_free(&pr);
    return bad ? -1 : 0;
}

static int render(const char *name, int fleet, char *json, size_t n)
{
    nj_synth_config c;
    nj_synth_config_default(&c);
    char out[128], err[512];
    snprintf(out, sizeof out, "%s/%s", dir, name);
    c.out = out;
    c.seed = 11;
    c.frames = 120;
    c.sequences = 2;
    c.width = 160;
    c.height = 120;
    if (fleet) {
        c.lead_cart = c.halts = c.turns = c.exposure_drift = c.moving = 1;
        c.sensor_noise = 0.01f;
    }
    snprintf(json, n, "%s/dataset.json", out);
    int rc = nj_synth_run(&c, err, sizeof err);
    if (rc) printf("note: %s\n", err);
    return rc;
}

static double pct(int a, int b) { return b ? 100.0 * a / b : 0; }

static void report(const char *set, const rates *r)
{
    printf("%s set: skipped by the rule / by the old rule: stopped %d, %d of %d; moving %d, %d of %d; "
           "slow %d, %d of %d\n", set, r->stopped_skipped, r->old_stopped_skipped, r->stopped, r->moving_skipped,
           r->old_moving_skipped, r->moving, r->slow_skipped, r->old_slow_skipped, r->slow);
}

int main(void)
{
    char json[256];
    rates r;
    if (!check(tdu_tmpdir(dir, sizeof dir) == 0, "stops_tmpdir", "mkdtemp failed")) return test_exit();
    if (check(render("fleet", 1, json, sizeof json) == 0 && measure(json, &r) == 0, "stops_fleet_set_ready",
              "render or open failed")) {
        report("fleet", &r);
        checkv(r.stopped >= 30 && pct(r.stopped_skipped, r.stopped) >= 90, "stops_fleet_stopped_skipped",
              "%d of %d stopped frames skipped (%.1f%%, want >= 90%%; old rule %.1f%%)", r.stopped_skipped, r.stopped,
              pct(r.stopped_skipped, r.stopped), pct(r.old_stopped_skipped, r.stopped));
        checkv(r.moving >= 100 && pct(r.moving_skipped, r.moving) < 2, "stops_fleet_moving_kept",
              "%d of %d moving frames skipped (%.1f%%, want < 2%%; old rule %.1f%%)", r.moving_skipped, r.moving,
              pct(r.moving_skipped, r.moving), pct(r.old_moving_skipped, r.moving));
    }
    if (check(render("clean", 0, json, sizeof json) == 0 && measure(json, &r) == 0, "stops_clean_set_ready",
              "render or open failed")) {
        report("clean", &r);
        checkv(r.moving >= 100 && pct(r.moving_skipped, r.moving) < 2, "stops_clean_moving_kept",
              "%d of %d moving frames skipped (%.1f%%, want < 2%%; old rule %.1f%%)", r.moving_skipped, r.moving,
              pct(r.moving_skipped, r.moving), pct(r.old_moving_skipped, r.moving));
        checkv(r.stopped == 0 || pct(r.stopped_skipped, r.stopped) >= 90, "stops_clean_stopped_skipped",
              "%d of %d stopped frames skipped (%.1f%%; old rule %.1f%%)", r.stopped_skipped, r.stopped,
              pct(r.stopped_skipped, r.stopped), pct(r.old_stopped_skipped, r.stopped));
    }
    tdu_rmtree(dir);
    return test_exit();
}

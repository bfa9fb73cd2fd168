/* data/validate.c — checking one sequence against the file system: folders,
 * frames (every image fully decoded, in parallel), sizes, stereo partners,
 * ground-truth files, the lead-vehicle mask folder, and near-duplicate frames
 * (a stopped machine).  Two shortcuts for large datasets: headers only
 * (`check-data --quick`: each image's header through nj_image_probe, the
 * checks nj_image_load makes before decoding, so header-level problems read
 * the same in both modes; no pixels, so no near-duplicate skipping), and the
 * scan cache (data/scancache.h: a clean full scan's result reused while the
 * frames' files are unchanged).
 *
 * Near-duplicates (a stopped machine), robust to sensor noise, exposure
 * changes and a small object moving in front of a stopped camera: each frame
 * is reduced to a grey thumbnail 32 pixels wide (area filter), and its noise
 * std σ is estimated on the full grey frame (median absolute finest diagonal
 * Haar coefficient / 0.6745, Donoho & Johnstone 1994; at most 0.02, since
 * texture finer than a pixel reads as noise too).  Against the last kept
 * frame b, frame a's change is
 *   q = the 90th percentile over thumbnail pixels of |a − g·b|, g = mean(a)/mean(b)
 *       (the gain difference divided out),
 *   n = 1.645·τ, τ² = (σa² + g²σb²)·(thumbnail pixels / frame pixels)
 *       (the 90th percentile of |noise| after the thumbnail's averaging),
 *   change = sqrt(max(0, q² − n²))   (grey levels, 0..1),
 * and a frame whose change is below the threshold is skipped.  The 90th
 * percentile ignores whatever moves in up to a tenth of the picture; on
 * noise-free frames the change is the 90th percentile of the difference.
 * Measured (tests/test_data_stops.c, 160x120, threshold 0.003): on
 * `synth --fleet` (noise 0.01, exposure drift, a robot crossing) 45 of 48
 * stopped frames are skipped and none of 171 moving 2 cm or more per frame;
 * the former rule (mean absolute difference of 64-pixel-wide thumbnails below
 * the threshold) skipped 10 of the 48.  Comparing with the last kept frame (not
 * the previous one) lets slow motion accumulate until it counts. */
#include "data/dataset.h"
#include "data/image.h"
#include "data/poses.h"
#include "data/scancache.h"
#include <errno.h>
#include <omp.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#define CHUNK 32        /* frames decoded in parallel at a time */
#define LISTED 5        /* problems listed per kind and sequence before a summary */
#define THUMB_W 32
#define DUP_QUANTILE 0.9  /* of the thumbnail's absolute differences */
#define DUP_Z 1.6449      /* that quantile of |N(0, 1)|: the noise's share of it */
#define NOISE_CAP 0.02f   /* largest grey noise std believed: fine texture reads as noise */

enum { K_IMAGE, K_SIZE, K_PARTNER, K_PARTNER_SIZE, K_DEPTH, NKINDS };

typedef struct scan {
    nj_sequence *s;
    nj_problems *pr;
    int headers;                /* headers only (nj_data_options.headers_only) */
    int tw, th;                 /* thumbnail size */
    float *last;                /* thumbnail of the last kept frame (NULL: none) */
    float last_noise;           /* its frame's noise estimate */
    int kinds[NKINDS];          /* problems of each kind seen */
} scan;

typedef struct frame_result {
    int w, h, ok;
    char err[512];
    int rw, rh, rok, rmissing;
    char rerr[512];
    float *thumb;
    float noise;                /* grey noise std of the full frame (noise_std) */
    int decoded;                /* images decoded for this frame (0..2) */
} frame_result;

/* A problem of a kind that may repeat over many frames: listed LISTED times. */
static void listed(scan *sc, int kind, const char *fmt, const char *a, const char *b)
{
    if (sc->kinds[kind]++ < LISTED) nj_problem(sc->pr, fmt, a, b);
}

static void summarise(scan *sc)
{
    static const char *what[NKINDS] = {"unreadable or corrupt images", "frames of another size",
                                       "missing stereo partners", "stereo partners of another size",
                                       "missing ground-truth depth files"};
    for (int k = 0; k < NKINDS; k++)
        if (sc->kinds[k] > LISTED)
            nj_problem(sc->pr, "%s: %d more %s in sequence \"%s\" (first %d listed above)",
                       k == K_DEPTH ? sc->s->depth_dir : sc->s->images, sc->kinds[k] - LISTED, what[k],
                       sc->s->name ? sc->s->name : "?", LISTED);
}

static int check_folder(const char *dir, const char *key, const nj_sequence *s, nj_problems *pr)
{
    struct stat st;
    const char *name = s->name ? s->name : "?";
    if (stat(dir, &st) != 0) {
        nj_problem(pr, "%s: missing folder (\"%s\" of sequence \"%s\")", dir, key, name);
        return -1;
    }
    if (!S_ISDIR(st.st_mode)) {
        nj_problem(pr, "%s: not a folder (\"%s\" of sequence \"%s\")", dir, key, name);
        return -1;
    }
    return 0;
}

static float noise_std(const float *g, int w, int h);

/* Grey thumbnail of a decoded frame (caller frees); *noise gets the grey
 * frame's noise std. */
static float *thumbnail(const nj_image *im, int tw, int th, float *noise)
{
    size_t n = (size_t)im->w * im->h;
    float *grey = malloc(n * sizeof(float)), *t = malloc((size_t)tw * th * sizeof(float));
    if (grey && t) {
        for (size_t i = 0; i < n; i++) grey[i] = (im->data[i] + im->data[n + i] + im->data[2 * n + i]) / 3.0f;
        *noise = noise_std(grey, im->w, im->h);
        if (nj_resize_plane(grey, im->w, im->h, t, tw, th)) { free(t); t = NULL; }
    } else {
        free(t);
        t = NULL;
    }
    free(grey);
    return t;
}

/* The k-th smallest of a[0..n) (a is reordered): the value a sort would put
 * at a[k], found in linear time (Hoare's selection with Wirth's partition).
 * It replaced qsort in the noise estimate and the change measure, which took
 * a third of the scan's time (perf, 1000 frames of 320x240: qsort 33 %,
 * PNG decoding 48 %); the value is the same, so are the decisions. */
static float select_kth(float *a, size_t n, size_t k)
{
    long l = 0, m = (long)n - 1, kk = (long)k;
    while (l < m) {
        float p = a[l], q = a[l + (m - l) / 2], r = a[m];
        float x = fmaxf(fminf(p, q), fminf(fmaxf(p, q), r));   /* median of three: a value in range */
        long i = l, j = m;
        do {
            while (a[i] < x) i++;
            while (x < a[j]) j--;
            if (i <= j) {
                float t = a[i];
                a[i++] = a[j];
                a[j--] = t;
            }
        } while (i <= j);
        if (j < kk) l = i;
        if (kk < i) m = j;
    }
    return a[kk];
}

/* Noise std of a grey image: the median absolute finest diagonal Haar
 * coefficient / 0.6745 (Donoho & Johnstone 1994), robust to edges and
 * texture, which occupy few 2×2 blocks of a rendered or camera frame. */
static float noise_std(const float *g, int w, int h)
{
    int bw = w / 2, bh = h / 2;
    if (bw < 1 || bh < 1) return 0;
    float *c = malloc((size_t)bw * bh * sizeof(float));
    if (!c) return 0;
    for (int y = 0; y < bh; y++)
        for (int x = 0; x < bw; x++) {
            const float *p = g + (size_t)2 * y * w + 2 * x;
            c[(size_t)y * bw + x] = fabsf(0.5f * (p[0] - p[1] - p[w] + p[w + 1]));
        }
    size_t n = (size_t)bw * bh;
    float med = select_kth(c, n, n / 2);
    free(c);
    return fminf(med / 0.6745f, NOISE_CAP);
}

/* Headers only: the size and format checks nj_image_load makes before it
 * decodes (nj_image_probe), so both modes word header-level problems alike. */
static void decode_left(const scan *sc, int i, frame_result *r)
{
    nj_image im;
    char *path = nj_path_join(sc->s->images, sc->s->frames[i]);
    if (sc->headers) {
        r->ok = path && !nj_image_probe(path, &r->w, &r->h, r->err, sizeof r->err);
        free(path);
        return;
    }
    r->decoded += path != NULL;
    r->ok = path && !nj_image_load(path, &im, r->err, sizeof r->err);
    if (r->ok) {
        r->w = im.w;
        r->h = im.h;
        if (im.w == sc->s->width && im.h == sc->s->height) r->thumb = thumbnail(&im, sc->tw, sc->th, &r->noise);
        nj_image_free(&im);
    }
    free(path);
}

static void decode_right(const scan *sc, int i, frame_result *r)
{
    nj_image im;
    struct stat st;
    char *path = nj_path_join(sc->s->right_images, sc->s->frames[i]);
    r->rmissing = !path || stat(path, &st) != 0;
    if (sc->headers) {
        r->rok = !r->rmissing && !nj_image_probe(path, &r->rw, &r->rh, r->rerr, sizeof r->rerr);
        free(path);
        return;
    }
    r->decoded += !r->rmissing;
    r->rok = !r->rmissing && !nj_image_load(path, &im, r->rerr, sizeof r->rerr);
    if (r->rok) {
        r->rw = im.w;
        r->rh = im.h;
        nj_image_free(&im);
    }
    free(path);
}

/* The near-duplicate measure (see the header comment): how much frame a
 * changed from the last kept frame b beyond their gain difference and their
 * noise, on thumbnails of n pixels made from frames of `pixels` pixels. */
static double change(const float *a, float na, const float *b, float nb, size_t n, double pixels)
{
    double ma = 0, mb = 0;
    for (size_t i = 0; i < n; i++) { ma += a[i]; mb += b[i]; }
    double g = mb > 1e-9 ? ma / mb : 1;
    float *d = malloc(n * sizeof(float));
    if (!d) return INFINITY;
    for (size_t i = 0; i < n; i++) d[i] = (float)fabs(a[i] - g * b[i]);
    double q = select_kth(d, n, (size_t)(DUP_QUANTILE * (double)(n - 1)));
    free(d);
    double tau = sqrt(((double)na * na + g * g * nb * nb) * (double)n / pixels), noise = DUP_Z * tau;
    return q > noise ? sqrt(q * q - noise * noise) : 0;
}

/* In frame order: problems, then the duplicate decision (headers only: every
 * frame of the sequence's size is kept). */
static void account(scan *sc, int i, frame_result *r, const nj_data_options *o, int stereo_ok)
{
    nj_sequence *s = sc->s;
    char *left = nj_path_join(s->images, s->frames[i]), *right = stereo_ok ? nj_path_join(s->right_images, s->frames[i]) : NULL;
    char why[96];
    int bad = !r->ok;
    if (!r->ok) listed(sc, K_IMAGE, "%s%s", r->err, "");
    else if (r->w != s->width || r->h != s->height) {
        snprintf(why, sizeof why, ": size %dx%d differs from the sequence's %dx%d", r->w, r->h, s->width, s->height);
        listed(sc, K_SIZE, "%s%s", left, why);
        bad = 1;
    }
    if (stereo_ok && r->rmissing) listed(sc, K_PARTNER, "%s: missing stereo partner of %s", right, left);
    else if (stereo_ok && !r->rok) listed(sc, K_IMAGE, "%s%s", r->rerr, "");
    else if (stereo_ok && r->ok && (r->rw != r->w || r->rh != r->h)) {
        snprintf(why, sizeof why, ": stereo partner is %dx%d but the left frame is %dx%d", r->rw, r->rh, r->w, r->h);
        listed(sc, K_PARTNER_SIZE, "%s%s", right, why);
    }
    size_t tn = (size_t)sc->tw * sc->th;
    s->decoded += r->decoded;
    if (!bad && sc->headers)
        s->kept[s->nkept++] = i;
    else if (!bad && r->thumb && sc->last && o->dup_threshold > 0 &&
        change(r->thumb, r->noise, sc->last, sc->last_noise, tn, (double)s->width * s->height) < o->dup_threshold)
        s->duplicates++;
    else if (!bad && r->thumb) {
        s->kept[s->nkept++] = i;
        free(sc->last);
        sc->last = r->thumb;
        sc->last_noise = r->noise;
        r->thumb = NULL;
    }
    free(r->thumb);
    free(left);
    free(right);
}

static void scan_chunk(scan *sc, int i0, int n, const nj_data_options *o, int stereo_ok)
{
    frame_result res[CHUNK];
    memset(res, 0, sizeof res);
    /* headers only: one thread; a header takes ~20 us, and OpenMP's threads
     * spinning between chunks took 78 % of --quick's CPU time (perf, 1000 frames) */
/* A full scan decodes on every processor the process may use, whatever the run's
     * --threads: it happens once before training (then the scan cache answers), and at
     * a first start on 100,000 new frames it is the whole wait (~2.6 CPU-ms a frame). */
#pragma omp parallel for schedule(dynamic) if (n > 1 && !sc->headers) num_threads(omp_get_num_procs())
    for (int j = 0; j < n; j++) {
        decode_left(sc, i0 + j, &res[j]);
        if (stereo_ok) decode_right(sc, i0 + j, &res[j]);
    }
    for (int j = 0; j < n; j++) account(sc, i0 + j, &res[j], o, stereo_ok);
}

/* The sequence's size: from the first frame whose header reads. */
static void sequence_size(nj_sequence *s)
{
    char err[512];
    s->width = s->height = 0;
    for (int i = 0; i < s->nframes && !s->width; i++) {
        char *p = nj_path_join(s->images, s->frames[i]);
        if (p && nj_image_probe(p, &s->width, &s->height, err, sizeof err)) s->width = s->height = 0;
        free(p);
    }
}

/* Returns the number of frame problems found (images, sizes, partners). */
static int scan_images(nj_sequence *s, const nj_data_options *o, int stereo_ok, nj_problems *pr)
{
    scan sc;
    memset(&sc, 0, sizeof sc);
    sc.s = s;
    sc.pr = pr;
    sc.headers = o->headers_only;
    sequence_size(s);
    sc.tw = s->width < THUMB_W ? s->width : THUMB_W;
    sc.th = s->width ? (int)lround((double)s->height * sc.tw / s->width) : 0;
    if (sc.th < 1) sc.th = 1;
    s->kept = malloc((size_t)s->nframes * sizeof(int));
    if (!s->kept) { nj_problem(pr, "%s: out of memory", s->images); return 1; }
    for (int i = 0; i < s->nframes; i += CHUNK)
        scan_chunk(&sc, i, s->nframes - i < CHUNK ? s->nframes - i : CHUNK, o, stereo_ok);
    free(sc.last);
    summarise(&sc);
    int found = 0;
    for (int k = 0; k < NKINDS; k++) found += sc.kinds[k];
    return found;
}

#define NOT_STORED "scan cache not written"

/* The first failed store of a dataset open is a warning; the others would
 * repeat it for every sequence. */
static void warn_not_stored(nj_problems *pr, const char *err)
{
    for (int i = 0; i < pr->nwarn; i++)
        if (!strncmp(pr->warn[i], NOT_STORED, strlen(NOT_STORED))) return;
    nj_warning(pr, NOT_STORED " (%s); the next run decodes the frames again", err);
}

/* The full scan, or its cached result (data/scancache.h).  A clean scan is
 * stored when a cache folder is given; a failed store is a warning. */
static void scan_or_cached(nj_sequence *s, const nj_data_options *o, int stereo_ok, nj_problems *pr)
{
    uint64_t id = 0;
    int cache = o->scan_cache && !o->headers_only && !nj_scan_identity(s, stereo_ok, &id);
    if (cache && o->scan_cache_read && nj_scan_cache_load(o->scan_cache, s, stereo_ok, o->dup_threshold, id)) {
        s->scan_cached = 1;
        return;
    }
    if (scan_images(s, o, stereo_ok, pr) || !cache) return;
    char err[600];
    if (nj_scan_cache_store(o->scan_cache, s, stereo_ok, o->dup_threshold, id, err, sizeof err))
        warn_not_stored(pr, err);
}

static void check_depth(nj_sequence *s, nj_problems *pr)
{
    if (!s->depth_dir || s->depth_format == NJ_DEPTH_NONE) return;
    if (check_folder(s->depth_dir, "depth.dir", s, pr)) return;
    scan sc;
    memset(&sc, 0, sizeof sc);
    sc.s = s;
    sc.pr = pr;
    for (int i = 0; i < s->nframes; i++) {
        char *p = nj_depth_path(s, i);
        struct stat st;
        if (p && (stat(p, &st) != 0 || !S_ISREG(st.st_mode)))
            listed(&sc, K_DEPTH, "%s: missing ground-truth depth for frame %s", p, s->frames[i]);
        free(p);
    }
    summarise(&sc);
}

static void check_poses(nj_sequence *s, nj_problems *pr)
{
    if (!s->poses) return;
    double *p = NULL;
    char err[512];
    int n = nj_poses_read(s->poses, &p, err, sizeof err);
    if (n < 0) nj_problem(pr, "%s", err);
    else if (n != s->nframes)
        nj_problem(pr, "%s: has %d poses for %d frames in %s", s->poses, n, s->nframes, s->images);
    free(p);
}

int nj_sequence_validate(nj_sequence *s, const nj_data_options *o, nj_problems *pr)
{
    int before = pr->n;
    if (!s->images || check_folder(s->images, "images", s, pr)) goto done;
    s->nframes = nj_list_frames(s->images, &s->frames);
    if (s->nframes < 0) {
        nj_problem(pr, "%s: cannot read folder: %s", s->images, strerror(errno));
        s->nframes = 0;
        goto done;
    }
    if (s->nframes == 0) {
        nj_problem(pr, "%s: no PNG or JPEG frames in the folder", s->images);
        goto done;
    }
    int stereo_ok = s->right_images && !check_folder(s->right_images, "right_images", s, pr);
    scan_or_cached(s, o, stereo_ok, pr);
    nj_sequence_lens_setup(s, pr);
    check_depth(s, pr);
    check_poses(s, pr);
    if (s->lead_mask_dir) check_folder(s->lead_mask_dir, "lead_mask", s, pr);
done:
    s->problems = pr->n - before;
    return s->problems;
}

/* tests/test_data_check.c — `nightjar check-data`, table-driven: a good
 * dataset passes (exit 0, report with counts and duplicates), and each broken
 * dataset — one per problem — exits non-zero with its one-line message naming
 * the file.  `check-data --quick` (headers only) reports exactly the same
 * problem lines on every one of them, and passes a PNG whose header and chunk
 * lengths are right but whose compressed pixels are garbage, which the full
 * check refuses: the quick mode never decodes pixels.  Outside source: the JSON syntax error position is compared with
 * Python's json module (tests/ref/data_json_pos.py). */
#include "train/cli/commands.h"
#include "data/image.h"
#include "data/npy.h"
#include "tests/check.h"
#include "tests/test_data_util.h"
#include <fcntl.h>
#include <sys/stat.h>

#define FW 48
#define FH 32

static char top[64];
static char script[512];

static const char *GOOD_JSON =
    "{\n"
    "  \"sequences\": [\n"
    "    {\n"
    "      \"name\": \"a\",\n"
    "      \"images\": \"a/cam0\",\n"
    "      \"camera\": {\"fx\": 40.0, \"fy\": 40.0, \"cx\": 23.5, \"cy\": 15.5},\n"
    "      \"right_images\": \"a/cam1\",\n"
    "      \"baseline\": 0.1,\n"
    "      \"depth\": {\"dir\": \"a/depth\", \"format\": \"npy\"},\n"
    "      \"poses\": \"a/poses.txt\",\n"
    "      \"split\": \"train\"\n"
    "    },\n"
    "    {\n"
    "      \"name\": \"b\",\n"
    "      \"images\": \"b/cam0\",\n"
    "      \"camera\": {\"fx\": 40.0, \"fy\": 40.0, \"cx\": 23.5, \"cy\": 15.5},\n"
    "      \"split\": \"val\"\n"
    "    }\n"
    "  ]\n"
    "}\n";

static void sh(const char *fmt, const char *a)
{
    char cmd[1024];
    snprintf(cmd, sizeof cmd, fmt, a, a, a);
    if (system(cmd) != 0) printf("note: command failed: %s\n", cmd);
}

/* Noise frame i: a crop shifted by i pixels of a fixed random texture. */
static void write_frame(const char *path, int i, int w, int h)
{
    nj_image im;
    nj_image_alloc(&im, w, h);
    for (int c = 0; c < 3; c++)
        for (int y = 0; y < h; y++)
            for (int x = 0; x < w; x++) {
                unsigned s = (unsigned)((x + i) * 7919 + y * 104729 + c * 1299709);
                /* 0x5bd1e995: MurmurHash2's multiplier (common practice); any odd
                 * constant would do: only a pixel pattern without duplicates is needed */
                s ^= s >> 13; s *= 0x5bd1e995u; s ^= s >> 15;
                im.data[(c * h + y) * w + x] = (float)(s % 256) / 255.0f;
            }
    char err[256];
    if (nj_png_write_rgb(path, &im, err, sizeof err)) printf("note: %s\n", err);
    nj_image_free(&im);
}

static void write_text(const char *path, const char *text)
{
    FILE *f = fopen(path, "w");
    if (f) { fputs(text, f); fclose(f); }
}

/* Sequence a: 6 stereo frames (frame 3 duplicates frame 2), npy depth and
 * poses; sequence b: 4 mono frames, val split. */
static void make_good(const char *d)
{
    char p[512], err[256];
    sh("mkdir -p '%s/a/cam0' '%s/a/cam1' '%s/a/depth'", d);
    snprintf(p, sizeof p, "%s/b/cam0", d);
    sh("mkdir -p '%s'", p);
    float depth[FW * FH];
    for (int i = 0; i < FW * FH; i++) depth[i] = 2.5f;
    int shape[2] = {FH, FW};
    char poses[2048] = "";
    for (int i = 0; i < 6; i++) {
        int content = i == 3 ? 2 : i;
        snprintf(p, sizeof p, "%s/a/cam0/%06d.png", d, i);
        write_frame(p, content, FW, FH);
        snprintf(p, sizeof p, "%s/a/cam1/%06d.png", d, i);
        write_frame(p, content + 3, FW, FH);
        snprintf(p, sizeof p, "%s/a/depth/%06d.npy", d, i);
        nj_npy_write(p, depth, shape, 2, err, sizeof err);
        strcat(poses, "1 0 0 0 0 1 0 0 0 0 1 0\n");
    }
    snprintf(p, sizeof p, "%s/a/poses.txt", d);
    write_text(p, poses);
    for (int i = 0; i < 4; i++) {
        snprintf(p, sizeof p, "%s/b/cam0/%06d.png", d, i);
        write_frame(p, 10 + i, FW, FH);
    }
}

static void write_json(const char *d, const char *find, const char *repl)
{
    char p[512], text[4096];
    snprintf(text, sizeof text, "%s", GOOD_JSON);
    char *at = find ? strstr(text, find) : NULL;
    if (find && !at) printf("note: '%s' not in the JSON\n", find);
    if (at) {
        char rest[4096];
        snprintf(rest, sizeof rest, "%s", at + strlen(find));
        snprintf(at, sizeof text - (size_t)(at - text), "%s%s", repl, rest);
    }
    snprintf(p, sizeof p, "%s/ds.json", d);
    write_text(p, text);
}

/* Runs check-data (with --quick when `quick`) with stdout captured into out. */
static int run_check_mode(const char *d, int quick, char *out, size_t n)
{
    char json[512], cap[512];
    snprintf(json, sizeof json, "%s/ds.json", d);
    snprintf(cap, sizeof cap, "%s/out.txt", d);
    fflush(stdout);
    int saved = dup(1), fd = open(cap, O_WRONLY | O_CREAT | O_TRUNC, 0644);
    dup2(fd, 1);
    close(fd);
    char *argv[4] = {"check-data", json, NULL, NULL};
    if (quick) argv[2] = "--quick";
    int rc = nj_check_data_main(quick ? 3 : 2, argv);
    fflush(stdout);
    dup2(saved, 1);
    close(saved);
    FILE *f = fopen(cap, "r");
    size_t k = f ? fread(out, 1, n - 1, f) : 0;
    out[k] = 0;
    if (f) fclose(f);
    return rc;
}

static int run_check(const char *d, char *out, size_t n) { return run_check_mode(d, 0, out, n); }

/* The "problem: " lines of a report, in order. */
static void problem_lines(const char *out, char *lines, size_t n)
{
    size_t k = 0;
    lines[0] = 0;
    for (const char *at = strstr(out, "problem: "); at && k + 1 < n; at = strstr(at + 1, "problem: ")) {
        if (at != out && at[-1] != '\n') continue;
        const char *e = strchr(at, '\n');
        size_t len = e ? (size_t)(e - at) + 1 : strlen(at);
        if (k + len >= n) len = n - k - 1;
        memcpy(lines + k, at, len);
        k += len;
        lines[k] = 0;
    }
}

/* Overwrites the data of every IDAT chunk of a PNG with a fixed garbage
 * pattern: header and chunk lengths stay valid, the zlib stream does not. */
static void garble_idat(const char *path)
{
    FILE *f = fopen(path, "r+b");
    unsigned char h[8];
    long at = 8;
    while (f && fseek(f, at, SEEK_SET) == 0 && fread(h, 1, 8, f) == 8) {
        long len = (long)h[0] << 24 | h[1] << 16 | h[2] << 8 | h[3];
        if (!memcmp(h + 4, "IDAT", 4)) {
            fseek(f, at + 8, SEEK_SET);
            for (long i = 0; i < len; i++) fputc((int)(0xA5 ^ (i * 37)), f);
        }
        if (!memcmp(h + 4, "IEND", 4)) break;
        at += 12 + len;
    }
    if (f) fclose(f);
}

/* ---- file mutations ---------------------------------------------------- */
static void rm_cam0(const char *d) { sh("mv '%s/a/cam0' '%s/a/cam0_gone'", d); }
static void empty_b(const char *d) { sh("rm -f '%s'/b/cam0/*.png", d); }
static void text_png(const char *d) { char p[512]; snprintf(p, sizeof p, "%s/a/cam0/000002.png", d); write_text(p, "not an image\n"); }
static void truncate_png(const char *d) { char p[512]; snprintf(p, sizeof p, "%s/a/cam0/000004.png", d); truncate(p, 200); }
static void small_frame(const char *d) { char p[512]; snprintf(p, sizeof p, "%s/a/cam0/000005.png", d); write_frame(p, 5, 40, FH); }
static void small_partner(const char *d) { char p[512]; snprintf(p, sizeof p, "%s/a/cam1/000001.png", d); write_frame(p, 1, FW, 30); }
static void no_partner(const char *d) { sh("rm '%s/a/cam1/000003.png'", d); }
static void no_depth_file(const char *d) { sh("rm '%s/a/depth/000001.npy'", d); }
static void no_depth_dir(const char *d) { sh("rm -r '%s/a/depth'", d); }
static void no_poses(const char *d) { sh("rm '%s/a/poses.txt'", d); }
static void short_poses(const char *d) { sh("sed -i '$d' '%s/a/poses.txt'", d); }
static void bad_pose_line(const char *d) { sh("sed -i '2s/ 0$//' '%s/a/poses.txt'", d); }
static void no_json(const char *d) { sh("rm '%s/ds.json'", d); }
static void gif_frame(const char *d) { char p[512]; snprintf(p, sizeof p, "%s/a/cam0/000001.png", d); write_text(p, "GIF89a\x10\x00\x10\x00\x80\x00\x00"); }
static void jpeg_frame(const char *d)
{
    /* a JPEG header (SOI, SOF0 of 40x32, 3 components) under a frame's name */
    static const unsigned char jpg[] = {0xFF, 0xD8, 0xFF, 0xC0, 0x00, 0x11, 0x08, 0x00, 0x20, 0x00, 0x28, 0x03,
                                        0x01, 0x22, 0x00, 0x02, 0x11, 0x01, 0x03, 0x11, 0x01, 0xFF, 0xD9};
    char p[512];
    snprintf(p, sizeof p, "%s/b/cam0/000002.jpg", d);
    FILE *f = fopen(p, "wb");
    if (f) { fwrite(jpg, 1, sizeof jpg, f); fclose(f); }
}

typedef struct bad_case {
    const char *name;
    const char *find, *repl;           /* JSON edit (NULL: none) */
    void (*files)(const char *dir);    /* file edit (NULL: none) */
    const char *expect, *expect_file;  /* message substring and the file it names */
} bad_case;

static const bad_case CASES[] = {
    {"missing_sequences_key", "\"sequences\"", "\"seqs\"", NULL, "missing key \"sequences\"", "ds.json"},
    {"missing_images_key", "\"images\": \"a/cam0\",", "", NULL, "missing key \"images\"", "ds.json"},
    {"missing_camera_fx", "\"fx\": 40.0, ", "", NULL, "missing key \"camera.fx\"", "ds.json"},
    {"missing_baseline", "\"baseline\": 0.1,", "", NULL, "missing key \"baseline\"", "ds.json"},
    {"missing_depth_format", ", \"format\": \"npy\"", "", NULL, "missing key \"depth.format\"", "ds.json"},
    {"zero_focal_length", "\"fx\": 40.0", "\"fx\": 0", NULL, "\"camera.fx\" must be positive", "ds.json"},
    {"negative_focal_length", "\"fy\": 40.0", "\"fy\": -5", NULL, "\"camera.fy\" must be positive", "ds.json"},
    {"negative_baseline", "\"baseline\": 0.1", "\"baseline\": -0.1", NULL, "\"baseline\" must be positive", "ds.json"},
    {"zero_baseline", "\"baseline\": 0.1", "\"baseline\": 0", NULL, "\"baseline\" must be positive", "ds.json"},
    {"fx_not_a_number", "\"fx\": 40.0", "\"fx\": \"forty\"", NULL, "\"camera.fx\" must be a number", "ds.json"},
    {"unknown_depth_format", "\"format\": \"npy\"", "\"format\": \"exr\"", NULL, "\"depth.format\" is \"exr\"", "ds.json"},
    {"unknown_split", "\"split\": \"val\"", "\"split\": \"dev\"", NULL, "\"split\" is \"dev\"", "ds.json"},
    {"duplicate_names", "\"name\": \"b\"", "\"name\": \"a\"", NULL, "share the name \"a\"", "ds.json"},
    {"no_training_sequence", "\"split\": \"train\"", "\"split\": \"val\"", NULL, "no usable training samples", "ds.json"},
    {"missing_dataset_file", NULL, NULL, no_json, "cannot open the dataset file", "ds.json"},
    {"missing_images_folder", NULL, NULL, rm_cam0, "missing folder", "a/cam0"},
    {"empty_images_folder", NULL, NULL, empty_b, "no PNG or JPEG frames", "b/cam0"},
    {"unreadable_image", NULL, NULL, text_png, "unreadable image", "a/cam0/000002.png"},
    {"corrupt_image", NULL, NULL, truncate_png, "corrupt image", "a/cam0/000004.png"},
    {"size_mismatch_in_sequence", NULL, NULL, small_frame, "size 40x32 differs from the sequence's 48x32", "a/cam0/000005.png"},
    {"size_mismatch_with_partner", NULL, NULL, small_partner, "stereo partner is 48x30", "a/cam1/000001.png"},
    {"missing_stereo_partner", NULL, NULL, no_partner, "missing stereo partner", "a/cam1/000003.png"},
    {"missing_depth_file", NULL, NULL, no_depth_file, "missing ground-truth depth", "a/depth/000001.npy"},
    {"missing_depth_folder", NULL, NULL, no_depth_dir, "missing folder", "a/depth"},
    {"missing_poses_file", NULL, NULL, no_poses, "cannot open the poses file", "a/poses.txt"},
    {"poses_count_mismatch", NULL, NULL, short_poses, "has 5 poses for 6 frames", "a/poses.txt"},
    {"malformed_pose_line", NULL, NULL, bad_pose_line, "expected 12 numbers", "a/poses.txt:2"},
    {"gif_named_png", NULL, NULL, gif_frame, "not a PNG or JPEG", "a/cam0/000001.png"},
    {"jpeg_of_another_size", NULL, NULL, jpeg_frame, "size 40x32 differs from the sequence's 48x32", "b/cam0/000002.jpg"},
};

/* The line of `out` containing `expect` also names the file. */
static int line_has(const char *out, const char *expect, const char *file)
{
    for (const char *at = strstr(out, expect); at; at = strstr(at + 1, expect)) {
        const char *b = at, *e = strchr(at, '\n');
        while (b > out && b[-1] != '\n') b--;
        size_t n = e ? (size_t)(e - b) : strlen(b);
        char line[1024];
        snprintf(line, sizeof line, "%.*s", (int)(n < 1023 ? n : 1023), b);
        if (strstr(line, file) && !strncmp(line, "problem: ", 9)) return 1;
    }
    return 0;
}

static void run_case(int i, const bad_case *c)
{
    char d[512], out[16384], label[128];
    snprintf(d, sizeof d, "%s/case%02d", top, i);
    make_good(d);
    write_json(d, c->find, c->repl);
    if (c->files) c->files(d);
    int rc = run_check(d, out, sizeof out);
    snprintf(label, sizeof label, "check_data_%s", c->name);
    check(rc != 0 && line_has(out, c->expect, c->expect_file), label,
          "exit %d, wanted a problem line with '%s' naming %s; output:\n%s", rc, c->expect, c->expect_file, out);
    /* every case is a header-level defect: --quick lists the same problems */
    char quick[16384], a[8192], b[8192];
    int qrc = run_check_mode(d, 1, quick, sizeof quick);
    problem_lines(out, a, sizeof a);
    problem_lines(quick, b, sizeof b);
    snprintf(label, sizeof label, "check_data_quick_same_problems_%s", c->name);
    check(qrc == rc && a[0] && !strcmp(a, b), label, "full exit %d, quick exit %d; full:\n%squick:\n%s", rc, qrc, a, b);
}

/* A PNG with a valid header and chunk lengths but garbage compressed pixels:
 * --quick passes it (it reads no pixels), the full check refuses it. */
static void test_quick_reads_no_pixels(void)
{
    char d[512], p[600], out[16384], quick[16384];
    snprintf(d, sizeof d, "%s/garbage", top);
    make_good(d);
    write_json(d, NULL, NULL);
    snprintf(p, sizeof p, "%s/a/cam0/000003.png", d);
    garble_idat(p);
    int rc = run_check(d, out, sizeof out), qrc = run_check_mode(d, 1, quick, sizeof quick);
    check(rc == 1 && line_has(out, "corrupt image", "a/cam0/000003.png"), "check_data_full_refuses_garbage_pixels",
          "exit %d; output:\n%s", rc, out);
    check(qrc == 0 && !strstr(quick, "problem:") && strstr(quick, "OK in the headers") &&
          strstr(quick, "usable samples at most 4  duplicates not checked"),
          "check_data_quick_passes_garbage_pixels", "exit %d; output:\n%s", qrc, quick);
}

static void test_good(void)
{
    char d[512], out[16384];
    snprintf(d, sizeof d, "%s/good", top);
    make_good(d);
    write_json(d, NULL, NULL);
    int rc = run_check(d, out, sizeof out);
    check(rc == 0 && strstr(out, "check-data: OK") && !strstr(out, "problem:"), "check_data_good_dataset_passes",
          "exit %d; output:\n%s", rc, out);
    check(strstr(out, "6 frames  48x32") && strstr(out, "usable samples 3  duplicates skipped 1") &&
          strstr(out, "4 frames  48x32") && strstr(out, "usable samples 2  duplicates skipped 0") &&
          strstr(out, "samples: train 3, val 2, test 0"),
          "check_data_report_counts", "output:\n%s", out);
}

/* Line and column of a syntax error agree with Python's json module. */
static void test_bad_json(void)
{
    char d[512], out[16384], args[1200], want[64];
    snprintf(d, sizeof d, "%s/badjson", top);
    make_good(d);
    write_json(d, "\"name\": \"a\",", "\"name\": \"a\"");
    int rc = run_check(d, out, sizeof out);
    snprintf(args, sizeof args, "'%s/ds.json' > '%s/pos.txt'", d, d);
    int line = 0, col = 0;
    if (tdu_python(script, args) == 0) {
        char p[1200];
        snprintf(p, sizeof p, "%s/pos.txt", d);
        FILE *f = fopen(p, "r");
        if (f && fscanf(f, "%d %d", &line, &col) != 2) line = 0;
        if (f) fclose(f);
    }
    snprintf(want, sizeof want, "ds.json:%d:%d: bad JSON", line, col);
    check(rc != 0 && line > 0 && line_has(out, want, "ds.json"), "check_data_bad_json_line_column_vs_python",
          "wanted '%s'; output:\n%s", want, out);
}

int main(int argc, char **argv)
{
    (void)argc;
    if (tdu_tmpdir(top, sizeof top)) return 1;
    tdu_ref_path(argv[0], "data_json_pos.py", script, sizeof script);
    /* check-data writes the scan cache: keep it inside the scratch folder */
    char cache[128];
    snprintf(cache, sizeof cache, "%s/xdg", top);
    setenv("XDG_CACHE_HOME", cache, 1);
    test_good();
    test_bad_json();
    test_quick_reads_no_pixels();
    for (int i = 0; i < (int)(sizeof CASES / sizeof CASES[0]); i++) run_case(i, &CASES[i]);
    if (!getenv("NJ_KEEP")) tdu_rmtree(top);
    return test_exit();
}

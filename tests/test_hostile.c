/* tests/test_hostile.c — files that lie: every reader of outside input
 * refuses them with one line naming the file, without crashing and without
 * allocating what the file claims.
 *
 * Each case runs the reader in a child process (a crash is a failure, not
 * the end of the test) with its address space limited to what it uses now
 * plus 256 MB (RLIMIT_AS; skipped under AddressSanitizer, which reserves
 * terabytes of address space): the claims below are gigabytes or more, so a
 * reader that allocated first would fail with "out of memory" — the checks
 * want the specific refusal instead.  Cases: NPY with huge, negative and
 * too many dimensions, truncated data, a header running past the end;
 * checkpoints with a huge, a "negative" (0xffffffff) dimension, 4 billion
 * tensors, a stored configuration describing a huge model, truncation; PNG
 * frames and PNG16 depth of 100000×100000 and of 16000×4000 in a few bytes;
 * PFM claiming 16384×16384 or a negative size; JSON nested 10000 deep as a
 * dataset, a configuration and a safetensors header; safetensors with a
 * huge header length, offsets outside the data, a huge shape, a negative
 * dimension, overlapping tensors.  Then through the command line:
 * check-data, eval --model, predict --input, train --config: exit status
 * != 0 and the message. */
#include "data/dataset.h"
#include "data/depthio.h"
#include "data/image.h"
#include "data/npy.h"
#include "tests/check.h"
#include "tests/e2e_support.h"
#include "tests/hostile_files.h"
#include "tests/torch_ref.h"
#include "train/loop/checkpoint.h"
#include "train/loop/checkpoint_format.h"
#include "train/loop/config.h"
#include "train/loop/safetensors.h"
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

static char dir[256];

/* ---- running one case ---------------------------------------------------- */

static void limit_memory(void)
{
    if (UNDER_ASAN) return;
    long pages = 0;
    FILE *f = fopen("/proc/self/statm", "r");
    if (f && fscanf(f, "%ld", &pages) != 1) pages = 0;
    if (f) fclose(f);
    rlim_t now = (rlim_t)pages * (rlim_t)sysconf(_SC_PAGESIZE);
    struct rlimit r = {now + (256u << 20), now + (256u << 20)};
    setrlimit(RLIMIT_AS, &r);
}

/* Runs fn on path in a child; the child sends back the message. */
static int run_child(hf_reader fn, const char *path, char *msg, size_t len, int *signaled)
{
    int fd[2];
    if (pipe(fd)) return -1;
    pid_t pid = fork();
    if (pid == 0) {
        close(fd[0]);
        limit_memory();
        char err[1024] = "";
        int rc = fn(path, err, sizeof err);
        if (write(fd[1], err, strlen(err)) < 0) _exit(3);
        _exit(rc ? 1 : 0);
    }
    close(fd[1]);
    size_t n = 0;
    ssize_t k;
    while (n + 1 < len && (k = read(fd[0], msg + n, len - 1 - n)) > 0) n += (size_t)k;
    msg[n] = 0;
    close(fd[0]);
    int st = 0;
    waitpid(pid, &st, 0);
    *signaled = WIFSIGNALED(st);
    return WIFEXITED(st) ? WEXITSTATUS(st) : -1;
}

static void refused(const char *name, hf_reader fn, const char *path, const char *want)
{
    char msg[1200];
    int sig = 0, rc = run_child(fn, path, msg, sizeof msg, &sig);
    check(rc == 1 && strstr(msg, path) && strstr(msg, want) && !strchr(msg, '\n'), name,
          "%s (exit %d): \"%s\"; wanted one line naming %s with \"%s\"", sig ? "crashed" : "not refused", rc,
          msg, path, want);
}

static const char *file(const char *name)
{
    static char p[8][512];
    static int k;
    k = (k + 1) % 8;
    snprintf(p[k], sizeof p[k], "%s/%s", dir, name);
    return p[k];
}

/* ---- cases --------------------------------------------------------------- */

static void npy_cases(void)
{
    const char *p = file("huge.npy");
    hf_npy(p, "{'descr': '<f4', 'fortran_order': False, 'shape': (40000, 40000), }", 16);
    refused("hostile npy: 40000x40000 claimed, 16 data bytes", hf_read_npy, p, "truncated");
    p = file("huge2.npy");
    hf_npy(p, "{'descr': '<f8', 'fortran_order': False, 'shape': (100000, 100000, 100000), }", 16);
    refused("hostile npy: 10^15 elements claimed", hf_read_npy, p, "2^31");
    p = file("neg.npy");
    hf_npy(p, "{'descr': '<f4', 'fortran_order': False, 'shape': (-1, 3), }", 12);
    refused("hostile npy: negative dimension", hf_read_npy, p, "negative dimension");
    p = file("rank.npy");
    hf_npy(p, "{'descr': '<f4', 'fortran_order': False, 'shape': (1, 1, 1, 1, 1, 1), }", 4);
    refused("hostile npy: rank 6", hf_read_npy, p, "more than 4 dimensions");
    p = file("trunc.npy");
    hf_npy(p, "{'descr': '<f4', 'fortran_order': False, 'shape': (2, 3), }", 20);
    refused("hostile npy: truncated data", hf_read_npy, p, "truncated");
    p = file("hlen.npy");
    hf_write(p, "\x93NUMPY\x02\x00\xff\xff\x0f\x00{", 13);
    refused("hostile npy: header length past the end", hf_read_npy, p, "header length");
}

static void ckpt_case(const uint8_t *good, size_t len, const char *name, const char *fname, size_t at,
                      uint32_t value, const char *want)
{
    uint8_t *b = malloc(len);
    memcpy(b, good, len);
    nj_le_put32(b + at, value);
    hf_ckpt_fix_crc(b, len);
    const char *p = file(fname);
    hf_write(p, b, len);
    free(b);
    refused(name, hf_read_checkpoint, p, want);
}

/* The checkpoint with its configuration replaced by `cfg` (CRC fixed). */
static void ckpt_config_case(const uint8_t *good, size_t len, const char *cfg, const char *want)
{
    uint32_t c = nj_le_get32(good + 8), n = (uint32_t)strlen(cfg);
    size_t rest = len - 12 - c, out = 12 + n + rest;
    uint8_t *b = malloc(out);
    memcpy(b, good, 8);
    nj_le_put32(b + 8, n);
    memcpy(b + 12, cfg, n);
    memcpy(b + 12 + n, good + 12 + c, rest);
    hf_ckpt_fix_crc(b, out);
    const char *p = file("hugemodel.ckpt");
    hf_write(p, b, out);
    free(b);
    refused("hostile checkpoint: stored config describes a huge model (width 8, 6 stages)", hf_read_checkpoint, p, want);
}

static void checkpoint_cases(void)
{
    uint8_t *good = NULL;
    size_t len = 0;
    if (!check(hf_tiny_checkpoint(file("tiny.ckpt"), &good, &len) == 0, "hostile: tiny checkpoint written", "%s",
               file("tiny.ckpt")))
        return;
    size_t table = hf_ckpt_table(good);
    size_t first_dim = table + 4 + 1 + good[table + 4] + 2;
    ckpt_case(good, len, "hostile checkpoint: dimension 2^31-1", "hugedim.ckpt", first_dim, 0x7fffffffu,
              "larger than the file");
    ckpt_case(good, len, "hostile checkpoint: dimension 0xffffffff (negative as int)", "negdim.ckpt", first_dim,
              0xffffffffu, "larger than the file");
    ckpt_case(good, len, "hostile checkpoint: 4 billion tensors", "count.ckpt", table, 0xffffffffu,
              "more than it can hold");
    ckpt_case(good, len, "hostile checkpoint: configuration length 4 GB", "cfglen.ckpt", 8, 0xfffffff0u,
              "configuration block claims");
    ckpt_config_case(good, len,
                     "{\"data\": {\"width\": 1024, \"height\": 512}, \"model\": {\"width\": 8, \"stages\": 6, "
                     "\"scales\": 4}}",
                     "stored architecture needs");
    const char *p = file("trunc.ckpt");
    hf_write(p, good, len / 2);
    refused("hostile checkpoint: truncated to half", hf_read_checkpoint, p, "checksum mismatch");
    free(good);
}

static void image_cases(void)
{
    const char *p = file("huge.png");
    hf_png_header(p, 100000, 100000, 8, 2);
    refused("hostile png frame: 100000x100000 header", hf_read_image, p, "refusing sides above");
    p = file("wide.png");
    hf_png_header(p, 16000, 4000, 8, 2);
    refused("hostile png frame: 16000x4000 in a 70-byte file", hf_read_image, p, "more than a");
    p = file("huge16.png");
    hf_png_header(p, 100000, 100000, 16, 0);
    refused("hostile png16 depth: 100000x100000 header", hf_read_png16, p, "refusing sides above");
    p = file("wide16.png");
    hf_png_header(p, 16000, 4000, 16, 0);
    refused("hostile png16 depth: 16000x4000 in a 70-byte file", hf_read_png16, p, "more than a");
    p = file("notpng.png");
    hf_write(p, "GIF89a\x01\x00\x01\x00\x00\x00\x00;", 14);
    refused("hostile frame: a GIF named .png is not decoded", hf_read_image, p, "not a PNG or JPEG");
    p = file("huge.pfm");
    hf_write(p, "Pf\n16384 16384\n-1.0\n\0\0\0\0", 24);
    refused("hostile pfm: 16384x16384 claimed", hf_read_pfm, p, "too large");
    p = file("big.pfm");
    hf_write(p, "Pf\n8000 8000\n-1.0\n\0\0\0\0", 22);
    refused("hostile pfm: 8000x8000 claimed, 4 data bytes", hf_read_pfm, p, "needs");
    p = file("neg.pfm");
    hf_write(p, "Pf\n-5 3\n-1.0\n", 13);
    refused("hostile pfm: negative size", hf_read_pfm, p, "not in 1..");
}

static void json_cases(void)
{
    char *t = hf_deep_json("{\"sequences\": ", 10000, "}");
    const char *p = file("deep-dataset.json");
    hf_write(p, t, strlen(t));
    free(t);
    refused("hostile dataset json: nested 10000 deep", hf_read_dataset, p, "nested more than");
    t = hf_deep_json("{\"run\": ", 10000, "}");
    p = file("deep-config.json");
    hf_write(p, t, strlen(t));
    free(t);
    refused("hostile config json: nested 10000 deep", hf_read_config, p, "nested more than");
    t = hf_deep_json("{\"a\": ", 10000, "}");
    p = file("deep.safetensors");
    hf_safetensors(p, t, UINT64_MAX, 0);
    free(t);
    refused("hostile safetensors: header nested 10000 deep", hf_read_safetensors, p, "nested more than");
}

static void safetensors_cases(void)
{
    const char *p = file("hlen.safetensors");
    hf_safetensors(p, "{}", (uint64_t)1 << 60, 0);
    refused("hostile safetensors: header length 2^60", hf_read_safetensors, p, "100 MB limit");
    p = file("hlen2.safetensors");
    hf_safetensors(p, "{}", 1000, 0);
    refused("hostile safetensors: header length past the end", hf_read_safetensors, p, "runs past the end");
    p = file("shape.safetensors");
    hf_safetensors(p, "{\"w\": {\"dtype\": \"F32\", \"shape\": [100000, 100000, 100000], \"data_offsets\": [0, 8]}}",
                   UINT64_MAX, 8);
    refused("hostile safetensors: 10^15 elements claimed", hf_read_safetensors, p, "more elements than the file holds");
    p = file("neg.safetensors");
    hf_safetensors(p, "{\"w\": {\"dtype\": \"F32\", \"shape\": [-2], \"data_offsets\": [0, 8]}}", UINT64_MAX, 8);
    refused("hostile safetensors: negative dimension", hf_read_safetensors, p, "not a non-negative integer");
    p = file("offs.safetensors");
    hf_safetensors(p, "{\"w\": {\"dtype\": \"F32\", \"shape\": [2], \"data_offsets\": [0, 800000000]}}", UINT64_MAX,
                   8);
    refused("hostile safetensors: offsets past the data", hf_read_safetensors, p, "outside");
    p = file("overlap.safetensors");
    hf_safetensors(p,
                   "{\"a\": {\"dtype\": \"F32\", \"shape\": [2], \"data_offsets\": [0, 8]},"
                   " \"b\": {\"dtype\": \"F32\", \"shape\": [1], \"data_offsets\": [4, 8]}}",
                   UINT64_MAX, 8);
    refused("hostile safetensors: overlapping tensors", hf_read_safetensors, p, "overlap");
}

/* The checkpoint reader bounds a file's claims with nj_model_count: it must
 * equal what nj_model_init builds, for every kind of architecture. */
static void model_count(void)
{
    int bad = 0, n = 0;
    char err[256];
    for (int stages = 1; stages <= 6; stages++)
        for (int norm = 0; norm < 3; norm++)
            for (int pose = 0; pose < 2; pose++) {
                nj_model_config c;
                nj_model_config_default(&c);
                c.stages = stages;
                c.scales = stages < 4 ? stages : 4;
                c.width = stages > 4 ? 0.25f : 0.5f;
                c.norm = norm == 0 ? NJ_NORM_BATCH : norm == 1 ? NJ_NORM_GROUP : NJ_NORM_NONE;
                c.pose = pose;
                c.pose_stages = stages;
                c.pose_width = 0.75f;
                nj_model m;
                if (nj_model_init(&m, &c, err, sizeof err)) { bad++; continue; }
                uint64_t p, b;
                nj_model_count(&c, &p, &b);
                bad += p != nj_params_numel(&m.params) || b != nj_params_numel(&m.buffers);
                n++;
                nj_model_free(&m);
            }
    check(bad == 0 && n == 36, "nj_model_count equals the built model's parameters and buffers (36 architectures)",
          "%d of %d differ", bad, n);
}

/* ---- through the command line ------------------------------------------- */

static void cli_case(const char *name, const char *args, const char *want_file, const char *want)
{
    char cmd[4096], log[512];
    snprintf(log, sizeof log, "%s/cli.txt", dir);
    snprintf(cmd, sizeof cmd, "%s %s", e2e_bin(), args);
    int rc = e2e_run(cmd, log);
    char *out = e2e_slurp(log, NULL);
    check(rc != 0 && rc < 128 && out && strstr(out, want_file) && strstr(out, want), name,
          "exit %d, output: %.600s", rc, out ? out : "(none)");
    free(out);
}

static void cli_cases(void)
{
    char args[2048], seq[512], ds[512];
    snprintf(seq, sizeof seq, "%s/ds/cam0", dir);
    snprintf(args, sizeof args, "mkdir -p '%s'", seq);
    if (system(args) != 0) return;
    for (int i = 0; i < 3; i++) {
        char p[600];
        snprintf(p, sizeof p, "%s/00000%d.png", seq, i);
        hf_png_header(p, 100000, 100000, 8, 2);
    }
    snprintf(ds, sizeof ds, "%s/ds/dataset.json", dir);
    e2e_write(ds, "{\"sequences\": [{\"name\": \"s\", \"images\": \"cam0\", \"split\": \"test\","
                  " \"camera\": {\"fx\": 100, \"fy\": 100, \"cx\": 50, \"cy\": 50}}]}\n");
    snprintf(args, sizeof args, "check-data %s", ds);
    cli_case("hostile cli: check-data refuses a 100000x100000 frame", args, "000000.png", "refusing sides above");
    snprintf(args, sizeof args, "check-data %s", file("deep-dataset.json"));
    cli_case("hostile cli: check-data refuses a dataset nested 10000 deep", args, "deep-dataset.json",
             "nested more than");
    snprintf(args, sizeof args, "train --config %s --steps 1", file("deep-config.json"));
    cli_case("hostile cli: train refuses a config nested 10000 deep", args, "deep-config.json", "nested more than");
    snprintf(args, sizeof args, "eval --model %s --data %s", file("hugedim.ckpt"), ds);
    cli_case("hostile cli: eval --model refuses a checkpoint claiming 2^31 elements", args, "hugedim.ckpt",
             "larger than the file");
    snprintf(args, sizeof args, "eval --model %s --data %s", file("hugemodel.ckpt"), ds);
    cli_case("hostile cli: eval --model refuses a checkpoint describing a huge model", args, "hugemodel.ckpt",
             "stored architecture needs");
    snprintf(args, sizeof args, "predict --model %s --input %s --out %s/pred", file("tiny.ckpt"), file("huge.png"),
             dir);
    cli_case("hostile cli: predict --input refuses a 100000x100000 PNG", args, "huge.png", "refusing sides above");
    snprintf(args, sizeof args, "predict --model %s --input tests/fuzz_corpus/fuzz_image/rgb_8x6.png --out %s/pred",
             file("trunc.ckpt"), dir);
    cli_case("hostile cli: predict --model refuses a truncated checkpoint", args, "trunc.ckpt", "checksum mismatch");
}

int main(void)
{
    if (ref_mkdtemp(dir, sizeof dir, "hostile")) { check(0, "temp folder", "%s", dir); return test_exit(); }
    if (UNDER_ASAN) printf("# AddressSanitizer build: no RLIMIT_AS (the refusals are still checked)\n");
    npy_cases();
    model_count();
    checkpoint_cases();
    image_cases();
    json_cases();
    safetensors_cases();
    if (check(e2e_have_binary(), "./nightjar is built", "run from the repository root after make")) cli_cases();
    if (!test_failures()) ref_rmtree(dir);
    else printf("# kept %s for inspection\n", dir);
    return test_exit();
}

/* train/bench/bench.h — the timed training step of `./nightjar bench` (issue #7):
 * nightjar's default depth + pose nets, the full view-synthesis loss (two
 * temporal sources, 4 scales, auto-mask, smoothness), gradient clipping and an
 * Adam update, on synthetic frames made here (no dataset needed).
 *
 * The frames are a smooth random texture (a few random sinusoids plus a little
 * noise) for the target and the same texture shifted by ±2 px for the two
 * sources, so the auto-mask and the warps see realistic, not white-noise,
 * content.  The same batch and initial weights are written out for the
 * PyTorch implementation of the recipe (bench/torch_recipe.py), which checks
 * that both compute the same thing (tests/test_bench_equiv.c). */
#ifndef NJ_BENCH_H
#define NJ_BENCH_H
#include "data/loader.h"
#include "nn/adam.h"
#include "train/loop/loop.h"

typedef struct nj_bench_batch {
    nj_batch b;              /* made by nj_batch_alloc (data/batch.h) */
} nj_bench_batch;

/* Fills bb with n items at h×w (seeded); 0, or -1 when out of memory. */
int nj_bench_batch_make(nj_bench_batch *bb, int n, int h, int w, unsigned seed);
void nj_bench_batch_free(nj_bench_batch *bb);

/* Conv FLOPs of one training step (forward of the depth net and both pose
 * pairs, plus the backward's dW and dX GEMMs; no dX for the first layers,
 * whose inputs need no gradient). */
double nj_bench_conv_flops(const nj_model *m, int h, int w, int batch, int pose_pairs);

/* The bench's training configuration: defaults with auto-masking on, video
 * only, size and batch as given. */
void nj_bench_config(nj_train_config *cfg, int w, int h, int batch);

/* Writes every parameter as DIR/<name>.npy (its nightjar shape), the batch as
 * DIR/target.npy, source0.npy, source1.npy (N×3×H×W) and DIR/cams.npy
 * (N×4: fx, fy, cx, cy).  Returns 0, or -1 with a message. */
int nj_bench_dump(const char *dir, const nj_model *m, const nj_bench_batch *bb,
                  char *err, size_t errlen);

/* What `./nightjar bench` times (bench_run.c; its command line is
 * train/cli/cmd_bench.c). */
typedef struct nj_bench_options {
    int w, h, batch;
    int threads;             /* 0 = all cores */
    int steps, warmup;       /* timed steps, untimed steps before them */
    int profile;             /* time shares of conv, warping, SSIM */
    int paced;               /* each step waits for a line on standard input */
} nj_bench_options;

/* 320x96, batch 4, all cores, 10 steps after 3 warm-up. */
void nj_bench_options_default(nj_bench_options *o);
/* Runs the steps and prints the figures on stdout.  Returns 0; -1 with a
 * one-line message; NJ_BENCH_BAD_SIZE (with a message) when the size does
 * not suit the nets. */
#define NJ_BENCH_BAD_SIZE -2
int nj_bench_run(const nj_bench_options *o, char *err, size_t errlen);

#endif

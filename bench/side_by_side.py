#!/usr/bin/env python3
"""bench/side_by_side.py — `make bench`'s nightjar-vs-PyTorch table (issue #7).

Runs, in one go, the training step of the same recipe (nightjar: ./nightjar bench --profile;
PyTorch: bench/torch_recipe.py --bench) at
  320x96 batch 4 with 1 and 2 threads, and 416x128 batch 4 with 2 threads.
Per configuration both implementations run as their own processes side by side (so peak RSS is
per implementation and configuration; 1-thread configurations pinned to one core for both, see
one_core), and the driver alternates them in short turns (--paced: each step waits for the
driver's go; which implementation takes the first turn alternates), so that a change of machine
speed between minutes hits both alike — on this shared 2-core VM the step time of either
implementation was seen to jump by ~30 % for minutes at a time.  A turn is BLOCK steps (default 5)
and its first step is not counted: it runs with the caches full of the other process's data, which
a training run never sees (stepping the two strictly in turn, --block 1, every step is such a step:
nightjar's 2-thread step then measured ~7 ms (5 %) slower, PyTorch's 0-7 % in two runs).  Median
ms/step over the counted steps (at least STEPS) after WARMUP warm-up steps, repeated for ROUNDS
rounds over all configurations; the table shows the median over rounds and each round's ratio.  nightjar's conv GFLOP/s (conv FLOPs over
the time spent inside conv forward + backward) is shown next to OpenBLAS sgemm GFLOP/s measured in
the same process, and the data loader's samples/s at each size (build/bench/bench_data WxH).

Usage: /usr/bin/python3 bench/side_by_side.py [--steps N] [--warmup N] [--rounds N] [--block K] [--no-loader]
Targets: step <= 0.45x PyTorch's, peak RSS <= 1/3, 1->2 threads >= 1.8x, conv >= 60% of sgemm.
"""
import argparse
import os
import re
import subprocess
import sys

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
CONFIGS = [("320x96", 4, 1), ("320x96", 4, 2), ("416x128", 4, 2)]


def fields(text):
    out = {}
    for k, v in re.findall(r"\b([a-z_]+)=([-0-9.]+)", text):
        out[k] = float(v)
    return out


def one_core(threads):
    """1-thread configurations run pinned to one core, both implementations, so neither can use
    the second core through helper threads (the CPU-time column is a mean over steps and the
    step time a median, so their ratio alone does not show whether one did)."""
    if threads != 1:
        return None
    core = min(os.sched_getaffinity(0))
    return lambda: os.sched_setaffinity(0, {core})


def run(cmd, env=None, threads=2):
    p = subprocess.run(cmd, cwd=ROOT, capture_output=True, text=True, env=env, preexec_fn=one_core(threads))
    if p.returncode != 0:
        sys.exit("side_by_side: %s failed (%d):\n%s%s" % (" ".join(cmd), p.returncode, p.stdout, p.stderr))
    return p.stdout


def start(cmd, env, threads):
    return subprocess.Popen(cmd + ["--paced"], cwd=ROOT, stdin=subprocess.PIPE, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, env=env, preexec_fn=one_core(threads))


def step(p, name):
    """Lets process p run one step; returns its step time (ms)."""
    p.stdin.write("\n")
    p.stdin.flush()
    for line in p.stdout:
        if line.startswith("step_ms="):
            return float(line.split("=")[1])
    sys.exit("side_by_side: %s ended before a step finished:\n%s" % (name, p.stderr.read()))


def finish(p, name):
    p.stdin.close()
    out, err = p.stdout.read(), p.stderr.read()
    if p.wait() != 0:
        sys.exit("side_by_side: %s failed (%d):\n%s%s" % (name, p.returncode, out, err))
    return out


def side_by_side(size, batch, threads, a):
    """Both implementations at one configuration, alternating in blocks of a.block steps (1: step
    by step).  Each block's first step follows the other implementation's steps, with caches
    holding the other's data; with blocks of 2 or more it is not counted, like a warm-up step, so
    the medians are of steady-state steps as in a training run.  The medians are the driver's
    own, over the counted steps, for both implementations."""
    k = a.block
    kept = k - 1 if k > 1 else 1
    blocks = -(-a.steps // kept)
    n = blocks * k  # steps after warm-up that each process takes
    common = ["--size", size, "--batch", str(batch), "--threads", str(threads),
              "--steps", str(n), "--warmup", str(a.warmup)]
    env = dict(os.environ, OMP_NUM_THREADS=str(threads), OPENBLAS_NUM_THREADS=str(threads),
               MKL_NUM_THREADS=str(threads))
    procs = [("nightjar", start(["./nightjar", "bench", "--profile"] + common, None, threads)),
             ("PyTorch", start(["/usr/bin/python3", "bench/torch_recipe.py", "--bench"] + common, env, threads))]
    times = {"nightjar": [], "PyTorch": []}
    for i in range(a.warmup):
        for name, p in (procs if i % 2 == 0 else procs[::-1]):
            step(p, name)
    for b in range(blocks):
        for name, p in (procs if b % 2 == 0 else procs[::-1]):
            for j in range(k):
                ms = step(p, name)
                if k == 1 or j > 0:
                    times[name].append(ms)
    # PyTorch ends first: nightjar's closing sgemm measurement waits for its input to end
    out = {name: finish(p, name) for name, p in procs[::-1]}
    prof = [l for l in out["nightjar"].splitlines() if l.startswith("profile")]
    nj, th = fields(out["nightjar"]), fields(out["PyTorch"])
    own = nj["ms_per_step"]  # nightjar's median over all its steps after warm-up
    nj["ms_per_step"], th["ms_per_step"] = median(times["nightjar"]), median(times["PyTorch"])
    nj["gflops"] *= own / nj["ms_per_step"]  # the step's FLOPs over the counted steps' median
    return nj, th, prof[0] if prof else ""


def cpu_cell(nj, th):
    """CPU time per step (all threads): steadier than wall time on a busy machine."""
    a, b = nj.get("cpu_ms_per_step"), th.get("cpu_ms_per_step")
    return "%.0f / %.0f (%.2f)" % (a, b, a / b) if a and b else "-"


def median(v):
    v = sorted(v)
    n = len(v)
    return v[n // 2] if n % 2 else 0.5 * (v[n // 2 - 1] + v[n // 2])


def merge(runs):
    """Per-field median over rounds (each run: dict of key=value figures)."""
    keys = set.intersection(*(set(r) for r in runs))
    return {k: median([r[k] for r in runs]) for k in keys}


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--steps", type=int, default=10)
    ap.add_argument("--warmup", type=int, default=3)
    ap.add_argument("--rounds", type=int, default=3,
                    help="rounds over all configurations; each figure is the median over rounds")
    ap.add_argument("--block", type=int, default=5,
                    help="steps per turn of each implementation; with 2 or more the first step of "
                         "each turn is not counted (1: step by step, all counted)")
    ap.add_argument("--no-loader", action="store_true")
    a = ap.parse_args()
    if a.block < 1 or a.steps < 1 or a.rounds < 1 or a.warmup < 0:
        sys.exit("side_by_side: --block, --steps and --rounds must be at least 1, --warmup at least 0")
    got = [([], [], []) for _ in CONFIGS]  # per config: nightjar runs, PyTorch runs, ratios
    for r in range(a.rounds):
        for k, (size, batch, threads) in enumerate(CONFIGS):
            nj, th, prof = side_by_side(size, batch, threads, a)
            got[k][0].append(nj)
            got[k][1].append(th)
            got[k][2].append(nj["ms_per_step"] / th["ms_per_step"])
            print("round %d %s b%d t%d: nightjar %.1f ms, PyTorch %.1f ms (ratio %.2f) | nightjar %s" %
                  (r + 1, size, batch, threads, nj["ms_per_step"], th["ms_per_step"], got[k][2][-1], prof),
                  flush=True)
    rows = [(size, batch, threads, merge(got[k][0]), merge(got[k][1]), got[k][2])
            for k, (size, batch, threads) in enumerate(CONFIGS)]
    loader = {}
    if not a.no_loader:
        sizes = sorted({c[0] for c in CONFIGS})
        out = run(["build/bench/bench_data"] + sizes)
        for size in sizes:
            m = re.search(r"loader_samples_per_s_%s=([0-9.]+)" % size, out)
            loader[size] = float(m.group(1)) if m else 0.0
    print()
    turns = ("alternating step by step" if a.block == 1 else
             "alternating in turns of %d steps, the first of each turn not counted" % a.block)
    print("Medians over %d rounds of %d steps (after %d warm-up) per implementation and configuration, %s." %
          (a.rounds, -(-a.steps // max(a.block - 1, 1)) * max(a.block - 1, 1), a.warmup, turns))
    print("| config | nightjar ms/step | PyTorch ms/step | ratio (target <= 0.45) | ratio per round | nightjar peak RSS MB | "
          "PyTorch peak RSS MB | ratio (target <= 0.33) | nightjar conv GFLOP/s | sgemm GFLOP/s | "
          "conv/sgemm (target >= 0.60) | step GFLOP/s | nightjar samples/s | loader samples/s (1 worker) | "
          "CPU ms/step nightjar / PyTorch (ratio) |")
    print("|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|")
    for size, batch, threads, nj, th, ratios in rows:
        print("| %s b%d %dT | %.1f | %.1f | %.2f | %s | %.0f | %.0f | %.2f | %.1f | %.1f | %.2f | %.1f | %.1f | %s | %s |" % (
            size, batch, threads, nj["ms_per_step"], th["ms_per_step"], nj["ms_per_step"] / th["ms_per_step"],
            " ".join("%.2f" % x for x in ratios),
            nj["peak_rss_mb"], th["peak_rss_mb"], nj["peak_rss_mb"] / th["peak_rss_mb"],
            nj.get("conv_gflops", 0), nj["sgemm_gflops"], nj.get("conv_gflops", 0) / nj["sgemm_gflops"],
            nj["gflops"], 1000.0 * batch / nj["ms_per_step"],
            "%.1f" % loader[size] if size in loader else "-", cpu_cell(nj, th)))
    one = [r for r in rows if r[0] == "320x96" and r[2] == 1][0]
    two = [r for r in rows if r[0] == "320x96" and r[2] == 2][0]
    print()
    print("1 -> 2 threads at 320x96 b4: nightjar %.2fx (target >= 1.8), PyTorch %.2fx" % (
        one[3]["ms_per_step"] / two[3]["ms_per_step"], one[4]["ms_per_step"] / two[4]["ms_per_step"]))
    print("(2-core machine; figures taken while other jobs share the cores are noisy — compare ratios, re-run quiet)")


if __name__ == "__main__":
    main()

#!/bin/sh
# tools/ladder.sh — the model ladder of README.md ("Picking a model for a board"):
# trains each rung (configs/ladder-*.json: the overnight recipe at another
# model.width / input size) for N minutes on a dataset, evaluates it on the
# test split, exports it as f32 and int8 C (int8 calibrated on 32 training
# frames), runs both exports on every test frame and scores them against the
# ground truth (the int8 export's AbsRel next to the f32 export's), times both on one core (fastest of 15 runs per round, the two
# alternating over 3 rounds, median), cross-compiles the f32 and int8 objects
# for aarch64 and prints one README table row per rung:
#
#   | rung | steps | AbsRel | δ<1.25 | export AbsRel f32 / int8 | f32 ms | int8 ms | weights f32 / int8 | scratch f32 / int8 | aarch64 .o f32 / int8 |
#
# usage: tools/ladder.sh [--minutes N] [--steps N] [--data DATASET.json] [--out DIR] [--threads N] [RUNG ...]
#   defaults: 30 minutes, the configs' data.dataset (the demo data), /tmp/nj_ladder,
#   all threads for training, every configs/ladder-*.json; --steps N trains
#   N steps instead of N minutes (a budget that does not depend on the
#   machine's load; the cosine schedule then spans exactly N); RUNG is a config
#   name such as ladder-w050.  Run from the repository root after `make nightjar`.
#   A rung already trained in DIR/RUNG/final.ckpt is not trained again (delete it to retrain).
set -eu
minutes=30
steps=0
data=""
out=/tmp/nj_ladder
threads=0
while [ $# -gt 0 ]; do
    case "$1" in
        --minutes) minutes=$2; shift 2 ;;
        --steps) steps=$2; shift 2 ;;
        --data) data=$2; shift 2 ;;
        --out) out=$2; shift 2 ;;
        --threads) threads=$2; shift 2 ;;
        -h|--help) sed -n '2,20p' "$0"; exit 0 ;;
        -*) echo "ladder.sh: unknown option $1" >&2; exit 2 ;;
        *) break ;;
    esac
done
rungs="$*"
[ -n "$rungs" ] || rungs=$(ls configs/ladder-*.json | sed 's|configs/||; s|\.json$||')
[ -x ./nightjar ] || { echo "ladder.sh: run from the repository root after 'make nightjar'" >&2; exit 1; }
py=/usr/bin/python3
mkdir -p "$out"
driver=tests/ref/export_driver.c

# value of a key in a JSON file
jget() { $py -c "import json,sys; print(json.load(open(sys.argv[1]))[sys.argv[2]])" "$1" "$2"; }
# .rodata bytes of an object
rodata() { size -A "$1" | awk '$1 ~ /^\.rodata/ {s += $2} END {print s + 0}'; }
# the header's scratch floats x 4
scratch() { grep -m1 '^#define .*SCRATCH_FLOATS' "$1" | awk '{sub("L", "", $3); print $3 * 4}'; }
kib() { awk -v b="$1" 'BEGIN {printf "%.0f KiB", b / 1024}'; }

for rung in $rungs; do
    cfg=configs/$rung.json
    [ -f "$cfg" ] || { echo "ladder.sh: no $cfg" >&2; exit 1; }
    d=$out/$rung
    mkdir -p "$d"
    if [ "$steps" -gt 0 ]; then
        set -- --config "$cfg" --out "$d/run" --steps "$steps" --minutes 0 --threads "$threads"
    else
        set -- --config "$cfg" --out "$d/run" --minutes "$minutes" --threads "$threads"
    fi
    [ -n "$data" ] && set -- "$@" --data "$data"
    if [ ! -f "$d/run/final.ckpt" ]; then
        ./nightjar train "$@" > "$d/train.log" 2>&1 || { echo "ladder.sh: $rung: training failed (see $d/train.log)" >&2; exit 1; }
    fi
    ds=${data:-$($py -c "import json,os,sys; c=json.load(open(sys.argv[1])); p=c['data']['dataset']; print(p if os.path.isabs(p) else os.path.normpath(os.path.join(os.path.dirname(sys.argv[1]), p)))" "$cfg")}
    ./nightjar eval --model "$d/run/final.ckpt" --data "$ds" --out "$d/eval.json" > "$d/eval.log" 2>&1
    absrel=$(jget "$d/eval.json" absrel)
    delta=$(jget "$d/eval.json" delta_1_25)
    w=$($py -c "import json,sys; c=json.load(open(sys.argv[1])); print(c['data']['width'], c['data']['height'])" "$cfg")
    W=${w% *}; H=${w#* }
    # every test frame at the rung's size as raw RGB, and its ground-truth depth
    # sampled at the model's pixel centres (nearest pixel, as eval carries depth)
    nframes=$($py - "$ds" "$W" "$H" "$d/frames.rgb" "$d/gt.npy" <<'EOF'
import json, os, sys, cv2, numpy as np
ds, w, h, out, gtout = sys.argv[1], int(sys.argv[2]), int(sys.argv[3]), sys.argv[4], sys.argv[5]
j = json.load(open(ds))
root = os.path.dirname(ds)
seq = next((s for s in j["sequences"] if s.get("split") == "test"), j["sequences"][0])
folder = os.path.join(root, seq["images"])
names = sorted(f for f in os.listdir(folder) if f.lower().endswith((".png", ".jpg", ".jpeg")))
ddir = os.path.join(root, seq["depth"]["dir"])
dnames = sorted(f for f in os.listdir(ddir) if f.endswith(".npy"))
gts = []
with open(out, "wb") as f:
    for name, dn in zip(names, dnames):
        im = cv2.imread(os.path.join(folder, name))
        f.write(cv2.resize(im, (w, h), interpolation=cv2.INTER_AREA)[:, :, ::-1].tobytes())
        g = np.load(os.path.join(ddir, dn)).astype(np.float32)
        ys = ((np.arange(h) + 0.5) * g.shape[0] / h).astype(int)
        xs = ((np.arange(w) + 0.5) * g.shape[1] / w).astype(int)
        gts.append(g[ys][:, xs])
np.save(gtout, np.stack(gts))
print(len(gts))
EOF
)
    head -c $((W * H * 3)) "$d/frames.rgb" > "$d/frame.rgb"
    for k in f32 int8; do
        mkdir -p "$d/$k"
        if [ $k = int8 ]; then
            ./nightjar export --model "$d/run/final.ckpt" --format c --weights int8 --calibrate "$ds" --calibrate-frames 32 \
                --out "$d/$k/nightjar_depth.c" > /dev/null
        else
            ./nightjar export --model "$d/run/final.ckpt" --format c --out "$d/$k/nightjar_depth.c" > /dev/null
        fi
        gcc -std=c99 -O3 -march=native -c "$d/$k/nightjar_depth.c" -o "$d/$k/nd.o"
        gcc -std=c99 -O3 -march=native -I"$d/$k" "$driver" "$d/$k/nd.o" -o "$d/$k/driver" -lm
        aarch64-linux-gnu-gcc -std=c99 -O3 -c "$d/$k/nightjar_depth.c" -o "$d/$k/arm.o"
    done
    # AbsRel of each export on the test frames: per-image median scaling,
    # ground truth in (1e-3, 80) m, prediction clamped there — the formula of
    # train/measure/metrics.h (Eigen et al. 2014; Zhou et al. 2017)
    for k in f32 int8; do
        "$d/$k/driver" "$d/frames.rgb" "$nframes" "$d/$k/depth.f32" > /dev/null
    done
    xabs=$($py - "$d/gt.npy" "$d/f32/depth.f32" "$d/int8/depth.f32" <<'EOF'
import sys, numpy as np
gt = np.load(sys.argv[1]); n, h, w = gt.shape
def absrel(path):
    p = np.fromfile(path, np.float32).reshape(n, h, w); r = []
    for g, q in zip(gt, p):
        m = (g > 1e-3) & (g < 80) & np.isfinite(g)
        s = np.median(g[m]) / np.median(q[m])
        r.append(np.mean(np.abs(g[m] - np.clip(q[m] * s, 1e-3, 80)) / g[m]))
    return np.mean(r)
a, b = absrel(sys.argv[2]), absrel(sys.argv[3])
print("%.4f / %.4f (%+.1f %%)" % (a, b, 100 * (b - a) / a))
EOF
)
    : > "$d/times.txt"
    for r in 1 2 3; do
        for k in f32 int8; do
            t=$("$d/$k/driver" "$d/frame.rgb" 1 "$d/$k/timed.f32" 15 | awk '/^min_seconds_per_frame/ {print $2 * 1000}')
            echo "$k $t" >> "$d/times.txt"
        done
    done
    med() { grep "^$1 " "$d/times.txt" | awk '{print $2}' | sort -g | sed -n 2p; }
    nsteps=$(grep '"type":"end"' "$d/run/log.jsonl" | tail -n 1 | sed 's/.*"step":\([0-9]*\).*/\1/')
    printf '| %s (width %s, %sx%s) | %s | %.3f | %.3f | %s | %.1f | %.1f | %s / %s | %s / %s | %s / %s |\n' \
        "$rung" "$($py -c "import json,sys; print(json.load(open(sys.argv[1]))['model']['width'])" "$cfg")" "$W" "$H" \
        "$nsteps" "$absrel" "$delta" "$xabs" "$(med f32)" "$(med int8)" \
        "$(kib "$(rodata "$d/f32/nd.o")")" "$(kib "$(rodata "$d/int8/nd.o")")" \
        "$(kib "$(scratch "$d/f32/nightjar_depth.h")")" "$(kib "$(scratch "$d/int8/nightjar_depth.h")")" \
        "$(kib "$(stat -c %s "$d/f32/arm.o")")" "$(kib "$(stat -c %s "$d/int8/arm.o")")"
done
echo "load average: $(cut -d' ' -f1-3 /proc/loadavg)"

#!/bin/sh
# tools/ladder.sh — the model ladder of README.md ("Picking a model for a board"):
# trains each rung (configs/ladder-*.json: the overnight recipe at another
# model.width / input size) for N minutes on a dataset, evaluates it on the
# test split, exports it as f32 and int8 C (int8 calibrated on 32 training
# frames), times both on one core (fastest of 15 runs per round, the two
# alternating over 3 rounds, median), cross-compiles the f32 and int8 objects
# for aarch64 and prints one README table row per rung:
#
#   | rung | AbsRel | δ<1.25 | f32 ms | int8 ms | weights f32 / int8 | scratch f32 / int8 | aarch64 .o f32 / int8 |
#
# usage: tools/ladder.sh [--minutes N] [--data DATASET.json] [--out DIR] [--threads N] [RUNG ...]
#   defaults: 30 minutes, the configs' data.dataset (the demo data), /tmp/nj_ladder,
#   all threads for training, every configs/ladder-*.json; RUNG is a config
#   name such as ladder-w050.  Run from the repository root after `make nightjar`.
#   A rung already trained in DIR/RUNG/final.ckpt is not trained again (delete it to retrain).
set -eu
minutes=30
data=""
out=/tmp/nj_ladder
threads=0
while [ $# -gt 0 ]; do
    case "$1" in
        --minutes) minutes=$2; shift 2 ;;
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
    set -- --config "$cfg" --out "$d/run" --minutes "$minutes" --threads "$threads"
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
    # one test frame at the rung's size as raw RGB
    $py - "$ds" "$W" "$H" "$d/frame.rgb" <<'EOF'
import json, os, sys, cv2
ds, w, h, out = sys.argv[1], int(sys.argv[2]), int(sys.argv[3]), sys.argv[4]
j = json.load(open(ds))
seq = next((s for s in j["sequences"] if s.get("split") == "test"), j["sequences"][0])
folder = os.path.join(os.path.dirname(ds), seq["images"])
name = sorted(f for f in os.listdir(folder) if f.lower().endswith((".png", ".jpg", ".jpeg")))[0]
im = cv2.resize(cv2.imread(os.path.join(folder, name)), (w, h), interpolation=cv2.INTER_AREA)
open(out, "wb").write(im[:, :, ::-1].tobytes())
EOF
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
    : > "$d/times.txt"
    for r in 1 2 3; do
        for k in f32 int8; do
            t=$("$d/$k/driver" "$d/frame.rgb" 1 "$d/$k/depth.f32" 15 | awk '/^min_seconds_per_frame/ {print $2 * 1000}')
            echo "$k $t" >> "$d/times.txt"
        done
    done
    med() { grep "^$1 " "$d/times.txt" | awk '{print $2}' | sort -g | sed -n 2p; }
    printf '| %s (width %s, %sx%s) | %.3f | %.3f | %.1f | %.1f | %s / %s | %s / %s | %s / %s |\n' \
        "$rung" "$($py -c "import json,sys; print(json.load(open(sys.argv[1]))['model']['width'])" "$cfg")" "$W" "$H" \
        "$absrel" "$delta" "$(med f32)" "$(med int8)" \
        "$(kib "$(rodata "$d/f32/nd.o")")" "$(kib "$(rodata "$d/int8/nd.o")")" \
        "$(kib "$(scratch "$d/f32/nightjar_depth.h")")" "$(kib "$(scratch "$d/int8/nightjar_depth.h")")" \
        "$(kib "$(stat -c %s "$d/f32/arm.o")")" "$(kib "$(stat -c %s "$d/int8/arm.o")")"
done
echo "load average: $(cut -d' ' -f1-3 /proc/loadavg)"

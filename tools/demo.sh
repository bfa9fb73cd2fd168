#!/bin/sh
# nightjar demo: the main job end to end on generated data.
#   1. render synthetic robot-yard sequences with exact ground truth
#   2. train the demo configuration (about 5 minutes on 2 cores)
#   3. evaluate on the held-out sequence against the two baselines
#   4. predict depth pictures and a point cloud for a few frames
#   5. export the model for a board: C source (f32 and int8), ONNX, safetensors
#   6. map the test sequence: depth and motion fused into one 3D model and its
#      top-down picture (beside the same map from the untrained network)
# Everything goes to demo-out/ (DEMO_OUT overrides); DEMO_MINUTES shortens or
# lengthens training.
set -eu
cd "$(dirname "$0")/.."
OUT=${DEMO_OUT:-demo-out}
MIN=${DEMO_MINUTES:-5}
NJ=./nightjar

echo "== 1/6 synthetic data -> $OUT/data"
if [ -f "$OUT/data/dataset.json" ]; then
  echo "   (already there; delete $OUT/data to render again)"
else
  $NJ synth --out "$OUT/data" --seed 7 --sequences 6 --frames 150
fi
$NJ check-data "$OUT/data/dataset.json" | tail -n 2

echo "== 2/6 training configs/demo.json for $MIN minutes -> $OUT/run"
rm -rf "$OUT/run"
$NJ train --config configs/demo.json --data "$OUT/data/dataset.json" --out "$OUT/run" --minutes "$MIN"

echo "== 3/6 evaluation on the test split"
$NJ eval --model "$OUT/run/final.ckpt" --data "$OUT/data/dataset.json" --split test --out "$OUT/metrics.json"

echo "== 4/6 prediction for a few test frames"
rm -rf "$OUT/frames" "$OUT/predict"
mkdir -p "$OUT/frames"
seq=$(ls "$OUT/data" | grep '^yard-' | tail -n 1)
for f in 000020 000060 000100; do cp "$OUT/data/$seq/cam0/$f.png" "$OUT/frames/"; done
# the camera of the test sequence, as written by synth (one "key": value per line)
cam() { grep -m1 "\"$1\"" "$OUT/data/dataset.json" | tr -dc '0-9.\n'; }
$NJ predict --model "$OUT/run/final.ckpt" --input "$OUT/frames" --out "$OUT/predict" --ply \
  --camera "$(cam fx),$(cam fy),$(cam cx),$(cam cy)"
echo "== 5/6 export for the board"
rm -rf "$OUT/export"
mkdir -p "$OUT/export"
$NJ export --model "$OUT/run/final.ckpt" --format c --out "$OUT/export/nightjar_depth.c"
$NJ export --model "$OUT/run/final.ckpt" --format c --weights int8 \
  --calibrate "$OUT/data/dataset.json" --out "$OUT/export/nightjar_depth_int8.c"
$NJ export --model "$OUT/run/final.ckpt" --format onnx --out "$OUT/export/nightjar_depth.onnx"
$NJ export --model "$OUT/run/final.ckpt" --format safetensors --out "$OUT/export/nightjar.safetensors"
echo "export sizes:"
for f in "$OUT"/export/*; do
  printf '  %-44s %10s bytes\n' "$f" "$(wc -c < "$f" | tr -d ' ')"
done


echo "== 6/6 map of the test sequence $seq (trained model, then the untrained network)"
rm -rf "$OUT/run/map" "$OUT/map-untrained"
$NJ map --model "$OUT/run/final.ckpt" --data "$OUT/data/dataset.json" --sequence "$seq" --out "$OUT/run/map"
$NJ map --model "$OUT/run/final.ckpt" --untrained --data "$OUT/data/dataset.json" --sequence "$seq" \
  --out "$OUT/map-untrained" | grep -v '^caution'
cp "$OUT/run/map/topdown.png" "$OUT/map.png"
$NJ report "$OUT/run" >/dev/null
# the maps' surfaces against the renderer's true yard (the synth options of step 1)
idx=$(echo "$seq" | tr -dc '0-9' | sed 's/^0*//')
for m in "$OUT/run/map" "$OUT/map-untrained"; do
  printf '  %-22s ' "$(basename "$m")"
  "${BENCH_MAP:-build/bench/bench_map}" --mesh "$m/mesh.ply" --seed 7 --frames 150 --sequences 6 --index "${idx:-0}" |
    sed 's/^surface distance/distance/'
  printf '  %-22s trajectory drift per 10 m of true path: %s\n' "" \
    "$(sed -n 's/.*"drift_per_10m":[[:space:]]*\([-0-9.eE+]*\).*/\1/p' "$m/map.json")"
done

echo
echo "Outputs:"
echo "  data           $OUT/data (dataset.json, frames, ground-truth depth and poses)"
echo "  training run   $OUT/run (final.ckpt, best.ckpt, log.jsonl)"
echo "  metrics        $OUT/metrics.json"
echo "  predictions    $OUT/predict (*.depth.npy, *.depth16.png, *.preview.png, *.points.ply)"
echo "  board export   $OUT/export (C source f32 and int8, ONNX, safetensors)"
echo "  map            $OUT/map.png (top-down picture), $OUT/run/map (mesh.ply, trajectory.ply, map.json);"
echo "                 $OUT/run/report.html shows the picture"
echo "The metric table above compares the model with a constant depth and the untrained network."
echo "Caution: learned monocular depth is not a certified safety sensor."

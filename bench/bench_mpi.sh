#!/bin/sh
# bench/bench_mpi.sh — `make bench-mpi`: data-parallel training on this
# machine with the MPI build (build/mpi/nightjar).  The demo recipe (default
# depth + pose nets, 160x96) with a global batch of 4, trained twice:
#   1 rank  x 2 threads, batch 4
#   2 ranks x 1 thread,  batch 2 each
# prints samples/s of each (from the run log's elapsed times, steps 4..N), the
# all-reduce time per step of the 2-rank run (from its end-of-run summary),
# and the projected scaling to 8 servers on 10 Gbit/s from the measured
# parameter count: a ring all-reduce moves about parameters x 4 bytes x 2 per
# step through every server's link.
set -u
cd "$(dirname "$0")/.."
BIN=build/mpi/nightjar
STEPS=${BENCH_MPI_STEPS:-14}
if ! command -v mpirun >/dev/null 2>&1; then
  echo "bench-mpi: skipped: mpirun not found (tools/deps.sh test installs libopenmpi-dev openmpi-bin)"
  exit 0
fi
[ -x "$BIN" ] || { echo "bench-mpi: $BIN is missing (make mpi-test-build)"; exit 1; }
ROOT=""
[ "$(id -u)" = "0" ] && ROOT="--allow-run-as-root"
dir=$(mktemp -d /tmp/nj_bench_mpi_XXXXXX)
trap 'rm -rf "$dir"' EXIT
./nightjar synth --out "$dir/data" --seed 3 --sequences 3 --frames 24 --size 160x96 >/dev/null || exit 1
for b in 4 2; do
  sed -e "s/\"batch\": 4/\"batch\": $b/" -e 's/"validate_every": 100/"validate_every": 0/' \
      -e 's/"log_every": 10/"log_every": 1/' -e 's/"checkpoint_minutes": 2/"checkpoint_minutes": 1000/' \
      configs/demo.json > "$dir/b$b.json"
done

# run NAME RANKS THREADS BATCH: trains STEPS steps, prints samples/s
run() {
  mpirun $ROOT --oversubscribe --bind-to none -np "$2" -x OMP_NUM_THREADS="$3" \
    "$BIN" train --config "$dir/b$4.json" --data "$dir/data/dataset.json" --out "$dir/$1" \
    --steps "$STEPS" --threads "$3" > "$dir/$1.txt" 2>&1 || { echo "bench-mpi: $1 failed:"; tail -5 "$dir/$1.txt"; exit 1; }
  python3 - "$dir/$1/log.jsonl" "$2" "$4" <<'PY'
import json, sys
steps = [json.loads(l) for l in open(sys.argv[1]) if '"type":"step"' in l]
a, b = steps[3], steps[-1]
print("%.2f" % ((b["step"] - a["step"]) * int(sys.argv[2]) * int(sys.argv[3]) / (b["elapsed_s"] - a["elapsed_s"])))
PY
}

echo "bench-mpi: demo recipe 160x96, global batch 4, $STEPS steps (samples/s over steps 4..$STEPS)"
one=$(run one 1 2 4) || exit 1
two=$(run two 2 1 2) || exit 1
params=$(sed -n 's/.*model: \([0-9]*\) parameters.*/\1/p' "$dir/one.txt")
summary=$(grep '^data-parallel:' "$dir/two.txt")
ar=$(echo "$summary" | sed -n 's/.*all-reduce \([0-9.]*\) ms\/step.*/\1/p')
sync=$(echo "$summary" | sed -n 's/.*loss sums \([0-9.]*\) ms\/step.*/\1/p')
calls=$(echo "$summary" | sed -n 's/.*(\([0-9]*\) calls\/step).*/\1/p')
printf '  %-26s %10s samples/s\n' "1 rank  x 2 threads" "$one" "2 ranks x 1 thread" "$two"
echo "  2 ranks: gradient all-reduce $ar ms/step ($params parameters); in-step sums (batch norm, loss)" \
     "$sync ms/step in $calls calls (both include waiting for the other rank)"
python3 - "$params" "$one" "$calls" <<'PY'
import sys
p, sps, calls = int(sys.argv[1]), float(sys.argv[2]), int(sys.argv[3])
vol = p * 4 * 2                      # bytes through each link per step (ring all-reduce)
t_comm = vol * 8 / 10e9              # 10 Gbit/s
t_sync = calls * 3 * 50e-6           # small sums/step, 3 rounds (log2 8) of ~50 us latency each
t_step = 4 / sps                     # one server: batch 4 per step at the rate measured above
eff = t_step / (t_step + t_comm + t_sync)
print("  8-server projection (10 Gbit/s): %d params x 4 B x 2 = %.1f MB/step -> %.1f ms; small sums ~%.1f ms;"
      % (p, vol / 1e6, t_comm * 1e3, t_sync * 1e3))
print("    step %.0f ms per server (batch 4, 2 threads, measured) -> efficiency %.3f, speed-up %.2fx on 8 servers"
      % (t_step * 1e3, eff, 8 * eff))
PY

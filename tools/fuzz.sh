#!/bin/sh
# Runs libFuzzer targets one after the other (called by `make fuzz`).
#   usage: tools/fuzz.sh BUILD_DIR SECONDS TARGET...
# Each target starts from its seeds in tests/fuzz_corpus/<target>/ plus the
# inputs it found in earlier runs (BUILD_DIR/corpus/<target>/, not in git),
# runs SECONDS seconds with a 2 GB memory limit and a 10 s per-input limit,
# and reports executions.  A crash, leak, sanitizer error, timeout or
# out-of-memory leaves its input in BUILD_DIR/crashes/ and fails the run:
# fix it, then add the input to tests/fuzz_regress/ (test_fuzz_regress).
set -u
dir=$1; secs=$2; shift 2
mkdir -p "$dir/crashes"
failed=0; total=0
for t in "$@"; do
  mkdir -p "$dir/corpus/$t"
  log="$dir/$t.log"
  "$dir/fuzzbin/$t" -max_total_time="$secs" -rss_limit_mb=2048 -timeout=10 -print_final_stats=1 \
      -artifact_prefix="$dir/crashes/$t-" "$dir/corpus/$t" "tests/fuzz_corpus/$t" >"$log" 2>&1
  rc=$?
  runs=$(sed -n 's/^stat::number_of_executed_units: *//p' "$log" | tail -1)
  time=$(sed -n 's/^Done [0-9]* runs in \([0-9]*\) second.*/\1/p' "$log" | tail -1)
  total=$((total + ${runs:-0}))
  if [ "$rc" -ne 0 ]; then
    failed=$((failed + 1))
    echo "$t: FAILED after ${runs:-?} runs (exit $rc); see $log and $dir/crashes/"
    grep -m3 -E 'ERROR|SUMMARY|==[0-9]+==' "$log"
  else
    echo "$t: ${runs:-?} runs in ${time:-?} s, corpus $(ls "$dir/corpus/$t" | wc -l) files, 0 crashes"
  fi
done
echo "fuzz: $# targets, $total runs, $failed failed"
[ "$failed" -eq 0 ]

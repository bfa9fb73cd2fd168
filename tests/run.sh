#!/bin/sh
# Runs every test program in DIR (default build/tests), echoing their output,
# and ends with the summary line "N passed, N failed, N skipped" (CI reads the
# "N passed, N failed" prefix).  A program that exits non-zero without
# printing a FAIL line counts as one failure.  A check that cannot run here
# prints "SKIP name: why"; the skipped ones are listed again after the summary
# so they cannot go unnoticed.
dir=${1:-build/tests}
pass=0; fail=0; skip=0; skipped=""
# the scan cache (data/scancache.h) of every run the tests start goes to a
# folder of the suite's own: test datasets live in temporary folders, and their
# entries would otherwise stay in the user's ~/.cache for 30 days
cache=$(mktemp -d /tmp/nj_test_cache_XXXXXX) && export XDG_CACHE_HOME="$cache"
trap 'rm -rf "$cache"' EXIT
for t in "$dir"/test_*; do
  [ -x "$t" ] || continue
  case "$t" in *.o|*.d) continue ;; esac
  echo "== $(basename "$t")"
  out=$("$t" 2>&1); rc=$?
  printf '%s\n' "$out"
  p=$(printf '%s\n' "$out" | grep -c '^PASS ')
  f=$(printf '%s\n' "$out" | grep -c '^FAIL ')
  s=$(printf '%s\n' "$out" | grep -c '^SKIP ')
  if [ "$s" -gt 0 ]; then
    skipped="$skipped$(printf '%s\n' "$out" | grep '^SKIP ' | sed "s/^/  $(basename "$t"): /")
"
  fi
  if [ "$rc" -ne 0 ] && [ "$f" -eq 0 ]; then
    echo "FAIL $(basename "$t"): exited with status $rc"
    f=1
  fi
  pass=$((pass + p)); fail=$((fail + f)); skip=$((skip + s))
done
echo "$pass passed, $fail failed, $skip skipped"
[ "$skip" -eq 0 ] || printf 'skipped:\n%s' "$skipped"
[ "$fail" -eq 0 ]

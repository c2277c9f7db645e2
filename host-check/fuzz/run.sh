#!/usr/bin/env bash
# Runs every fuzz target (or those named) for SECONDS each, one after the
# other, from the committed seeds (copied: the seeds stay as committed), and
# prints one line per target: executions, coverage, corpus, findings.
#   bash host-check/fuzz/run.sh 30              # the CI smoke
#   bash host-check/fuzz/run.sh 600 frames log  # ten minutes each of two
# Needs the nightly toolchain and cargo-fuzz (tests/setup.sh installs it).
# Exit status: non-zero when any target found a failure (its input is kept
# under host-check/fuzz/artifacts/<target>/ and its log under $OUT).
set -euo pipefail
cd "$(dirname "$0")"
secs=${1:?usage: run.sh SECONDS [TARGET...]}
shift
targets=("$@")
if [ ${#targets[@]} -eq 0 ]; then
  targets=(frames log stage values timestamp mapping parquet)
fi
OUT=${OUT:-$(mktemp -d /tmp/rchold-fuzz.XXXXXX)}
# -a: debug assertions and overflow checks on, as in the tests.
cargo +nightly fuzz build -a >/dev/null 2>"$OUT/build.log" || { cat "$OUT/build.log"; exit 1; }
failed=0
printf '%-10s %6s %12s %8s %8s %8s  %s\n' target secs executions exec/s cov corpus findings
for t in "${targets[@]}"; do
  corpus="$OUT/corpus-$t"
  mkdir -p "$corpus" "artifacts/$t"
  cp seeds/"$t"/* "$corpus"/
  # Inputs that once failed (fixed since) stay in every run.
  if [ -d found/"$t" ]; then cp found/"$t"/* "$corpus"/; fi
  set +e
  cargo +nightly fuzz run -a "$t" "$corpus" -- -max_total_time="$secs" -max_len=8192 \
    -timeout=10 -rss_limit_mb=2048 -print_final_stats=1 >"$OUT/$t.log" 2>&1
  rc=$?
  set -e
  runs=$(grep -o 'stat::number_of_executed_units: *[0-9]*' "$OUT/$t.log" | grep -o '[0-9]*$' || echo 0)
  rate=$(grep -o 'stat::average_exec_per_sec: *[0-9]*' "$OUT/$t.log" | grep -o '[0-9]*$' || echo 0)
  cov=$(grep -o 'cov: [0-9]*' "$OUT/$t.log" | tail -1 | grep -o '[0-9]*' || echo 0)
  files=$(find "$corpus" -type f | wc -l)
  if [ $rc -eq 0 ]; then
    found=none
  else
    found="FAILED (exit $rc): $(grep -m1 -E 'panicked|ERROR: ' "$OUT/$t.log" | cut -c1-150); log $OUT/$t.log"
    failed=1
  fi
  printf '%-10s %6s %12s %8s %8s %8s  %s\n' "$t" "$secs" "${runs:-0}" "${rate:-0}" "${cov:-0}" "$files" "$found"
done
exit $failed

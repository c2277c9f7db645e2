#!/usr/bin/env bash
# The same yield and aging on rchold, Apache Spark (local mode) and Apache
# DataFusion, over one synthetic fleet (not real data): UNITS field units
# reporting once a day for DAYS days (default a million units × 100 days =
# 10^8 records), written as a Parquet dataset. Prints each one's time and
# checks that the figures agree (benches/engines_agree.py: counts exactly,
# yield, Cp, Cpk, rates, forecasts to 1e-9 relative, statuses exactly); exits
# 1 when they do not.
#
# Needs Java 17 and `pip install pyspark datafusion pyarrow` (tests/setup.sh
# installs them). Usage: bash benches/fleet_on_engines.sh [UNITS] [DAYS] [DIR]
# (DIR: where to keep the dataset; default a temporary folder).
set -euo pipefail
cd "$(dirname "$0")/.."
UNITS="${1:-1000000}"
DAYS="${2:-100}"
# RCHOLD_PROFILE=dev uses the workspace's dev build (optimised too; CI has built it already).
if [ "${RCHOLD_PROFILE:-release}" = dev ]; then
    cargo build -q -p host-check --bin rchold
    R="$PWD/target/debug/rchold"
else
    cargo build -q --release -p host-check --bin rchold
    R="$PWD/target/release/rchold"
fi
B="$PWD/benches"
TMP="$(mktemp -d)"
trap 'rm -rf "$TMP"' EXIT
DS="${3:-$TMP/fleet}"
N=$((UNITS * DAYS))

# Seconds a command takes (its output to a file).
timed() { # out, command…
    local out="$1"
    shift
    local t0 t1
    t0=$(date +%s.%N)
    "$@" >"$out" 2>>"$TMP/stderr.log"
    t1=$(date +%s.%N)
    awk -v a="$t0" -v b="$t1" 'BEGIN { printf "%.2f", b - a }'
}
row() { # label, seconds
    awk -v l="$1" -v s="$2" -v n="$N" 'BEGIN { printf "  %-44s %8.2f s  %7.2f M records/s\n", l, s, n / s / 1e6 }'
}

printf 'fleet on engines: %s units x %s days = %s synthetic records, %s cores\n' "$UNITS" "$DAYS" "$N" "$(nproc)"
if [ ! -d "$DS" ]; then
    row "rchold synth-log --fleet (into Parquet)" "$(timed "$TMP/synth.txt" "$R" synth-log --fleet "$UNITS" --days "$DAYS" --parquet "$DS")"
fi
printf '  dataset: %s MB, %.1f B/record\n' "$(($(du -sb "$DS" | cut -f1) / 1000000))" \
    "$(awk -v b="$(du -sb "$DS" | cut -f1)" -v n="$N" 'BEGIN { print b / n }')"
row "rchold yield --parquet --skip-recheck" "$(timed "$TMP/yield.json" "$R" yield --parquet "$DS" --skip-recheck --json)"
row "rchold aging --parquet" "$(timed "$TMP/aging.json" "$R" aging --parquet "$DS" --json)"
for engine in datafusion spark; do
    t=$(timed "$TMP/$engine.json" python3 "$B/engines.py" "$engine" "$DS")
    python3 - "$TMP/$engine.json" "$N" "$t" <<'PY'
import json, sys
d = json.load(open(sys.argv[1])); n = int(sys.argv[2]); wall = float(sys.argv[3])
for q in ("yield", "aging"):
    s = d[q]["seconds"]
    print(f"  {d['engine'] + ' ' + q + '.sql':<44} {s:8.2f} s  {n / s / 1e6:7.2f} M records/s")
if "startup_seconds" in d:
    print(f"  {'  (' + d['engine'] + ' session start, not counted)':<44} {d['startup_seconds']:8.2f} s")
PY
done
python3 "$B/engines_agree.py" "$TMP/yield.json" "$TMP/aging.json" "$TMP/datafusion.json" "$TMP/spark.json"

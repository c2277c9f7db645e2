#!/usr/bin/env bash
# The store at scale: a synthetic log of N records (default 10^7; not real
# data) ingested into a fresh SQLite store, then the yield report read back
# from the store and from the log directly. Prints wall time, records/s and
# peak RSS (GNU time's maximum resident set size) of each step, and the
# database's size. Needs /usr/bin/time (Debian package `time`).
# Usage: bash benches/store_scale.sh [N]
set -euo pipefail
cd "$(dirname "$0")/.."
N="${1:-10000000}"
cargo build -q --release -p host-check --bin rchold
R="$PWD/target/release/rchold"
STAGE="$PWD/examples/lumen-keypad.toml"
TMP="$(mktemp -d)"
trap 'rm -rf "$TMP"' EXIT
cd "$TMP"

measure() { # label, command…
    local label="$1"
    shift
    local t0 t1 rss
    t0=$(date +%s.%N)
    /usr/bin/time -f "%M" -o rss.txt "$@" >/dev/null
    t1=$(date +%s.%N)
    rss=$(tail -n 1 rss.txt)
    awk -v l="$label" -v a="$t0" -v b="$t1" -v n="$N" -v r="$rss" \
        'BEGIN { s = b - a; printf "  %-34s %8.2f s  %6.2f M records/s  peak RSS %6.0f MiB\n", l, s, n / s / 1e6, r / 1024 }'
}

"$R" synth-log --out log.csv --records "$N" 2>/dev/null
printf 'store scale: %s synthetic records, log %s MB, %s cores\n' "$N" "$(( $(stat -c %s log.csv) / 1000000 ))" "$(nproc)"
measure "ingest (one transaction)" "$R" ingest log.csv --db s.db --stage "$STAGE"
measure "re-ingest (recognised, skipped)" "$R" ingest log.csv --db s.db
measure "yield from the store" "$R" yield --db s.db --skip-recheck
measure "yield from the store, f64 re-check" "$R" yield --db s.db
measure "yield --csv (parallel pieces)" "$R" yield --csv log.csv --stage "$STAGE" --skip-recheck
printf '  database: %s MB\n' "$(( $(stat -c %s s.db) / 1000000 ))"

#!/usr/bin/env bash
# The station store and the Parquet archive at scale, beside DuckDB on the
# same files in the same run. A synthetic fixture log of N records (default
# 10^7; not real data) is ingested into a fresh store, reported from, and
# exported; a synthetic fleet of N/100 units × 100 days (field records) is
# ingested and aged. Each step: wall time (fastest of 3 where it can be
# repeated), records/s and peak RSS (GNU time); then the issue's targets,
# met or missed by how much. Needs /usr/bin/time (Debian package `time`) and
# `pip install duckdb`.
# Usage: bash benches/store_scale.sh [N]
set -euo pipefail
cd "$(dirname "$0")/.."
N="${1:-10000000}"
cargo build -q --release -p host-check --bin rchold
R="$PWD/target/release/rchold"
B="$PWD/benches"
STAGE="$PWD/examples/lumen-keypad.toml"
TMP="$(mktemp -d)"
trap 'rm -rf "$TMP"' EXIT
cd "$TMP"

declare -A SECS RSS
# measure KEY LABEL REPEAT command…: the fastest of REPEAT runs.
measure() {
    local key="$1" label="$2" repeat="$3"
    shift 3
    local best="" rss=0 t0 t1 s
    for _ in $(seq "$repeat"); do
        t0=$(date +%s.%N)
        /usr/bin/time -f "%M" -o rss.txt "$@" >/dev/null 2>>stderr.log
        t1=$(date +%s.%N)
        s=$(awk -v a="$t0" -v b="$t1" 'BEGIN { print b - a }')
        best=$(awk -v a="$best" -v b="$s" 'BEGIN { print (a == "" || b < a) ? b : a }')
        rss=$(tail -n 1 rss.txt)
    done
    SECS[$key]=$best
    RSS[$key]=$rss
    awk -v l="$label" -v s="$best" -v n="$N" -v r="$rss" \
        'BEGIN { printf "  %-44s %8.2f s  %7.2f M records/s  peak RSS %6.0f MiB\n", l, s, n / s / 1e6, r / 1024 }'
}
peer() { # label seconds
    awk -v l="$1" -v s="$2" -v n="$N" 'BEGIN { printf "  %-44s %8.2f s  %7.2f M records/s\n", l, s, n / s / 1e6 }'
}

"$R" synth-log --out log.csv --records "$N" 2>/dev/null
printf 'store scale: %s synthetic records, log %s MB, %s cores\n' "$N" "$(($(stat -c %s log.csv) / 1000000))" "$(nproc)"
measure ingest "ingest (one transaction, every line checked)" 1 "$R" ingest log.csv --db s.db --stage "$STAGE"
measure reingest "re-ingest (recognised, skipped)" 1 "$R" ingest log.csv --db s.db
DB_BYTES=$(( $(stat -c %s s.db) + $(stat -c %s s.db-wal 2>/dev/null || echo 0) ))
measure yield "yield from the store (summaries)" 3 "$R" yield --db s.db --skip-recheck
measure recheck "yield from the store, f64 re-check" 1 "$R" yield --db s.db
measure csv "yield --csv (parallel pieces)" 3 "$R" yield --csv log.csv --stage "$STAGE" --skip-recheck
measure export "export --parquet from the store" 1 "$R" export --parquet ds-store --db s.db
measure export_csv "export --parquet from the log" 1 "$R" export --parquet ds --csv log.csv --stage "$STAGE"
measure parquet "yield --parquet (row groups in parallel)" 3 "$R" yield --parquet ds --skip-recheck
DS_BYTES=$(du -sb ds | cut -f1)
printf '  store: %s MB, %.1f B/record (with its indexes and summaries); dataset: %s MB, %.1f B/record\n' \
    "$((DB_BYTES / 1000000))" "$(awk -v b="$DB_BYTES" -v n="$N" 'BEGIN { print b / n }')" \
    "$((DS_BYTES / 1000000))" "$(awk -v b="$DS_BYTES" -v n="$N" 'BEGIN { print b / n }')"

python3 "$B/duckdb_peer.py" "$TMP/log.csv" "$TMP/ds" "$TMP" >duck.txt
duck() { awk -v k="$1" -v f="$2" '$1 == k { print $f }' duck.txt; }
printf 'peers (DuckDB %s, same files, fastest of 3):\n' "$(duck duckdb-version 2)"
peer "DuckDB CREATE TABLE AS read_csv (load)" "$(duck duckdb-load 2)"
printf '  %-44s %s MB, %.1f B/record\n' "DuckDB database" "$(($(duck duckdb-load 3) / 1000000))" \
    "$(awk -v b="$(duck duckdb-load 3)" -v n="$N" 'BEGIN { print b / n }')"
peer "DuckDB yield query on the CSV" "$(duck duckdb-yield-csv 2)"
peer "DuckDB yield query on the Parquet dataset" "$(duck duckdb-yield-parquet 2)"

# The fleet: field units, one record per unit and day.
UNITS=$((N / 100))
"$R" synth-log --fleet "$UNITS" --days 100 --out fleet.csv 2>/dev/null
printf 'fleet: %s units x 100 days = %s field records\n' "$UNITS" "$N"
measure fleet_ingest "ingest the fleet (per-unit sums kept)" 1 "$R" ingest fleet.csv --db f.db --stage "$STAGE"
measure aging "aging from the store (one row per unit)" 3 "$R" aging --db f.db

printf 'targets:\n'
target() { # label value goal unit better(lt|gt)
    awk -v l="$1" -v v="$2" -v g="$3" -v u="$4" -v b="$5" 'BEGIN {
        ok = (b == "lt") ? (v <= g) : (v >= g)
        gap = (b == "lt") ? v / g : g / v
        printf "  %-44s %10.2f %-9s goal %s %8.2f  %s\n", l, v, u, (b == "lt") ? "<=" : ">=", g,
            ok ? "met" : sprintf("MISSED (%.1fx)", gap)
    }'
}
rate() { awk -v s="${SECS[$1]}" -v n="$N" 'BEGIN { print n / s / 1e6 }'; }
target "ingest" "$(rate ingest)" 1.6 "M rec/s" gt
target "store size" "$(awk -v b="$DB_BYTES" -v n="$N" 'BEGIN { print b / n }')" 24 "B/record" lt
target "yield from the store" "${SECS[yield]}" 0.3 "s" lt
target "yield with the f64 re-check" "${SECS[recheck]}" 2 "s" lt
target "aging over the fleet" "${SECS[aging]}" 1 "s" lt
target "export to Parquet (from the log)" "$(rate export_csv)" 5 "M rec/s" gt
target "yield over the Parquet dataset" "$(rate parquet)" 15 "M rec/s" gt
target "Parquet size" "$(awk -v b="$DS_BYTES" -v n="$N" 'BEGIN { print b / n }')" 8 "B/record" lt

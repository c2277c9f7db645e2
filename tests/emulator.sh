#!/usr/bin/env bash
# The model's hot path and the field tester on emulated Cortex-M0 and M3
# (qemu-system-arm, mps2-an385): every golden vector recomputed on the chip
# and compared bit for bit with the host, a damaged vector caught, the field
# tester linked under a panic handler that does not exist (no reachable
# panic), with no soft float and no solver, and run against a simulated stage.
set -euo pipefail
cd "$(dirname "$0")/.."
source hold-firmware/emulator/common.sh

generate_inputs

for t in $M0 $M3; do
    (cd $EMU && cargo build -q --release --bin golden --target $t)
    echo "golden vectors on $t:"
    qemu $EMU/target/$t/release/golden
done

# Negative control: one byte of one expected result changed must fail the run.
python3 - "$GEN/vectors.bin" "$GEN/vectors-damaged.bin" <<'PY'
import sys
data = bytearray(open(sys.argv[1], 'rb').read())
# Header 16 bytes, then the first stage (130 bytes), its case count (4), the
# first case's temperature and hold (12): the next byte is its first result byte.
data[16 + 130 + 4 + 12 + 1] ^= 0x01
open(sys.argv[2], 'wb').write(bytes(data))
PY
(cd $EMU && RCHOLD_VECTORS="$PWD/target/generated/vectors-damaged.bin" \
    cargo build -q --release --bin golden --target $M0 --target-dir target/control)
if qemu $EMU/target/control/$M0/release/golden >/dev/null; then
    echo "emulator: a damaged golden vector was not caught; the check cannot be trusted" >&2
    exit 1
fi
echo "negative control: a damaged golden vector fails the run, as it must"

# The field tester: the release link itself is the panic-never proof.
(cd $EMU && cargo build -q --profile field --bin field --target $M0)
elf=$EMU/target/$M0/field/field
float=$(soft_float_symbols "$elf")
if [ -n "$float" ]; then
    echo "emulator: the field tester links soft-float routines: $float" >&2
    exit 1
fi
if "$LLVM_BIN/llvm-nm" -C "$elf" | grep -q 'rc_model::model::'; then
    echo "emulator: the field tester links the solver" >&2
    exit 1
fi
qemu "$elf" -serial file:"$GEN/field-uart.bin"
report=$(grep -ao 'field-tester[ a-z0-9-]*' "$GEN/field-uart.bin" | tail -1 || true)
case "$report" in
    *"records 5 "*) echo "field tester (no panic path, no soft float, no solver): $report" ;;
    *) echo "emulator: the field tester did not report five records: ${report:-nothing}" >&2; exit 1 ;;
esac
# Its UART bytes into a store: every frame the chip sent decodes on the host
# (the report line after the last frame counts as one bad frame).
rm -f "$GEN/field.db" "$GEN/field.db-wal" "$GEN/field.db-shm"
stored=$(cargo run -q -p host-check --bin rchold -- listen "$GEN/field-uart.bin" --station emulated-m0 \
    --stage examples/kestrel-meter.toml --clock 10k --db "$GEN/field.db" --quiet)
case "$stored" in
    *": 5 records stored, 0 already stored, 0 refused, 1 bad frames"*) echo "rchold listen on the chip's UART: $stored" ;;
    *) echo "emulator: rchold listen did not store the chip's five records: $stored" >&2; exit 1 ;;
esac
# The fixture on the chip: the real engine measures 206 simulated boards (200
# healthy across the tolerance spread, the fault matrix) on both chips.
for t in $M0 $M3; do
    (cd $EMU && cargo build -q --release --bin scenarios --target $t)
    qemu $EMU/target/$t/release/scenarios -serial file:"$GEN/fixture-$t.bin"
done
if ! cmp -s "$GEN/fixture-$M0.bin" "$GEN/fixture-$M3.bin"; then
    echo "emulator: the M0 and the M3 sent different records for the same boards" >&2
    exit 1
fi
echo "fixture scenario: the M0 and the M3 sent identical bytes"
boards() { cargo run -q -p host-check --example emulator_boards -- "$@"; }
boards host-run boards "$GEN/fixture-setup.bin" "$GEN/boards.bin" "$GEN/fixture-host.bin"
if ! cmp -s "$GEN/fixture-$M0.bin" "$GEN/fixture-host.bin"; then
    echo "emulator: the host's run of the same loop sent other records than the chips" >&2
    exit 1
fi
echo "fixture scenario: the host's run of the same engine and simulated stage sent the same bytes"
boards check "$GEN/fixture-$M0.bin" "$GEN/boards.bin.expect"
# The async engine under embassy's executor on the M3: the same boards, each
# edge awaited and raced against a delay; the same bytes as the host's run of
# the same future, and every unit's expected verdict and hint (its holds are
# timed at the edge, so its ticks differ from the blocking engine's).
(cd $EMU && cargo build -q --release --features async --bin scenarios-async --target $M3)
qemu $EMU/target/$M3/release/scenarios-async -serial file:"$GEN/fixture-async-$M3.bin"
boards host-run boards-async "$GEN/fixture-setup.bin" "$GEN/boards.bin" "$GEN/fixture-async-host.bin"
if ! cmp -s "$GEN/fixture-async-$M3.bin" "$GEN/fixture-async-host.bin"; then
    echo "emulator: the M3's async engine sent other records than the host's run of it" >&2
    exit 1
fi
boards check "$GEN/fixture-async-$M3.bin" "$GEN/boards.bin.expect"
echo "fixture scenario, async engine: the M3 under the executor and the host sent the same bytes"
# The snapshot beside the firmware: the decoded records, reviewable as text.
snapshot=$EMU/snapshots/fixture-lumen.txt
boards render "$GEN/fixture-$M0.bin" > "$GEN/fixture-records.txt"
if [ "${UPDATE_SNAPSHOTS:-}" = 1 ]; then
    cp "$GEN/fixture-records.txt" "$snapshot"
elif ! diff -u "$snapshot" "$GEN/fixture-records.txt"; then
    echo "emulator: the records differ from $snapshot (UPDATE_SNAPSHOTS=1 rewrites it, on purpose only)" >&2
    exit 1
fi
echo "fixture scenario: the records equal the snapshot $snapshot"
# The station: every record stored once, and the f64 re-check confirms every verdict.
rm -f "$GEN/fixture.db" "$GEN/fixture.db-wal" "$GEN/fixture.db-shm"
cargo run -q -p host-check --bin rchold -- listen "$GEN/fixture-$M0.bin" --station emulated-fixture \
    --stage examples/lumen-keypad.toml --clock 10k --db "$GEN/fixture.db" --quiet
cargo run -q -p host-check --bin rchold -- yield --db "$GEN/fixture.db" --json > "$GEN/fixture-yield.json"
python3 - "$GEN/fixture-yield.json" <<'PY'
import json, sys
v = json.load(open(sys.argv[1]))
total, passed = v["all"]["total"], v["all"]["verdicts"][0]
rc = v["recheck"]
problems = []
if (total, passed) != (206, 200):
    problems.append(f"{total} stored and {passed} passed, where the scenario sends 206 with 200 healthy")
if rc["disagreements_total"] != 0 or rc["agreed"] != rc["checked"] or rc["checked"] < 200:
    problems.append(f"the f64 re-check agreed on {rc['agreed']} of {rc['checked']} verdicts")
if problems:
    sys.exit("emulator: the fixture report: " + "; ".join(problems))
print(f"fixture scenario: {total} stored, {passed} pass, the f64 re-check confirms {rc['agreed']} of {rc['checked']} "
      f"verdicts ({rc['not_checkable']} a hold does not decide)")
PY

# The field unit on the chip: 700 daily measurements through the drift tracker.
for t in $M0 $M3; do
    (cd $EMU && cargo build -q --release --bin aging --target $t)
    qemu $EMU/target/$t/release/aging -serial file:"$GEN/aging-$t.bin"
done
if ! cmp -s "$GEN/aging-$M0.bin" "$GEN/aging-$M3.bin"; then
    echo "emulator: the M0 and the M3 sent different records for the same days" >&2
    exit 1
fi
echo "field unit: the M0 and the M3 sent identical bytes"
boards host-run days "$GEN/field-setup.bin" "$GEN/aging-days.bin" "$GEN/aging-host.bin"
if ! cmp -s "$GEN/aging-$M0.bin" "$GEN/aging-host.bin"; then
    echo "emulator: the host's run of the same days sent other records than the chips" >&2
    exit 1
fi
echo "field unit: the host's run sent the same bytes"
boards aging-check "$GEN/aging-$M0.bin"
rm -f "$GEN/aging.db" "$GEN/aging.db-wal" "$GEN/aging.db-shm"
cargo run -q -p host-check --bin rchold -- listen "$GEN/aging-$M0.bin" --station emulated-field \
    --stage examples/kestrel-meter.toml --clock 10k --field --seq-start 2024-01-01T06:00:00Z --seq-period 1d \
    --db "$GEN/aging.db" --quiet
# The forecast from the first year alone, against the simulated truth (C/C0 = 0.80 on day 608.75).
cargo run -q -p host-check --bin rchold -- aging --db "$GEN/aging.db" --to 2025-01-01 --json > "$GEN/aging.json"
python3 - "$GEN/aging.json" <<'PY'
import datetime, json, sys
units = json.load(open(sys.argv[1]))["units"]
start = datetime.datetime(2024, 1, 1, 6, tzinfo=datetime.timezone.utc).timestamp() * 1000
truth = 608.75 * 86_400_000
if len(units) != 1 or units[0]["forecast_ms"] is None:
    sys.exit(f"emulator: the aging report has no forecast for the field unit: {units}")
got = units[0]["forecast_ms"] - start
err = abs(got - truth) / truth
if err > 0.2:
    sys.exit(f"emulator: forecast day {got / 86_400_000:.1f} against the truth's 608.75 ({err:.1%} off; at most 20 %)")
print(f"field unit: forecast from the first year, day {got / 86_400_000:.1f} against the truth's 608.75 "
      f"({err:.2%} off), rate {units[0]['rate_pct_per_year']:.2f} %/year")
PY

# defmt on the chip: the same two runs on the M3 with the firmware's log points
# as defmt frames over semihosting, decoded against the records; logging must
# not change a record.
for b in scenarios aging; do
    (cd $EMU && cargo build -q --release --features defmt --bin $b --target $M3 --target-dir target/defmt)
    elf=$EMU/target/defmt/$M3/release/$b
    qemu "$elf" -serial file:"$GEN/defmt-$b-uart.bin" > "$GEN/defmt-$b-log.bin"
    boards defmt-check "$elf" "$GEN/defmt-$b-log.bin" "$GEN/defmt-$b-uart.bin"
done
cmp -s "$GEN/defmt-scenarios-uart.bin" "$GEN/fixture-$M3.bin" && cmp -s "$GEN/defmt-aging-uart.bin" "$GEN/aging-$M3.bin" || {
    echo "emulator: the records changed when the firmware logs with defmt" >&2
    exit 1
}
echo "defmt: the records are byte for byte the same with logging on"

echo "emulator checks passed"

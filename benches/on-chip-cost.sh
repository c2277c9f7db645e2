#!/usr/bin/env bash
# What the model's hot path and the field tester cost on the emulated chips,
# counted exactly: instructions per call on Cortex-M0 (thumbv6m code) and
# Cortex-M3 (thumbv7m), with the instruction-count plugin of
# ../shared/tools/qemu-insn-count on qemu-system-arm's mps2-an385; the same
# hold in soft-float f32 (libm); flash, static RAM and the measured stack of
# the field tester (opt-level "s"), and of the build that links the solver.
# Prints one table and writes target/on-chip-cost.json. A benchmark, not a
# test: the targets are printed beside the figures, nothing fails on them.
set -euo pipefail
cd "$(dirname "$0")/.."
source hold-firmware/emulator/common.sh

plugin_src=${QEMU_INSN_COUNT:-../shared/tools/qemu-insn-count}
mkdir -p $EMU/target/plugin
gcc -shared -fPIC -O2 -o $EMU/target/plugin/libinsn_count.so "$plugin_src/insn_count.c"
generate_inputs >/dev/null

counts=()
for t in $M0 $M3; do
    (cd $EMU && cargo build -q --release --features solver --bin cost --target $t)
    elf=$EMU/target/$t/release/cost
    start=$("$LLVM_BIN/llvm-nm" "$elf" | awk '$3 == "bench_start" {print $1}')
    end=$("$LLVM_BIN/llvm-nm" "$elf" | awk '$3 == "bench_end" {print $1}')
    log=$EMU/target/plugin/insn-$t.log
    qemu "$elf" -plugin "$EMU/target/plugin/libinsn_count.so,start=0x$start,end=0x$end" -d plugin -D "$log" >/dev/null
    counts+=("$(awk '/^BENCH/ {printf "%s ", $2}' "$log")")
done

size_of() { # ELF → "text+rodata data+bss"
    "$LLVM_BIN/llvm-size" -A "$1" | awk '$1 == ".text" || $1 == ".rodata" {f += $2} $1 == ".data" || $1 == ".bss" {r += $2} END {print f, r}'
}
stack_of() { # ELF → deepest stack use the tester reported over its UART
    qemu "$1" -serial file:"$GEN/cost-uart.bin" >/dev/null
    grep -ao 'stack-bytes [0-9]*' "$GEN/cost-uart.bin" | tail -1 | awk '{print $2}'
}
(cd $EMU && cargo build -q --profile field --bin field --target $M0 \
    && cargo build -q --profile field --features solver --bin field-solver --target $M0)
field=$EMU/target/$M0/field/field
solver=$EMU/target/$M0/field/field-solver
read -r flash ram < <(size_of "$field")
read -r flash_s ram_s < <(size_of "$solver")
stack=$(stack_of "$field")
stack_s=$(stack_of "$solver")

python3 - "${counts[0]}" "${counts[1]}" "$flash" "$ram" "$stack" "$flash_s" "$ram_s" "$stack_s" <<'PY'
import json, sys
m0, m3 = ([int(x) for x in a.split()] for a in sys.argv[1:3])
flash, ram, stack, flash_s, ram_s, stack_s = (int(x) for x in sys.argv[3:9])
names = ["hold", "inverse_c", "drift_update", "encode", "prepare_drop", "prepare_junction", "softfloat_hold",
         "ln", "quadratic", "norm_mul", "norm_div"]
# Span 0 is empty: the markers' own call overhead, taken off every other span.
net = lambda counts: {n: c - counts[0] for n, c in zip(names, counts[1:])}
a, b = net(m0), net(m3)
rows = [
    ("hold from a prepared stage, at a measured temperature", "hold", 1500, 500),
    ("inverse C from measured ticks (reference temperature)", "inverse_c", 1500, 500),
    ("drift update: deviation at a measured temperature + EWMA, CUSUM, history", "drift_update", 3000, 1000),
    ("record encode + CRC-32 + COBS", "encode", 1500, 600),
    ("prepare, fixed drop (solver, three temperatures)", "prepare_drop", 20000, 8000),
    ("prepare, junction diode (solver, three temperatures)", "prepare_junction", 300000, 150000),
    ("the same hold in soft-float f32 (libm logf)", "softfloat_hold", None, None),
    ("  part of the hold: ln of a ratio", "ln", None, None),
    ("  part of the hold: one temperature quadratic", "quadratic", None, None),
    ("  part of the hold: a Norm product", "norm_mul", None, None),
    ("  part of the inverse: a Norm quotient", "norm_div", None, None),
]
def mark(v, target):
    return "" if target is None else (" (target ≤ {:,}: {})".format(target, "met" if v <= target else "MISSED"))
print("instructions per call, exact (qemu-system-arm mps2-an385, release, LTO, opt-level 3; marker overhead of {} taken off)".format(m0[0]))
print("{:<76} {:>22} {:>22}".format("call", "Cortex-M0 (thumbv6m)", "Cortex-M3 (thumbv7m)"))
for label, key, t0, t3 in rows:
    print("{:<76} {:>10,}{:<12} {:>10,}{}".format(label, a[key], "" if t0 is None else (" ✓" if a[key] <= t0 else " ✗"), b[key], "" if t3 is None else (" ✓" if b[key] <= t3 else " ✗")))
    if t0 is not None:
        print("{:<76} {:>22} {:>22}".format("", "target ≤ {:,}".format(t0), "target ≤ {:,}".format(t3)))
ratio = a["softfloat_hold"] / a["hold"]
print("fixed hold vs soft-float hold on M0: {:.2f}x fewer instructions (target ≥ 2x: {})".format(ratio, "met" if ratio >= 2 else "MISSED"))
print()
print("field tester (engine, hot path, drift tracker of 64, encoder, blob loader; no solver), thumbv6m, opt-level \"s\":")
print("  flash .text + .rodata {:,} B (target ≤ 8,192: {})".format(flash, "met" if flash <= 8192 else "MISSED"))
print("  RAM .data + .bss      {:,} B (target ≤ 2,048: {})".format(ram, "met" if ram <= 2048 else "MISSED"))
print("  stack, measured       {:,} B (target ≤ 2,048: {})".format(stack, "met" if stack <= 2048 else "MISSED"))
print("the same tester preparing its stage on the chip (solver linked): flash {:,} B, RAM {:,} B, stack {:,} B".format(flash_s, ram_s, stack_s))
out = {f"m0.{k}": a[k] for k in names[:6]}
out.update({f"m3.{k}": b[k] for k in names[:6]})
out.update({"m0.softfloat_hold": a["softfloat_hold"], "m3.softfloat_hold": b["softfloat_hold"],
            "flash_bytes": flash, "ram_bytes": ram, "stack_bytes": stack,
            "solver_flash_bytes": flash_s, "solver_ram_bytes": ram_s, "solver_stack_bytes": stack_s})
json.dump(out, open("target/on-chip-cost.json", "w"), indent=2)
print("\nwritten: target/on-chip-cost.json")
PY

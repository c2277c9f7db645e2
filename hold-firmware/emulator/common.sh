# Shared by tests/emulator.sh and benches/on-chip-cost.sh: paths, the LLVM
# tools, the QEMU command and the generated inputs. Source it from the
# repository root.
EMU=hold-firmware/emulator
GEN=$EMU/target/generated
LLVM_BIN="$(rustc --print sysroot)/lib/rustlib/$(rustc -vV | sed -n 's/^host: //p')/bin"
M0=thumbv6m-none-eabi
M3=thumbv7m-none-eabi

# qemu ELF [extra args…]: boots an ELF on the emulated mps2-an385 (it runs
# thumbv6m code too), semihosting on, never longer than two minutes.
qemu() {
    local elf=$1
    shift
    timeout 120 qemu-system-arm -machine mps2-an385 -cpu cortex-m3 -display none -monitor none \
        -semihosting-config enable=on,target=native -kernel "$elf" "$@"
}

# The inputs the firmware includes when built: the golden vectors (computed
# on this host) and the field tester's settings blob (from the Kestrel-5
# stage file's field window, ticks of a 10 kHz clock).
generate_inputs() {
    mkdir -p "$GEN"
    cargo run -q --release -p rc-model --example golden_vectors -- "$GEN/vectors.bin"
    cargo run -q -p host-check --bin rchold -- window examples/kestrel-meter.toml --clock 10k --field \
        --emit bin --out "$GEN/field-setup.bin"
    # The fixture scenario: the Lumen-3 stage's fixture window at 10 kHz, its boards drawn on the host.
    cargo run -q -p host-check --bin rchold -- window examples/lumen-keypad.toml --clock 10k \
        --emit bin --out "$GEN/fixture-setup.bin"
    cargo run -q -p host-check --example emulator_boards -- write examples/lumen-keypad.toml 10000 \
        "$GEN/boards.bin"
    # The field unit: Kestrel-5, 700 days, its capacitor losing 1 % a month.
    cargo run -q -p host-check --example emulator_boards -- aging examples/kestrel-meter.toml 10000 \
        "$GEN/aging-days.bin"
}

# Soft-float routines a Cortex-M0 build would call, among an ELF's symbols.
soft_float_symbols() {
    "$LLVM_BIN/llvm-nm" "$1" | awk '{print $NF}' \
        | grep -E '^__aeabi_[fd]|^__(add|sub|mul|div)[sd]f3$|^__(fix|float|extend|trunc)[a-z0-9]*[sd]f' || true
}

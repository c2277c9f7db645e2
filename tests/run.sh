#!/usr/bin/env bash
# Every test and check of the workspace. Works on a fresh machine (installs
# what it needs through tests/setup.sh).
set -euo pipefail
cd "$(dirname "$0")/.."
export CARGO_TERM_COLOR=never
step() { printf '\n== %s\n' "$*"; }

step "setup"
bash tests/setup.sh

step "format"
cargo fmt --all -- --check
(cd hold-firmware/emulator && cargo fmt -- --check)
(cd host-check/fuzz && cargo fmt -- --check)

step "lints"
cargo clippy --workspace --all-targets --all-features -- -D warnings
# The emulator firmware: its own workspace, for both chips (it includes
# generated inputs, so write them first).
source hold-firmware/emulator/common.sh
generate_inputs >/dev/null
for t in thumbv6m-none-eabi thumbv7m-none-eabi; do
    (cd hold-firmware/emulator && cargo clippy -q --release --features solver --target "$t" --bins -- -D warnings)
done
(cd hold-firmware/emulator && cargo clippy -q --release --features async --target thumbv7m-none-eabi --bins -- -D warnings)

step "docs"
RUSTDOCFLAGS="-D warnings" cargo doc -q --workspace --no-deps

step "tests"
cargo test --workspace

step "the whole input space (any u32/u64/i32) of the model and the firmware engine, under release-checked"
cargo test -q --profile release-checked -p rc-model -p hold-firmware

step "the shipped SQL on Spark and DataFusion agrees with rchold (a synthetic fleet of 10^6 records)"
RCHOLD_PROFILE=dev bash benches/fleet_on_engines.sh 10000 100

step "fuzz smoke: 30 s of each parser's fuzz target (host-check/fuzz; long runs: README, Fuzzing)"
bash host-check/fuzz/run.sh 30

step "cross builds of the no_std crates"
cargo build -q -p rc-model --release --target thumbv6m-none-eabi
cargo build -q -p rc-model --release --target thumbv6m-none-eabi --no-default-features
cargo build -q -p rc-model --release --target thumbv7em-none-eabihf --features f32,defmt
cargo build -q -p rc-model --release --target thumbv7em-none-eabihf --features f32-micromath
cargo build -q -p hold-firmware --release --target thumbv6m-none-eabi
cargo build -q -p hold-firmware --release --target thumbv6m-none-eabi --no-default-features
cargo build -q -p hold-firmware --release --target thumbv7em-none-eabihf --features async,defmt

step "no soft float on the FPU-less target"
bash tests/no-soft-float.sh

step "on the emulated chips: golden vectors (M0, M3), the field tester (no panic path, no soft float, no solver)"
bash tests/emulator.sh

step "the Raspberry Pi Pico example builds (compile check; not flashed here)"
cargo run -q -p host-check --bin rchold -- window examples/kestrel-meter.toml --clock 1MHz \
    --emit bin --out hold-firmware/boards/rp-pico/setup.bin
(cd hold-firmware/boards/rp-pico && cargo fmt -- --check && cargo clippy -q --release -- -D warnings \
    && cargo build -q --release)

printf '\nall checks passed\n'

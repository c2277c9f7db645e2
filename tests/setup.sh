#!/usr/bin/env bash
# Installs what the test suite needs on a fresh Debian machine with rustup.
# Idempotent: each step is skipped when its piece is already there.
set -euo pipefail

have_target() { rustup target list --installed | grep -qx "$1"; }
for t in thumbv6m-none-eabi thumbv7m-none-eabi thumbv7em-none-eabihf; do
    have_target "$t" || rustup target add "$t"
done
rustup component list --installed | grep -q '^llvm-tools' || rustup component add llvm-tools
rustup component list --installed | grep -q '^clippy' || rustup component add clippy
rustup component list --installed | grep -q '^rustfmt' || rustup component add rustfmt

# Debian packages: the circuit simulator the model is checked against, the
# emulator the firmware runs on (mps2-an385: Cortex-M3, runs M0 code too), and
# a C compiler for the emulator's instruction-count plugin.
missing=()
command -v ngspice >/dev/null 2>&1 || missing+=(ngspice)
command -v qemu-system-arm >/dev/null 2>&1 || missing+=(qemu-system-arm)
command -v gcc >/dev/null 2>&1 || missing+=(gcc)
if [ "${#missing[@]}" -gt 0 ]; then
    if [ "$(id -u)" -ne 0 ]; then
        echo "tests/setup.sh: need root to apt-get install ${missing[*]}" >&2
        exit 1
    fi
    apt-get update -qq
    DEBIAN_FRONTEND=noninteractive apt-get install -y -qq "${missing[@]}" >/dev/null
fi

# The engines the shipped SQL (host-check/sql/) is checked on: Apache Spark
# (pyspark, which needs Java 17) and Apache DataFusion, with pyarrow.
if ! command -v java >/dev/null 2>&1; then
    if [ "$(id -u)" -ne 0 ]; then
        echo "tests/setup.sh: need root to apt-get install openjdk-17-jre-headless" >&2
        exit 1
    fi
    apt-get update -qq
    DEBIAN_FRONTEND=noninteractive apt-get install -y -qq openjdk-17-jre-headless >/dev/null
fi
python3 -c 'import pyspark, datafusion, pyarrow' 2>/dev/null ||
    python3 -m pip install -q --disable-pip-version-check pyspark==4.3.0 datafusion==55.0.0 pyarrow==26.0.1

# The fuzz targets (host-check/fuzz/): cargo-fuzz from crates.io, built with
# the machine's nightly toolchain (libFuzzer's instrumentation needs it).
if ! rustup toolchain list | grep -q '^nightly'; then
    echo "tests/setup.sh: the fuzz smoke needs the nightly toolchain (rustup toolchain install nightly)" >&2
    exit 1
fi
command -v cargo-fuzz >/dev/null 2>&1 || cargo install -q --locked cargo-fuzz --version 0.13.2

#!/usr/bin/env bash
# What the firmware costs on a Cortex-M0 (thumbv6m-none-eabi, 256 KiB / 16 KiB):
# builds hold-firmware/footprint (model + window + engine + drift tracker with a
# 64-entry history + record frames) and reports flash, static RAM, the sizes of
# the state kept on the stack, and that no soft-float routine is linked.
set -euo pipefail
cd "$(dirname "$0")/../hold-firmware/footprint"
bin="$(rustc --print sysroot)/lib/rustlib/$(rustc -vV | sed -n 's/^host: //p')/bin"
cargo build -q --release
elf=target/thumbv6m-none-eabi/release/hold-firmware-footprint
read -r text data bss _ < <("$bin/llvm-size" "$elf" | awk 'NR==2 {print $1, $2, $3, $4}')
echo "flash (text + rodata + vectors): $text bytes"
echo "static RAM (data + bss): $((data + bss)) bytes"
addr=$("$bin/llvm-nm" --demangle "$elf" | awk '$3 ~ /^hold_firmware_footprint::FOOTPRINT_SIZES/ {print $1}')
if [ -z "$addr" ]; then
    echo "footprint: FOOTPRINT_SIZES not found in $elf" >&2
    exit 1
fi
start=$((16#$addr))
words=$("$bin/llvm-objdump" -s -j .rodata --start-address=$start --stop-address=$((start + 16)) "$elf" | awk '/^ [0-9a-f]+ / {print $2, $3, $4, $5}' | head -1)
le() { local w=$1; echo $((16#${w:6:2}${w:4:2}${w:2:2}${w:0:2})); }
set -- $words
echo "stack state: model $(le "$1") B, tester $(le "$2") B, drift tracker (64 entries) $(le "$3") B, record + frame $(le "$4") B"
float=$("$bin/llvm-nm" "$elf" | awk '{print $NF}' | grep -E '^__aeabi_[fd]|^__(add|sub|mul|div)[sd]f3$' || true)
if [ -n "$float" ]; then
    echo "footprint: soft-float routines linked: $float" >&2
    exit 1
fi
echo "soft float: none linked"

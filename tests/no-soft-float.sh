#!/usr/bin/env bash
# The no-FPU build of the model must not call any soft-float routine: build
# rc-model for thumbv6m-none-eabi (default features) and list the symbols its
# objects need from elsewhere.
set -euo pipefail
cd "$(dirname "$0")/.."
nm="$(rustc --print sysroot)/lib/rustlib/$(rustc -vV | sed -n 's/^host: //p')/bin/llvm-nm"

# Soft-float routines a Cortex-M0 build would call.
soft_float() {
    grep -E '^__aeabi_[fd]|^__(add|sub|mul|div|neg|cmp|eq|ne|lt|le|gt|ge|un)[sdt]f[23]$|^__(fix|float|extend|trunc)[a-z0-9]*[sdt]f' || true
}
undefined_of() {
    "$nm" --undefined-only "$1" 2>/dev/null | awk '{print $NF}' | sort -u
}

# Negative control: the f32 backend on the same target must be caught.
cargo build -q -p rc-model --release --target thumbv6m-none-eabi --features f32 --target-dir target/soft-float-control
control=$(undefined_of target/soft-float-control/thumbv6m-none-eabi/release/librc_model.rlib | soft_float)
if [ -z "$control" ]; then
    echo "no-soft-float: the check did not see the f32 backend's soft-float calls; it cannot be trusted" >&2
    exit 1
fi

cargo build -q -p rc-model --release --target thumbv6m-none-eabi
rlib=target/thumbv6m-none-eabi/release/librc_model.rlib
undefined=$(undefined_of "$rlib")
if [ -z "$undefined" ]; then
    echo "no-soft-float: could not read the symbols of $rlib" >&2
    exit 1
fi
float=$(printf '%s\n' "$undefined" | soft_float)
if [ -n "$float" ]; then
    echo "no-soft-float: rc-model (thumbv6m) needs soft-float routines:" >&2
    printf '  %s\n' $float >&2
    exit 1
fi
echo "no-soft-float: rc-model for thumbv6m-none-eabi links no soft-float routine ($(printf '%s\n' "$undefined" | grep -c '^__') runtime helpers, all integer)"

#!/usr/bin/env bash
# CI for the firmware boards (called by .ci/run): format and lint each
# board, build every image for its target (release), run the QEMU images
# (failing on a non-zero exit or a failed check), run the panic-freedom
# proof (and its canary, which must fail to link), build the STM32G474
# board, print the size report.
#
# Each board is its own cargo workspace with its own .cargo/config.toml,
# which cargo reads from the current directory: every step runs from the
# board's directory.
#
# Needs: rustup (targets and llvm-tools are added here), qemu-system-arm
# (installed with apt-get when missing). Cold run: about 3.5 minutes on 2 cores
# (the embassy board is most of it); warm: about 10 s.
set -euo pipefail
cd "$(dirname "$0")"
boards=$(pwd)

# Each board keeps its own target/ (the size report reads from there).
unset CARGO_TARGET_DIR CARGO_BUILD_TARGET

QEMU_TIMEOUT=${QEMU_TIMEOUT:-300}

echo "== boards: toolchain"
rustup target add thumbv6m-none-eabi thumbv7em-none-eabihf
rustup component add llvm-tools rustfmt clippy
if ! command -v qemu-system-arm >/dev/null 2>&1; then
  (apt-get update && apt-get install -y qemu-system-arm) >/dev/null 2>&1 || true
fi
if ! command -v qemu-system-arm >/dev/null 2>&1; then
  echo "qemu-system-arm is missing and could not be installed" >&2
  exit 1
fi
qemu-system-arm --version | head -n1

# run_qemu NAME: `cargo run --release` in the current board directory,
# with a timeout; fails on a non-zero exit or without "NAME: N passed, 0 failed".
run_qemu() {
  local name=$1 log
  log=$(mktemp)
  set +e
  timeout "$QEMU_TIMEOUT" cargo run --release --quiet --bin "$name" 2>&1 | tee "$log"
  local rc=${PIPESTATUS[0]}
  set -e
  if [ "$rc" -ne 0 ]; then
    echo "$name: QEMU exited with $rc" >&2
    rm -f "$log"
    return 1
  fi
  if ! grep -Eq "^$name: [0-9]+ passed, 0 failed$" "$log"; then
    echo "$name: no passing summary line" >&2
    rm -f "$log"
    return 1
  fi
  rm -f "$log"
}

echo "== boards: qemu-m4 (Cortex-M4F)"
cd "$boards/qemu-m4"
cargo fmt --check
cargo clippy --release -- -D warnings
cargo build --release
run_qemu qemu-m4

echo "== boards: panic-freedom proof"
# The canary adds a reachable panic: its link must fail on the undefined
# symbol, or the proof proves nothing.
set +e
canary=$(cargo build --release --bin prove-no-panic --features proof-canary 2>&1)
canary_rc=$?
set -e
if [ "$canary_rc" -eq 0 ] || ! grep -q "undefined symbol: diodestat_panic_reachable" <<<"$canary"; then
  echo "$canary" >&2
  echo "proof canary: a reachable panic did not fail the link" >&2
  exit 1
fi
echo "canary: a reachable panic fails the link, as it must"
cargo build --release --bin prove-no-panic --bin rt-baseline
cargo build --release --bin prove-no-panic --bin rt-baseline --target thumbv6m-none-eabi
echo "prove-no-panic: linked for thumbv7em-none-eabihf and thumbv6m-none-eabi: no panic path in validate, restore, request (through the mailbox), step or the edge"

echo "== boards: qemu-m0 (Cortex-M0)"
cd "$boards/qemu-m0"
cargo fmt --check
cargo clippy --release -- -D warnings
cargo build --release
run_qemu qemu-m0

echo "== boards: g474-driver (STM32G474, build only)"
cd "$boards/g474-driver"
cargo fmt --check
cargo clippy --release -- -D warnings
cargo build --release

cd "$boards"
./size-report.sh

echo "== boards: no heap in any image"
# An image that links an allocator has the global-allocator shims or the
# alloc crate's code; none may.
llvm_nm=$(ls "$(rustc --print sysroot)"/lib/rustlib/*/bin/llvm-nm 2>/dev/null | head -n1 || true)
if [ -z "$llvm_nm" ]; then
  echo "llvm-nm not found: rustup component add llvm-tools" >&2
  exit 1
fi
for img in qemu-m4/target/thumbv7em-none-eabihf/release/qemu-m4 \
           qemu-m4/target/thumbv7em-none-eabihf/release/prove-no-panic \
           qemu-m4/target/thumbv6m-none-eabi/release/prove-no-panic \
           qemu-m0/target/thumbv6m-none-eabi/release/qemu-m0 \
           g474-driver/target/thumbv7em-none-eabihf/release/g474-driver; do
  if [ ! -f "$img" ]; then
    echo "$img: not built" >&2
    exit 1
  fi
  if "$llvm_nm" -C "$img" | grep -Eq "__rust_alloc|__rust_dealloc|__rg_alloc|__rdl_alloc|alloc::alloc::"; then
    echo "$img links a heap allocator" >&2
    "$llvm_nm" -C "$img" | grep -E "__rust_alloc|__rust_dealloc|__rg_alloc|__rdl_alloc|alloc::alloc::" >&2
    exit 1
  fi
  echo "  no allocator in $img"
done
echo "boards: all passed"

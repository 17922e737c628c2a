#!/usr/bin/env bash
# Size report of the firmware images: flash (vector table + text + rodata,
# and the initial values of .data, which are stored in flash too) and static
# RAM (data + bss + uninit) of each image, then the core alone: the
# `prove-no-panic` image (configuration, validate, Controller step/request,
# the embedded-hal edge) less `rt-baseline` (the same start-up and loop
# without the controller), for Cortex-M4 and Cortex-M0.
#
# Uses llvm-size / llvm-nm from rustup's llvm-tools. Run after the images
# are built (boards/ci.sh builds them); missing images are reported and
# skipped. Exits non-zero if the core alone exceeds its flash budget.
#
# Usage: boards/size-report.sh
set -euo pipefail
cd "$(dirname "$0")"

CORE_FLASH_MAX=$((14 * 1024))
CORE_RAM_MAX=1024

sysroot=$(rustc --print sysroot)
llvm_size=$(ls "$sysroot"/lib/rustlib/*/bin/llvm-size 2>/dev/null | head -n1 || true)
llvm_nm=$(ls "$sysroot"/lib/rustlib/*/bin/llvm-nm 2>/dev/null | head -n1 || true)
if [ -z "$llvm_size" ] || [ -z "$llvm_nm" ]; then
  echo "llvm-size/llvm-nm not found: rustup component add llvm-tools" >&2
  exit 1
fi

m4=thumbv7em-none-eabihf
m0=thumbv6m-none-eabi

# Prints "flash ram text_rodata data bss" for an ELF.
measure() {
  "$llvm_size" -A "$1" | awk '
    $1 == ".vector_table" || $1 == ".text" || $1 == ".rodata" { code += $2 }
    $1 == ".data" { data += $2 }
    $1 == ".bss" || $1 == ".uninit" { bss += $2 }
    END { printf "%d %d %d %d %d\n", code + data, data + bss, code, data, bss }'
}

row() { # name elf
  if [ ! -f "$2" ]; then
    printf '  %-34s %s\n' "$1" "(not built: $2)"
    return 1
  fi
  read -r flash ram code data bss < <(measure "$2")
  printf '  %-34s %8d %8d %8d %8d %8d\n' "$1" "$flash" "$code" "$data" "$bss" "$ram"
}

echo "== firmware sizes (bytes; release: opt-level s, LTO, panic abort)"
printf '  %-34s %8s %8s %8s %8s %8s\n' image flash text+ro data bss+uninit "static RAM"
row "qemu-m4 (Cortex-M4F, mps2-an386)" qemu-m4/target/$m4/release/qemu-m4 || true
row "qemu-m0 (Cortex-M0, micro:bit)" qemu-m0/target/$m0/release/qemu-m0 || true
row "g474-driver (STM32G474)" g474-driver/target/$m4/release/g474-driver || true
row "prove-no-panic (Cortex-M4F)" qemu-m4/target/$m4/release/prove-no-panic || true
row "rt-baseline (Cortex-M4F)" qemu-m4/target/$m4/release/rt-baseline || true
row "prove-no-panic (Cortex-M0)" qemu-m4/target/$m0/release/prove-no-panic || true
row "rt-baseline (Cortex-M0)" qemu-m4/target/$m0/release/rt-baseline || true
echo "  flash = text + rodata + vector table + the initial values of .data"

status=0
echo "== the core alone (prove-no-panic less rt-baseline)"
for t in $m4 $m0; do
  proof=qemu-m4/target/$t/release/prove-no-panic
  base=qemu-m4/target/$t/release/rt-baseline
  if [ ! -f "$proof" ] || [ ! -f "$base" ]; then
    echo "  $t: not built"
    continue
  fi
  read -r pf pr _ < <(measure "$proof")
  read -r bf br _ < <(measure "$base")
  flash=$((pf - bf))
  ram=$((pr - br))
  verdict="within"
  if [ "$flash" -gt "$CORE_FLASH_MAX" ]; then
    verdict="OVER"
    status=1
  fi
  printf '  %-22s flash %6d B (%s the %d B budget), static RAM %d B (budget %d B)\n' \
    "$t" "$flash" "$verdict" "$CORE_FLASH_MAX" "$ram" "$CORE_RAM_MAX"
done

proof=qemu-m4/target/$m4/release/prove-no-panic
if [ -f "$proof" ]; then
  echo "== largest symbols of prove-no-panic (Cortex-M4F; with LTO, step and request are inlined into main)"
  "$llvm_nm" --size-sort -S -C "$proof" | tail -n 12 |
    while read -r _addr size _kind name; do
      printf '  %6d %s\n' "$((16#$size))" "$name"
    done
fi

g474=g474-driver/target/$m4/release/g474-driver
if [ -f "$g474" ]; then
  echo "== RAM held by the controller object"
  "$llvm_nm" -S -C "$g474" | grep 'control::CONTROL' |
    while read -r _addr size _kind _name; do
      printf '  g474-driver CONTROL (Controller, edge, ADC/DAC/timer/IWDG handles): %d B\n' "$((16#$size))"
    done
  echo "  (the core defines no statics; a Controller value is 928 B on thumbv7em, see docs/firmware.md)"
fi
exit "$status"

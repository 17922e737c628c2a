#!/usr/bin/env bash
# Where `Controller::step` spends its instructions, on Cortex-M4.
#
# Runs the qemu-m4 image under QEMU with one instruction per translation
# block (-singlestep), logs every instruction executed inside `step`, the
# functions it calls (`ramp`) and the 64-bit division helpers, and
# attributes each executed address to the core function inlined into
# `step` there (binutils `addr2line -i`, which follows inlining through the
# debug info). The run covers every path of the scenario, dominated by
# regulating and latched steps. `u64_div_rem` is also used by the report
# code, which adds a little outside `step`.
#
# Needs python3, addr2line and qemu-system-arm. Not run in CI. Usage:
#   boards/profile-step.sh
set -euo pipefail
cd "$(dirname "$0")/qemu-m4"
unset CARGO_TARGET_DIR

cargo build --release --quiet --bin qemu-m4
elf=target/thumbv7em-none-eabihf/release/qemu-m4
nm=$(ls "$(rustc --print sysroot)"/lib/rustlib/*/bin/llvm-nm | head -n1)
ranges=$("$nm" -S -C "$elf" |
  awk '/Controller::step|Controller::ramp|__aeabi_ldivmod|__divmoddi4|specialized_div_rem::u64_div_rem/ {
         printf "%s0x%s+0x%s", sep, $1, $2; sep = "," }')
echo "tracing $ranges"

dir=$(mktemp -d)
trap 'rm -rf "$dir"' EXIT
mkfifo "$dir/trace"
python3 - "$elf" "$dir/trace" <<'PY' &
import collections, re, subprocess, sys
elf, trace = sys.argv[1], sys.argv[2]
counts = collections.Counter()
with open(trace) as f:
    for line in f:
        if line.startswith("Trace"):
            counts[int(line.split("/")[1], 16)] += 1
addrs = sorted(counts)
out = subprocess.run(["addr2line", "-a", "-i", "-f", "-C", "-e", elf] + [hex(a) for a in addrs],
                     capture_output=True, text=True, check=True).stdout.splitlines()
chains, cur, i = {}, None, 0
while i < len(out):
    if out[i].startswith("0x"):
        cur = int(out[i], 16); chains[cur] = []; i += 1
    else:
        chains[cur].append(re.sub(r"::h[0-9a-f]{16}", "", out[i])); i += 2
total = sum(counts.values())
by_fn = collections.Counter()
for a, n in counts.items():
    chain = chains.get(a, ["?"])
    # The outermost core function below `step` itself, or the helper.
    name = next((f for f in reversed(chain)
                 if f.startswith("diodestat_core") and not f.endswith("Controller::step")), chain[-1])
    by_fn[name] += n
print(f"{total} instructions traced")
for name, n in by_fn.most_common(15):
    print(f"  {100 * n / total:5.1f}%  {name}")
PY
qemu-system-arm -cpu cortex-m4 -machine mps2-an386 -nographic \
  -semihosting-config enable=on,target=native -icount shift=0 \
  -singlestep -d exec,nochain -dfilter "$ranges" -D "$dir/trace" \
  -kernel "$elf" >/dev/null
wait

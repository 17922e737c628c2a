#!/usr/bin/env bash
# Where `Controller::step` spends its instructions, on Cortex-M4.
#
# Runs a qemu-m4 image under QEMU with one instruction per translation
# block (-singlestep), logs every instruction executed inside `step`, the
# functions it calls and the 64-bit division helpers, and attributes each
# executed address to the core function inlined into `step` there (binutils
# `addr2line -i`, which follows inlining through the debug info).
#
#   boards/profile-step.sh          per path: the `profile-paths` image
#                                   replays a block of regulating steps and a
#                                   block of latched steps (current source
#                                   stuck high) between marker calls; only
#                                   the instructions between the markers are
#                                   counted, and divided by the steps replayed
#   boards/profile-step.sh all      every step of the full `qemu-m4` run
#                                   (all paths together, dominated by
#                                   regulating and latched steps; the
#                                   division helpers are also used by the
#                                   report code, which adds a little)
#
# Needs python3, addr2line and qemu-system-arm. Not run in CI; about 30 s
# per path mode, 2 min for `all`.
set -euo pipefail
cd "$(dirname "$0")/qemu-m4"
unset CARGO_TARGET_DIR

mode=${1:-paths}
case "$mode" in
  paths) bin=profile-paths ;;
  all) bin=qemu-m4 ;;
  *) echo "usage: $0 [paths|all]" >&2; exit 2 ;;
esac

cargo build --release --quiet --bin "$bin"
elf=target/thumbv7em-none-eabihf/release/$bin
nm=$(ls "$(rustc --print sysroot)"/lib/rustlib/*/bin/llvm-nm | head -n1)
ranges=$("$nm" -S -C "$elf" |
  awk '/Controller::step|Controller::ramp|protect::trip_values|protect::record_trips|Protections::walk|FaultLog::record|temp_table::|diodestat_profile_(begin|end)|__aeabi_ldivmod|__aeabi_uldivmod|__divmoddi4|__udivmoddi4|specialized_div_rem::u64_div_rem/ {
         printf "%s0x%s+0x%s", sep, $1, $2; sep = "," }')
markers=$("$nm" -C "$elf" | awk '/diodestat_profile_begin/ { b = "0x" $1 } /diodestat_profile_end/ { e = "0x" $1 }
  END { if (b != "" && e != "") print b, e }')
if [ "$mode" = paths ] && [ "$(wc -w <<<"$markers")" -ne 2 ]; then
  echo "profile-paths: marker functions not found in $elf" >&2
  exit 1
fi
echo "tracing $ranges"

dir=$(mktemp -d)
trap 'rm -rf "$dir"' EXIT
mkfifo "$dir/trace"
python3 - "$elf" "$dir/trace" "$mode" $markers <<'PY' &
import collections, re, subprocess, sys
elf, trace, mode = sys.argv[1], sys.argv[2], sys.argv[3]
# Steps per replayed path in `profile-paths` (BLOCK x REPLAYS).
STEPS = 200 * 10
names = {0: "regulating", 1: "latched (condition present)", 2: "fault trip (the step that latches)"}
if mode == "paths":
    begin, end = int(sys.argv[4], 16) & ~1, int(sys.argv[5], 16) & ~1
    # The marker's argument is the path; the markers alternate begin/end
    # and the paths come in order 0, 1, 2.
    per_path = [collections.Counter() for _ in names]
else:
    per_path = [collections.Counter()]
path, inside = 0, mode != "paths"
with open(trace) as f:
    for line in f:
        if not line.startswith("Trace"):
            continue
        a = int(line.split("/")[1], 16)
        if mode == "paths":
            if a == begin:
                inside = True
                continue
            if a == end:
                inside = False
                path += 1
                continue
        if inside and path < len(per_path):
            per_path[path][a] += 1
addrs = sorted(set().union(*per_path))
out = subprocess.run(["addr2line", "-a", "-i", "-f", "-C", "-e", elf] + [hex(a) for a in addrs],
                     capture_output=True, text=True, check=True).stdout.splitlines()
chains, cur, i = {}, None, 0
while i < len(out):
    if out[i].startswith("0x"):
        cur = int(out[i], 16); chains[cur] = []; i += 1
    else:
        chains[cur].append(re.sub(r"::h[0-9a-f]{16}", "", out[i])); i += 2
for p, counts in enumerate(per_path):
    total = sum(counts.values())
    by_fn = collections.Counter()
    for a, n in counts.items():
        chain = chains.get(a, ["?"])
        # The outermost core function below `step` itself, or the helper.
        name = next((f for f in reversed(chain)
                     if f.startswith("diodestat_core") and not f.endswith("Controller::step")), chain[-1])
        by_fn[name] += n
    if mode == "paths":
        print(f"== {names[p]}: {total} instructions over {STEPS} steps = {total / STEPS:.1f} per step")
    else:
        print(f"== all paths: {total} instructions traced")
    for name, n in by_fn.most_common(15):
        per = f"{n / STEPS:7.1f}" if mode == "paths" else ""
        print(f"  {100 * n / max(total, 1):5.1f}% {per}  {name}")
PY
qemu-system-arm -cpu cortex-m4 -machine mps2-an386 -nographic \
  -semihosting-config enable=on,target=native -icount shift=0 \
  -singlestep -d exec,nochain -dfilter "$ranges" -D "$dir/trace" \
  -kernel "$elf" >/dev/null
wait

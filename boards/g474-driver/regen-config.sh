#!/usr/bin/env bash
# Regenerate src/board_config.rs from the board configuration file with the
# simulator's export, so the flashed constants are the simulated ones.
# Usage: boards/g474-driver/regen-config.sh [OUT]   (default: src/board_config.rs)
# .ci/run calls it with a temporary OUT and fails when the committed file differs.
set -euo pipefail
here=$(cd "$(dirname "$0")" && pwd)
root=$(cd "$here/../.." && pwd)
board="$root/examples/demo-red-30/board.toml"
out=${1:-"$here/src/board_config.rs"}
(cd "$root" && cargo run --release --quiet -p diodestat-sim --bin diodestat -- export "$board" --out "$out")
rustfmt --edition 2021 "$out"

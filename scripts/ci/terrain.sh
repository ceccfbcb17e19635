#!/usr/bin/env bash
# Terrain kernels against hand-written numpy/scipy references on a real open DEM
# (matplotlib's Jacksboro fault DEM, a geographic 3-arc-second grid), then the
# closed-form surfaces of `terrastack verify` through the binary.
set -euo pipefail
cd "$(dirname "$0")/../.."
DIR="${XCHECK_ROOT:-$(mktemp -d)}/terrain"
python3 scripts/xcheck_terrain.py "$DIR"
TERRASTACK_XCHECK_DIR="$DIR" cargo test --release --test xcheck_terrain -- --ignored --nocapture
cargo run --release --quiet -- verify

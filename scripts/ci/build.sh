#!/usr/bin/env bash
# The demo end to end (the README's first command), then every demo stack opened with
# rasterio: georeferencing, band names and statistics against stack.json.
set -euo pipefail
cd "$(dirname "$0")/../.."
DIR="${XCHECK_ROOT:-$(mktemp -d)}/demo"
cargo run --release --quiet -- demo --out "$DIR" --quiet
# The three flights built by `build`, and the same flights built by the batch on the common grid.
python3 scripts/check_stack.py "$DIR"/[0-9]*/ "$DIR"/batch/flights/*/
# The demo's training table is classifier-ready: a random forest with the fold column as groups.
python3 scripts/sample_forest.py "$DIR/training.csv"

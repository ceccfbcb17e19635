#!/usr/bin/env bash
# `terrastack batch` on the demo manifest (three flights; the default `auto` alignment
# applies their shifts of 3–4 cells, whose estimates are confident), then its
# multi-temporal stack opened with rasterio (GDAL): dates on bands, dated bands equal to the
# flights' stacks, summaries equal to numpy's over the dated bands, known shifts recovered.
# About a minute on 2 cores with a release build.
set -euo pipefail
cd "$(dirname "$0")/../.."
OUT="${XCHECK_ROOT:-$(mktemp -d)}/batch"
rm -rf "$OUT"
cargo build --release --quiet
./target/release/terrastack batch sample-dsm/flights.toml --out "$OUT" --jobs 2
python3 scripts/xcheck_batch.py "$OUT" sample-dsm/site.json

#!/usr/bin/env bash
# Stacks as Cloud Optimized GeoTIFFs, opened with rasterio (GDAL): a flight stack with an
# aspect band at a fine resolution (overviews x2 and x4, circular aspect overviews), and
# `terrastack batch` on the demo manifest (its flights' stacks and the multi-temporal
# stack). Overviews, COG ordering, units and NaN nodata of every band, overview values
# against numpy's 2 x 2 reductions (scripts/xcheck_cog.py). About two minutes on 2 cores.
set -euo pipefail
cd "$(dirname "$0")/../.."
OUT="${XCHECK_ROOT:-$(mktemp -d)}/cog"
rm -rf "$OUT"
cargo build --release --quiet
./target/release/terrastack build --dsm sample-dsm/2026-04-23/dsm.tif \
    --features elevation,slope,aspect --scales 1 --resolution 0.04 --out "$OUT/aspect" --quiet
./target/release/terrastack batch sample-dsm/flights.toml --out "$OUT/batch" --jobs 2
python3 scripts/xcheck_cog.py "$OUT/aspect" "$OUT"/batch/flights/*/ "$OUT/batch/temporal"

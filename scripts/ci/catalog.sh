#!/usr/bin/env bash
# Cross-check of the catalogue outputs: STAC Items and the batch Collection opened by
# pystac, footprints against pyproj (rasterio.warp.transform), GeoParquet training tables
# read by geopandas and pyarrow against the CSV tables (scripts/xcheck_catalog.py).
# Uses the batch output of scripts/ci/batch.sh when it is there, else runs the batch.
set -euo pipefail
cd "$(dirname "$0")/../.."
: "${XCHECK_ROOT:?set XCHECK_ROOT to a scratch folder}"
WORK="$XCHECK_ROOT/catalog"
rm -rf "$WORK"
mkdir -p "$WORK"
cargo build --release --quiet
BATCH="$XCHECK_ROOT/batch"
if [ ! -f "$BATCH/collection.json" ]; then
    BATCH="$WORK/batch"
    ./target/release/terrastack batch sample-dsm/flights.toml --out "$BATCH" --jobs 2 > /dev/null
fi
python3 scripts/xcheck_catalog.py ./target/release/terrastack "$WORK" "$BATCH"

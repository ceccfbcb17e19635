#!/usr/bin/env bash
# GeoTIFF reader and writer against GDAL (through rasterio), both directions: files in
# every layout written by rasterio read by terrastack, and the reverse; pixels, transform,
# CRS, nodata and band names compared exactly.
set -euo pipefail
cd "$(dirname "$0")/../.."
DIR="${XCHECK_ROOT:-$(mktemp -d)}/io"
python3 scripts/xcheck_io.py gen "$DIR"
TERRASTACK_XCHECK_DIR="$DIR" cargo test --release --test xcheck_io -- --ignored --nocapture
python3 scripts/xcheck_io.py check "$DIR"

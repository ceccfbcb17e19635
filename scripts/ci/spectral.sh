#!/usr/bin/env bash
# Spectral indices against spyndex, band math against numpy, resampling against GDAL's
# warper (rasterio) on matplotlib's open DEM. Needs numpy, rasterio, matplotlib, spyndex.
set -euo pipefail
cd "$(dirname "$0")/../.."
DIR="${XCHECK_ROOT:-$(mktemp -d)}/spectral"
python3 scripts/xcheck_spectral.py gen "$DIR"
TERRASTACK_XCHECK_DIR="$DIR" cargo test --release --test xcheck_spectral -- --ignored --nocapture

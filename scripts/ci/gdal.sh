#!/usr/bin/env bash
# The `gdal` feature: warp_window and transform_points against rasterio (its own GDAL
# and PROJ) on a raster in UTM zone 32N warped onto UTM zone 33N at the zone boundary.
# Needs libgdal-dev for the build and numpy + rasterio for the reference.
set -euo pipefail
cd "$(dirname "$0")/../.."
DIR="${XCHECK_ROOT:-$(mktemp -d)}/gdal"
python3 scripts/xcheck_gdal.py gen "$DIR"
TERRASTACK_XCHECK_DIR="$DIR" cargo test --release --features gdal --test gdal_backend -- --ignored --nocapture

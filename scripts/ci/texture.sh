#!/usr/bin/env bash
# Grey-level co-occurrence texture against scikit-image (graycomatrix, graycoprops) on
# the same quantised windows, then the texture bands of a built stack. Needs numpy, scipy,
# scikit-image, rasterio.
set -euo pipefail
cd "$(dirname "$0")/../.."
DIR="${XCHECK_ROOT:-$(mktemp -d)}/texture"
python3 -c "import skimage" 2>/dev/null ||
    python3 -m pip install --quiet --disable-pip-version-check scikit-image
python3 scripts/xcheck_texture.py gen "$DIR"
TERRASTACK_XCHECK_DIR="$DIR" cargo test --release --test xcheck_texture -- --ignored --nocapture

# The texture bands of a built stack (the demo's summer flight) against scikit-image and
# numpy at sampled cells, with non-default levels, distance and range.
STACK="$DIR/stack"
rm -rf "$STACK"
cargo run --release --quiet -- build \
    --dsm sample-dsm/2026-07-08/dsm.tif --ortho sample-dsm/2026-07-08/ortho.tif \
    --bands blue=1,green=2,red=3,rededge=4,nir=5 --reflectance-scale 1/10000 --zero-is-nodata \
    --features reflectance,ndvi,glcm@0.5@nir,stddev@0.5@nir,glcm@0.3@ndvi,stddev@1@ndvi \
    --texture-range ndvi=0..1 --texture-levels 16 --texture-distance 2 \
    --out "$STACK" --quiet
python3 scripts/xcheck_texture.py stack "$STACK"

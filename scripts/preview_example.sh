#!/bin/sh
# Draws docs/preview-example.png, the preview sheet shown in the README, from the invented
# demo site (sample-dsm/, flight 2026-07-08): a stack of four smooth bands (elevation,
# TPI and roughness at 5 m, NDVI), so that the PNG stays under 200 KB; slope, aspect and
# curvature thumbnails are speckled and compress poorly. Run from inside the repository:
#   sh scripts/preview_example.sh
set -eu
cd "$(dirname "$0")/.."
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
cargo run --release --quiet -- build \
    --dsm sample-dsm/2026-07-08/dsm.tif \
    --ortho sample-dsm/2026-07-08/ortho.tif \
    --bands blue=1,green=2,red=3,rededge=4,nir=5 --reflectance-scale 1/10000 \
    --features elevation,tpi,roughness,ndvi --scales 5 \
    --date 2026-07-08 --out "$work/summer" --quiet
cp "$work/summer/preview.png" docs/preview-example.png
ls -l docs/preview-example.png

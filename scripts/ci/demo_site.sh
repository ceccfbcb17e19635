#!/usr/bin/env bash
# Cross-check of the committed demo site (sample-dsm/) read through GDAL (rasterio) with
# numpy/scipy: metadata against site.json, DSM noise, recorded georeferencing shifts
# recovered from the data, sample circles over valid cells. About a minute on 2 cores.
set -euo pipefail
cd "$(dirname "$0")/../.."
python3 scripts/check_demo_site.py sample-dsm

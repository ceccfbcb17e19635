#!/usr/bin/env bash
# Grey-level co-occurrence texture against scikit-image (graycomatrix, graycoprops) on
# the same quantised windows. Needs numpy, scipy, scikit-image.
set -euo pipefail
cd "$(dirname "$0")/../.."
DIR="${XCHECK_ROOT:-$(mktemp -d)}/texture"
python3 -c "import skimage" 2>/dev/null ||
    python3 -m pip install --quiet --disable-pip-version-check scikit-image
python3 scripts/xcheck_texture.py gen "$DIR"
TERRASTACK_XCHECK_DIR="$DIR" cargo test --release --test xcheck_texture -- --ignored --nocapture

#!/usr/bin/env python3
"""Reference values for terrastack's grey-level co-occurrence texture, from scikit-image.

    python3 scripts/xcheck_texture.py gen DIR
    TERRASTACK_XCHECK_DIR=DIR cargo test --release --test xcheck_texture -- --ignored
    python3 scripts/xcheck_texture.py stack STACK_DIR

`stack` checks the texture bands of a built stack (`glcm@R@SOURCE`, `stddev@R@SOURCE`)
against scikit-image and numpy at sampled cells: it reads the stack with rasterio, takes
each texture band's source band from the same stack (`reflectance_ROLE` or the index
band), quantises it with the range, levels and distance stack.json records, and computes
the window's features as `gen` does (co-occurrence) or numpy's population standard
deviation of the window's valid values (stddev, square window, nodata with a nodata centre
or fewer valid cells than parameters.min_valid_fraction of the window).

`gen` writes, under DIR, a float32 image (smoothed seeded noise with NaN holes and
values beyond the quantisation range), and per case (levels, range, window, distance):

* the grey levels quantised by numpy: floor((v - lo) * N / (hi - lo)) clipped to
  0..N-1, nodata as level N (uint16, little-endian);
* contrast, homogeneity, entropy and correlation of every cell's window (float64),
  from scikit-image's `graycomatrix` (symmetric) and `graycoprops` on the window's
  quantised cells. Nodata cells are an extra level N whose row and column are dropped
  from each matrix, so a pair with a nodata cell counts nowhere. The diagonal
  directions use distance d*sqrt(2), which scikit-image rounds to an offset of d cells
  on each axis. Each feature is averaged over the directions that have a pair; a window
  whose centre is nodata, or with no pair, is NaN.

Requirements: numpy, scipy, scikit-image (>= 0.25 for the 'entropy' property).
"""

import json
import os
import sys
import warnings

import numpy as np
from scipy import ndimage
from skimage.feature import graycomatrix, graycoprops

PROPS = ["contrast", "homogeneity", "entropy", "correlation"]
CASES = [
    dict(name="index8", lo=-1.0, hi=1.0, levels=8, kx=2, ky=2, distance=1),
    dict(name="refl32", lo=0.0, hi=0.5, levels=32, kx=3, ky=3, distance=2),
    dict(name="wide16", lo=-0.6, hi=0.9, levels=16, kx=4, ky=2, distance=1),
    dict(name="far5", lo=-1.0, hi=1.0, levels=5, kx=1, ky=3, distance=3),
]


def quantise(v, lo, hi, n):
    q = np.floor((v.astype(np.float64) - lo) * n / (hi - lo))
    q = np.clip(q, 0, n - 1)
    q[~np.isfinite(v)] = n
    return q.astype(np.uint16)


def window_features(win, n, d):
    """The four features of one window of levels (nodata = level n), NaN without a pair."""
    mats = [graycomatrix(win, [d], [0.0, np.pi / 2], levels=n + 1, symmetric=True),
            graycomatrix(win, [d * np.sqrt(2.0)], [np.pi / 4, 3 * np.pi / 4],
                         levels=n + 1, symmetric=True)]
    vals = []
    for m in mats:
        for a in range(2):
            p = m[:n, :n, :, a:a + 1].astype(np.float64)
            if p.sum() == 0:
                continue
            vals.append([graycoprops(p, prop)[0, 0] for prop in PROPS])
    if not vals:
        return np.full(4, np.nan)
    return np.mean(np.array(vals), axis=0)


def features(q, n, kx, ky, d):
    h, w = q.shape
    out = np.full((4, h, w), np.nan)
    for r in range(h):
        for c in range(w):
            if q[r, c] == n:
                continue
            win = q[max(0, r - ky):r + ky + 1, max(0, c - kx):c + kx + 1]
            out[:, r, c] = window_features(win, n, d)
    return out


def gen(root):
    os.makedirs(root, exist_ok=True)
    rng = np.random.default_rng(20261202)
    h, w = 36, 44
    img = ndimage.gaussian_filter(rng.normal(0.2, 0.5, (h, w)), 1.2) * 3.0
    img[rng.random((h, w)) < 0.04] = np.nan
    img[10:13, 20:24] = np.nan
    img = img.astype(np.float32)
    img.astype("<f4").tofile(os.path.join(root, "image.f32"))
    cases = []
    for case in CASES:
        q = quantise(img, case["lo"], case["hi"], case["levels"])
        q.astype("<u2").tofile(os.path.join(root, f"{case['name']}.levels.u16"))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            f = features(q, case["levels"], case["kx"], case["ky"], case["distance"])
        f.astype("<f8").tofile(os.path.join(root, f"{case['name']}.features.f64"))
        cases.append(case)
        print(f"{case['name']}: {int(np.isfinite(f[0]).sum())} cells with features")
    manifest = dict(rows=h, cols=w, features=PROPS, cases=cases,
                    source="scikit-image graycomatrix/graycoprops")
    with open(os.path.join(root, "manifest.json"), "w") as f:
        json.dump(manifest, f, indent=1)


def source_band(names, source):
    for name in (f"reflectance_{source}", source):
        if name in names:
            return names.index(name)
    sys.exit(f"the stack has no band for texture source {source!r}: add it to the features")


def check_stack(stack_dir):
    import rasterio

    meta = json.load(open(os.path.join(stack_dir, "stack.json")))
    with rasterio.open(os.path.join(stack_dir, "stack.tif")) as ds:
        data = ds.read().astype(np.float64)
    names = [b["name"] for b in meta["bands"]]
    mvf = meta["parameters"]["min_valid_fraction"]
    rng = np.random.default_rng(7)
    _, h, w = data.shape
    checked = 0
    for k, band in enumerate(meta["bands"]):
        feature = band["feature"]
        if not (feature.startswith("glcm_") or feature == "stddev"):
            continue
        src = data[source_band(names, band["source"])]
        half = band["window_px"] // 2
        # Sampled cells, the corners and edges included (windows cut by the raster).
        cells = [(0, 0), (h - 1, w - 1), (0, w // 2), (h // 2, 0)]
        cells += [tuple(x) for x in zip(rng.integers(0, h, 300), rng.integers(0, w, 300))]
        worst = 0.0
        for r, c in cells:
            got = data[k, r, c]
            if feature == "stddev":
                assert band["texture"]["window"] == "square", "the check knows square windows"
                win = src[max(0, r - half):r + half + 1, max(0, c - half):c + half + 1]
                valid = win[np.isfinite(win)]
                n_cells = (2 * half + 1) ** 2
                ok = np.isfinite(src[r, c]) and valid.size >= 1 and valid.size >= mvf * n_cells
                want = float(np.std(valid)) if ok else np.nan
                tol = 4e-6
            else:
                t = band["texture"]
                lo, hi = t["quantisation_range"]
                n = t["grey_levels"]
                kx, ky = t["window_half_px"]
                q = quantise(src[max(0, r - ky):r + ky + 1, max(0, c - kx):c + kx + 1], lo, hi, n)
                # The centre's position inside the cut window.
                rr, cc = min(r, ky), min(c, kx)
                if q[rr, cc] == n:
                    want = np.nan
                else:
                    with warnings.catch_warnings():
                        warnings.simplefilter("ignore")
                        f = window_features(q, n, t["pair_distance_px"])
                    want = f[PROPS.index(feature[len("glcm_"):])]
                tol = 2e-5 * max(1.0, abs(want)) if np.isfinite(want) else 0.0
            if np.isnan(want) != np.isnan(got):
                sys.exit(f"{band['name']} at row {r}, col {c}: terrastack {got}, reference {want}")
            if np.isfinite(want):
                worst = max(worst, abs(got - want))
                if abs(got - want) > tol:
                    sys.exit(f"{band['name']} at row {r}, col {c}: terrastack {got}, reference {want}")
        checked += 1
        print(f"{band['name']}: {len(cells)} cells equal the reference (largest difference {worst:.2e})")
    if checked == 0:
        sys.exit(f"{stack_dir}: no texture band to check")


if __name__ == "__main__":
    if len(sys.argv) != 3 or sys.argv[1] not in ("gen", "stack"):
        sys.exit(__doc__)
    if sys.argv[1] == "gen":
        gen(sys.argv[2])
    else:
        check_stack(sys.argv[2])

#!/usr/bin/env python3
"""Resampling speed of terrastack against GDAL's warper and scipy, in one run.

    python3 scripts/bench_resample.py [--skip-cargo]

Runs `cargo bench --bench resample` (criterion; a 2000 x 2000 float32 source onto grids
of 0.8x and 1.25x its cell size), then times the same resampling done the hand-written
Python way on the same surface and grids:

* `rasterio.warp.reproject` (GDAL's warper) with the same method, as many threads as
  terrastack's rayon pool (all cores), XSCALE/YSCALE = 1 for bilinear and cubic so the
  kernel is the same as terrastack's;
* `scipy.ndimage.map_coordinates` (order 0 and 1) for nearest and bilinear.

Prints, per method and grid, how many times longer the Python way takes than terrastack
(ratio > 1: terrastack is faster). `--skip-cargo` reuses the last criterion results.
Requirements: numpy, scipy, rasterio.
"""

import json
import os
import subprocess
import sys
import time

import numpy as np

N = 2000
ORIGIN = (500_000.0, 4_000_000.0)
RATIOS = [0.8, 1.25]
METHODS = ["nearest", "bilinear", "cubic", "average"]
ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def surface():
    # Same surface as benches/resample.rs: 300 + 100 sin(r/97) + 50 cos(c/61).
    r = np.arange(N, dtype=np.float64)[:, None]
    c = np.arange(N, dtype=np.float64)[None, :]
    return (300.0 + 100.0 * np.sin(r / 97.0) + 50.0 * np.cos(c / 61.0)).astype(np.float32)


def target_size(ratio):
    return int(np.floor((N - 1.0) / ratio))


def best_of(fn, repeats=3):
    best = float("inf")
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def criterion_seconds(method, ratio):
    path = os.path.join(ROOT, "target", "criterion", "resample", method, "x{}".format(ratio), "new", "estimates.json")
    with open(path) as f:
        return json.load(f)["mean"]["point_estimate"] * 1e-9


def main():
    if "--skip-cargo" not in sys.argv:
        subprocess.run(["cargo", "bench", "--bench", "resample", "--", "--noplot"], cwd=ROOT, check=True)

    from rasterio.crs import CRS
    from rasterio.transform import Affine
    from rasterio.warp import Resampling, reproject
    from scipy import ndimage

    z = surface()
    crs = CRS.from_epsg(32633)
    src_t = Affine(1.0, 0.0, ORIGIN[0], 0.0, -1.0, ORIGIN[1])
    threads = os.cpu_count() or 1
    rows = []
    for ratio in RATIOS:
        n = target_size(ratio)
        dst_t = Affine(ratio, 0.0, ORIGIN[0] + 1.0 / 3.0, 0.0, -ratio, ORIGIN[1] - 1.0 / 3.0)
        # Source positions of target centres, for scipy (cell centres at integer indices).
        centres = 1.0 / 3.0 + (np.arange(n) + 0.5) * ratio - 0.5
        rr, cc = np.meshgrid(centres, centres, indexing="ij")
        for method in METHODS:
            dst = np.empty((n, n), dtype=np.float32)
            options = {"XSCALE": 1, "YSCALE": 1} if method in ("bilinear", "cubic") else {}

            def warp():
                reproject(
                    source=z,
                    destination=dst,
                    src_transform=src_t,
                    src_crs=crs,
                    src_nodata=np.nan,
                    dst_transform=dst_t,
                    dst_crs=crs,
                    dst_nodata=np.nan,
                    resampling=getattr(Resampling, method),
                    num_threads=threads,
                    **options,
                )

            ours = criterion_seconds(method, ratio)
            gdal = best_of(warp)
            scipy_ratio = None
            if method in ("nearest", "bilinear"):
                order = 0 if method == "nearest" else 1
                coords = np.stack([rr, cc])
                t = best_of(lambda: ndimage.map_coordinates(z, coords, order=order, mode="constant", cval=np.nan))
                scipy_ratio = t / ours
            rows.append((method, ratio, n, gdal / ours, scipy_ratio))

    print()
    print("resampling 2000 x 2000 float32; ratio = Python-way time / terrastack time ({} threads)".format(threads))
    print("{:<9} {:>6} {:>11} {:>16} {:>20}".format("method", "cell", "target", "rasterio/GDAL", "scipy map_coords"))
    for method, ratio, n, g, s in rows:
        sc = "{:>19.2f}x".format(s) if s is not None else "{:>20}".format("-")
        print("{:<9} {:>5}x {:>5}x{:<5} {:>15.2f}x {}".format(method, ratio, n, n, g, sc))


if __name__ == "__main__":
    main()

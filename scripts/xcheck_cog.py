#!/usr/bin/env python3
"""Cross-check of stacks' Cloud Optimized GeoTIFF layout and band metadata with GDAL
(through rasterio) and numpy.

Usage: xcheck_cog.py STACK_DIR [STACK_DIR ...]   (folders holding stack.tif + stack.json)

Checks, each against an independent computation:
- GDAL lists overviews on every band, factors 2, 4, 8, ... down to the first level that
  fits one tile (OGC 21-026, requirement "optimized_geotiff/number"), each level the
  full size halved and rounded up;
- GDAL reads the COG ordering from the file (its TIFF metadata domain): the full
  resolution's IFD at byte 8 (16 in BigTIFF), the overview IFDs after it, the first tile
  of each smaller overview before that of the larger, the full resolution's last;
- every band's units (GDAL's unit type) equal stack.json's, and the nodata value GDAL
  reports is NaN on every band;
- every overview level equals numpy's reduction of the level above, read by GDAL:
  np.nanmean over each 2 x 2 block for most bands, the mean direction
  atan2(sum sin, sum cos) for aspect (angles, within 1e-3 degrees), the first valid
  value for date indices (argmax_date); NaN exactly where the 2 x 2 block is all NaN.
Exit status 1 with a message on the first failed check.
"""
import json
import math
import sys
import warnings
from pathlib import Path

import numpy as np
import rasterio


def fail(msg):
    print(f"FAIL: {msg}")
    sys.exit(1)


def blocks(a):
    """(h2, w2, 4) view of the 2 x 2 blocks of `a`, padded with NaN to even size, in the
    order upper left, upper right, lower left, lower right."""
    h, w = a.shape
    p = np.full((h + h % 2, w + w % 2), np.nan, dtype=np.float64)
    p[:h, :w] = a
    return np.stack([p[0::2, 0::2], p[0::2, 1::2], p[1::2, 0::2], p[1::2, 1::2]], axis=-1)


def kind(band):
    summary = band.get("summary")
    if summary == "argmax_date":
        return "nearest"
    if band.get("feature") == "aspect" and summary not in ("amplitude", "std"):
        return "circular"
    return "average"


def reduce(a, how):
    b = blocks(a)
    valid = ~np.isnan(b)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        if how == "average":
            return np.nanmean(b, axis=-1), None
        if how == "nearest":
            first = np.argmax(valid, axis=-1)
            out = np.take_along_axis(b, first[..., None], axis=-1)[..., 0]
            return np.where(valid.any(axis=-1), out, np.nan), None
        rad = np.deg2rad(b)
        s = np.nansum(np.sin(rad), axis=-1)
        c = np.nansum(np.cos(rad), axis=-1)
        n = valid.sum(axis=-1)
        deg = np.mod(np.rad2deg(np.arctan2(s, c)), 360.0)
        # Directions that (nearly) cancel have no mean direction: not compared.
        undefined = np.hypot(s, c) < 1e-6 * np.maximum(n, 1)
        return np.where(n > 0, deg, np.nan), undefined


def check_stack(folder):
    folder = Path(folder)
    tif = folder / "stack.tif"
    meta = json.loads((folder / "stack.json").read_text())
    bands = meta["bands"]
    with rasterio.open(tif) as ds:
        tile = ds.block_shapes[0][0]
        w, h = ds.width, ds.height
        expected = []
        f, lw, lh = 1, w, h
        while lw > tile or lh > tile:
            f *= 2
            lw, lh = (lw + 1) // 2, (lh + 1) // 2
            expected.append(f)
        for b in range(1, ds.count + 1):
            if ds.overviews(b) != expected:
                fail(f"{tif} band {b}: overviews {ds.overviews(b)}, expected {expected}")
        units = list(ds.units)
        if units != [x["units"] for x in bands]:
            fail(f"{tif}: units {units} differ from stack.json")
        if ds.nodata is None or not all(v is not None and math.isnan(v) for v in ds.nodatavals):
            fail(f"{tif}: nodata {ds.nodatavals}, expected NaN on every band")
        ifd = [int(ds.get_tag_item("IFD_OFFSET", "TIFF", bidx=1))]
        first = [int(ds.get_tag_item("BLOCK_OFFSET_0_0", "TIFF", bidx=1))]
        for k in range(len(expected)):
            ifd.append(int(ds.get_tag_item("IFD_OFFSET", "TIFF", bidx=1, ovr=k)))
            first.append(int(ds.get_tag_item("BLOCK_OFFSET_0_0", "TIFF", bidx=1, ovr=k)))
        big = open(tif, "rb").read(4)[2] == 43
        if ifd[0] != (16 if big else 8):
            fail(f"{tif}: the full resolution's IFD is at byte {ifd[0]}")
        if ifd != sorted(ifd) or max(ifd) >= min(first):
            fail(f"{tif}: IFDs at {ifd} do not all precede the tile data (first tiles {first})")
        if first != sorted(first, reverse=True):
            fail(f"{tif}: first tiles at {first}: not smallest overview first, full resolution last")
        above = ds.read().astype(np.float64)
    for k, factor in enumerate(expected):
        with rasterio.open(tif, overview_level=k) as ov:
            got = ov.read().astype(np.float64)
        want_shape = ((above.shape[1] + 1) // 2, (above.shape[2] + 1) // 2)
        if got.shape[1:] != want_shape:
            fail(f"{tif} overview x{factor}: {got.shape[1:]}, expected {want_shape}")
        for i, band in enumerate(bands):
            how = kind(band)
            ref, undefined = reduce(above[i], how)
            g = got[i]
            if not np.array_equal(np.isnan(g), np.isnan(ref)) and how != "circular":
                fail(f"{tif} overview x{factor} band {band['name']}: NaN cells differ")
            if how == "circular":
                both = ~np.isnan(ref) & ~undefined
                if np.isnan(g[both]).any():
                    fail(f"{tif} overview x{factor} band {band['name']}: NaN where a direction exists")
                d = np.abs(g[both] - ref[both]) % 360.0
                err = np.minimum(d, 360.0 - d).max(initial=0.0)
                if err > 1e-3:
                    fail(f"{tif} overview x{factor} band {band['name']}: directions differ by {err} degrees")
            else:
                ok = ~np.isnan(ref)
                if not np.allclose(g[ok], ref[ok], rtol=1e-5, atol=1e-6):
                    worst = np.abs(g[ok] - ref[ok]).max()
                    fail(f"{tif} overview x{factor} band {band['name']} ({how}): differs by up to {worst}")
        above = got
    kinds = sorted({kind(b) for b in bands})
    print(f"{tif}: {len(bands)} bands, overviews {expected} ({', '.join(kinds)}), units and NaN nodata: ok")


def main(folders):
    if not folders:
        fail("no stack folder given")
    for f in folders:
        check_stack(f)
    print("COG cross-check passed")


if __name__ == "__main__":
    main(sys.argv[1:])

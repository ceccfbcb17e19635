#!/usr/bin/env python3
"""Cross-check of a `terrastack batch` output root with GDAL (through rasterio) and numpy.

Usage: xcheck_batch.py OUT_ROOT SITE_JSON

Checks, each against an independent computation:
- the multi-temporal stack opens in GDAL (rasterio); band count, descriptions and
  geotransform agree with its stack.json;
- every dated band carries its date (name suffix and `date` field) and equals, bit for bit,
  the band of that flight's own stack.tif;
- every summary band equals numpy's nan-aware reduction over the dated bands it summarises
  (np.nanmean, np.nanmin, np.nanmax, max - min, np.nanstd with ddof=0, np.nanargmax into
  the ascending dates), with NaN exactly where every date is NaN;
- the shifts in batch-report.json match the demo generator's known shifts (site.json
  `shift_m`) within a quarter of a cell, and the default alignment applied them.
Exit status 1 with a message on the first failed check.
"""
import json
import sys
import warnings
from pathlib import Path

import numpy as np
import rasterio


def fail(msg):
    print(f"FAIL: {msg}")
    sys.exit(1)


def main(root, site_path):
    root = Path(root)
    site = json.loads(Path(site_path).read_text())
    meta = json.loads((root / "temporal" / "stack.json").read_text())
    report = json.loads((root / "batch-report.json").read_text())
    with rasterio.open(root / "temporal" / "stack.tif") as ds:
        data = ds.read().astype(np.float32)
        descriptions = list(ds.descriptions)
        transform = ds.transform.to_gdal()
    bands = meta["bands"]
    if len(bands) != data.shape[0]:
        fail(f"{data.shape[0]} bands in stack.tif, {len(bands)} in stack.json")
    if descriptions != [b["name"] for b in bands]:
        fail("band descriptions differ from stack.json names")
    if not np.allclose(transform, meta["grid"]["transform"], rtol=0, atol=1e-9):
        fail(f"geotransform {transform} differs from stack.json {meta['grid']['transform']}")

    dated = [b for b in bands if b.get("date")]
    dates = sorted({b["date"] for b in dated})
    print(f"{len(dated)} dated bands over {len(dates)} dates, {len(bands) - len(dated)} summaries")
    flights = {f["id"]: f for f in report["flights"]}
    stacks = {}
    for b in dated:
        # Dated band names end with the date as digits (identifiers: ndvi_20260708).
        compact = b["date"].replace("-", "")
        if not b["name"].endswith("_" + compact):
            fail(f"band {b['name']} does not end with its date {compact}")
        fid = b["flight"]
        if fid not in stacks:
            with rasterio.open(root / "flights" / fid / "stack.tif") as ds:
                stacks[fid] = (ds.read().astype(np.float32), list(ds.descriptions))
        arr, names = stacks[fid]
        own = b["name"][: -len(compact) - 1]
        mine = arr[names.index(own)]
        got = data[b["index"] - 1]
        if not np.array_equal(mine.view(np.uint32), got.view(np.uint32)):
            fail(f"dated band {b['name']} differs from {fid}'s {own}")

    checked = 0
    for b in bands:
        kind = b.get("summary")
        if kind is None:
            continue
        name = b["summarises"]
        series = sorted(
            (x for x in dated if x["name"] == f"{name}_{x['date'].replace('-', '')}"), key=lambda x: x["date"]
        )
        if [x["date"] for x in series] != b["dates"]:
            fail(f"{b['name']}: dates {b['dates']} differ from the dated bands")
        cube = np.stack([data[x["index"] - 1] for x in series]).astype(np.float64)
        empty = np.all(np.isnan(cube), axis=0)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            if kind == "mean":
                want = np.nanmean(cube, axis=0)
            elif kind == "min":
                want = np.nanmin(cube, axis=0)
            elif kind == "max":
                want = np.nanmax(cube, axis=0)
            elif kind == "amplitude":
                want = np.nanmax(cube, axis=0) - np.nanmin(cube, axis=0)
            elif kind == "std":
                want = np.nanstd(cube, axis=0, ddof=0)
            elif kind == "argmax_date":
                want = np.nanargmax(np.where(empty, 0.0, cube), axis=0).astype(np.float64)
                want[empty] = np.nan
            else:
                fail(f"unknown summary {kind}")
        got = data[b["index"] - 1].astype(np.float64)
        if not np.array_equal(np.isnan(got), np.isnan(want)):
            fail(f"{b['name']}: NaN cells differ from numpy's")
        ok = ~np.isnan(want)
        if kind == "argmax_date":
            bad = np.count_nonzero(got[ok] != want[ok])
            if bad:
                fail(f"{b['name']}: {bad} cells differ from np.nanargmax")
        else:
            err = np.abs(got[ok] - want[ok])
            tol = 1e-5 * np.maximum(1.0, np.abs(want[ok]))
            if np.any(err > tol):
                fail(f"{b['name']}: largest difference from numpy {err.max():.3g}")
        checked += 1
    print(f"{checked} summary bands equal numpy's over the dated bands")

    cell = meta["grid"]["transform"][1]
    for entry in site["flights"]:
        f = next((x for x in report["flights"] if x["date"] == entry["date"]), None)
        if f is None:
            fail(f"no flight dated {entry['date']} in the report")
        dx, dy = entry["shift_m"]
        if f["id"] == report["reference"]:
            continue
        got = f["shift"]
        if abs(got["dx"] - dx) > 0.25 * cell or abs(got["dy"] - dy) > 0.25 * cell:
            fail(f"{f['id']}: shift ({got['dx']:.3f}, {got['dy']:.3f}) vs known ({dx}, {dy})")
        # The demo's shifts are 3-4 cells with clear peaks: the default (auto) applies them.
        if not (got["applied"] and got["confident"]):
            fail(f"{f['id']}: shift not applied under {report['alignment']['mode']}: {got['reason']}")
        print(f"{f['id']}: shift ({got['dx']:+.3f}, {got['dy']:+.3f}) m, known ({dx:+.2f}, {dy:+.2f}) m")
    print("batch cross-check passed")


if __name__ == "__main__":
    if len(sys.argv) != 3:
        print(__doc__)
        sys.exit(2)
    main(sys.argv[1], sys.argv[2])

#!/usr/bin/env python3
"""Time `terrastack sample` against the hand-written rasterio/numpy way, in one run.

Usage: python3 scripts/bench_sample.py TERRASTACK_BINARY [--size N] [--bands B] [--samples S]

Makes a float32 stack (N x N cells of 0.5 m, B bands, tiled 512, deflate with the
floating-point predictor) and S circles of 1-5 m radius, then times:
  - terrastack: `terrastack sample` (reads only the tiles the circles touch);
  - windowed: rasterio, one window read per circle (all bands), numpy circle mask, CSV;
  - whole: rasterio reading every band whole, numpy circle masks, CSV.
Both hand-written ways write the same columns as terrastack. Prints wall-clock and CPU
seconds (user + system; the fairer measure on a busy machine) and the ratios
hand-written / terrastack (above 1: terrastack is faster). Invented data.
"""

import argparse
import csv
import json
import os
import resource
import subprocess
import tempfile
import time

import numpy as np
import rasterio
from rasterio.transform import from_origin
from rasterio.windows import Window


def make(work, n, bands, count, rng):
    res, x0, y0 = 0.5, 700_000.0, 5_600_000.0
    names = [f"band{b}" for b in range(1, bands + 1)]
    profile = dict(driver="GTiff", width=n, height=n, count=bands, dtype="float32",
                   crs="EPSG:32633", transform=from_origin(x0, y0, res, res), nodata=np.nan,
                   tiled=True, blockxsize=512, blockysize=512, compress="deflate", predictor=3)
    os.makedirs(f"{work}/stack")
    with rasterio.open(f"{work}/stack/stack.tif", "w", **profile) as ds:
        for b in range(1, bands + 1):
            ds.write(rng.normal(0, 1, (n, n)).astype(np.float32), b)
            ds.set_band_description(b, names[b - 1])
    stats = dict(min=None, max=None, mean=None, std=None, valid_fraction=1.0)
    meta = {"format": "terrastack-stack/1",
            "grid": {"width": n, "height": n, "transform": [x0, res, 0.0, y0, 0.0, -res],
                     "crs": {"epsg": 32633, "wkt": None}},
            "nodata": "NaN",
            "bands": [dict(index=i, name=nm, feature="elevation", method=None, scale_m=None,
                           window_px=None, units="metres", source="dsm", date=None, stats=stats)
                      for i, nm in enumerate(names, 1)],
            "sources": [], "parameters": {}, "software": {"name": "terrastack", "version": "0"}}
    json.dump(meta, open(f"{work}/stack/stack.json", "w"))
    samples = []
    with open(f"{work}/samples.csv", "w") as f:
        f.write("id,x,y,class,radius_m\n")
        for i in range(count):
            x = x0 + rng.uniform(10, n * res - 10)
            y = y0 - rng.uniform(10, n * res - 10)
            r = rng.uniform(1, 5)
            samples.append((f"s{i}", x, y, f"c{i % 5}", r))
            f.write(f"s{i},{x!r},{y!r},c{i % 5},{r!r}\n")
    return samples


def write_rows(path, names, rows):
    with open(path, "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(["sample_id", "class", "x", "y", "fold"] + names)
        w.writerows(rows)


def circle_rows(s, vals, cx, cy):
    sid, x, y, cls, r = s
    inside = (cx - x) ** 2 + (cy - y) ** 2 <= r * r
    v = vals[:, inside]
    ok = ~np.isnan(v).any(axis=0)
    return [[sid, cls, a, b, 1, *map(float, col)]
            for a, b, col in zip(cx[inside][ok], cy[inside][ok], v[:, ok].T)]


def windowed(work, samples):
    rows = []
    with rasterio.open(f"{work}/stack/stack.tif") as ds:
        t = ds.transform
        for s in samples:
            _, x, y, _, r = s
            c0, r0 = int((x - r - t.c) // t.a), int((t.f - (y + r)) // -t.e)
            c1, r1 = int((x + r - t.c) // t.a) + 1, int((t.f - (y - r)) // -t.e) + 1
            win = Window(c0, r0, c1 - c0, r1 - r0)
            vals = ds.read(window=win)
            cols, rws = np.meshgrid(np.arange(c0, c1), np.arange(r0, r1))
            cx, cy = t * (cols + 0.5, rws + 0.5)
            rows += circle_rows(s, vals, cx, cy)
        names = list(ds.descriptions)
    write_rows(f"{work}/windowed.csv", names, rows)
    return len(rows)


def whole(work, samples):
    rows = []
    with rasterio.open(f"{work}/stack/stack.tif") as ds:
        t = ds.transform
        data = ds.read()
        names = list(ds.descriptions)
    for s in samples:
        _, x, y, _, r = s
        c0, r0 = int((x - r - t.c) // t.a), int((t.f - (y + r)) // -t.e)
        c1, r1 = int((x + r - t.c) // t.a) + 1, int((t.f - (y - r)) // -t.e) + 1
        cols, rws = np.meshgrid(np.arange(c0, c1), np.arange(r0, r1))
        cx, cy = t * (cols + 0.5, rws + 0.5)
        rows += circle_rows(s, data[:, r0:r1, c0:c1], cx, cy)
    write_rows(f"{work}/whole.csv", names, rows)
    return len(rows)


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("terrastack")
    ap.add_argument("--size", type=int, default=4096)
    ap.add_argument("--bands", type=int, default=6)
    ap.add_argument("--samples", type=int, default=2000)
    a = ap.parse_args()
    rng = np.random.default_rng(5)
    with tempfile.TemporaryDirectory() as work:
        samples = make(work, a.size, a.bands, a.samples, rng)
        def child_cpu():
            r = resource.getrusage(resource.RUSAGE_CHILDREN)
            return r.ru_utime + r.ru_stime

        t0, c0 = time.perf_counter(), child_cpu()
        subprocess.run([a.terrastack, "sample", "--stack", f"{work}/stack", "--samples",
                        f"{work}/samples.csv", "--out", f"{work}/ts.csv"],
                       check=True, stdout=subprocess.DEVNULL)
        t_ts, c_ts = time.perf_counter() - t0, child_cpu() - c0
        n_ts = sum(1 for _ in open(f"{work}/ts.csv")) - 1
        t0, c0 = time.perf_counter(), time.process_time()
        n_win = windowed(work, samples)
        t_win, c_win = time.perf_counter() - t0, time.process_time() - c0
        t0, c0 = time.perf_counter(), time.process_time()
        n_whole = whole(work, samples)
        t_whole, c_whole = time.perf_counter() - t0, time.process_time() - c0
    assert n_ts == n_win == n_whole, (n_ts, n_win, n_whole)
    print(f"{a.size}x{a.size} cells, {a.bands} bands, {a.samples} circles, {n_ts} rows")
    print("                     wall s   ratio    CPU s   ratio")
    print(f"terrastack sample  {t_ts:8.3f}          {c_ts:8.3f}")
    for name, t, c in [("rasterio windowed", t_win, c_win), ("rasterio whole", t_whole, c_whole)]:
        print(f"{name:18} {t:8.3f} {t / t_ts:7.2f} {c:8.3f} {c / c_ts:7.2f}")

if __name__ == "__main__":
    main()

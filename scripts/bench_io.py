#!/usr/bin/env python3
"""GeoTIFF I/O throughput: terrastack (criterion, benches/io.rs) against rasterio (GDAL).

    python3 scripts/bench_io.py [--skip-cargo] [--repeats N]

Runs `cargo bench --bench io`, which writes and reads a generated float32 DSM (4096 x 4096
by default; TERRASTACK_BENCH_IO_SIZE changes it) tiled 512 x 512, Deflate with the
floating-point predictor and uncompressed, and leaves the files in target/bench-io/. Then
times rasterio writing the same array with the same creation options and reading the same
files, in this run, and prints MB/s (10^6 bytes of raster per second) for both and the
ratio terrastack / rasterio (above 1: terrastack is faster).

GDAL is timed twice: with its defaults (one thread) and with NUM_THREADS=ALL_CPUS, since
terrastack compresses and decompresses blocks on all cores.
"""

import argparse
import json
import os
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import rasterio

ROOT = Path(__file__).resolve().parent.parent
TARGET = Path(os.environ.get("CARGO_TARGET_DIR", ROOT / "target"))
FILES = TARGET / "bench-io"
CASES = {
    "deflate_pred3": dict(compress="deflate", predictor=3, zlevel=6),
    "none": dict(),
}


def criterion_seconds(group, name):
    est = TARGET / "criterion" / group / name / "new" / "estimates.json"
    return json.loads(est.read_text())["mean"]["point_estimate"] / 1e9


def timed(fn, repeats):
    """Mean wall time of `repeats` calls after one warm-up call."""
    fn()
    t0 = time.perf_counter()
    for _ in range(repeats):
        fn()
    return (time.perf_counter() - t0) / repeats


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--skip-cargo", action="store_true",
                    help="use the criterion estimates already in target/criterion")
    ap.add_argument("--repeats", type=int, default=5)
    args = ap.parse_args()
    if not args.skip_cargo:
        subprocess.run(["cargo", "bench", "--bench", "io", "--", "--measurement-time", "10"],
                       cwd=ROOT, check=True)

    rows = []
    for name, opts in CASES.items():
        path = FILES / f"dsm_{name}.tif"
        with rasterio.open(path) as d:
            profile = d.profile
            data = d.read(1)
        nbytes = data.nbytes
        out = FILES / f"rasterio_{name}.tif"
        base = dict(driver="GTiff", width=profile["width"], height=profile["height"], count=1,
                    dtype="float32", crs=profile["crs"], transform=profile["transform"],
                    nodata=profile["nodata"], tiled=True, blockxsize=512, blockysize=512,
                    interleave="band", **opts)

        def write(threads):
            extra = {"num_threads": "ALL_CPUS"} if threads else {}

            def go():
                with rasterio.open(out, "w", **base, **extra) as d:
                    d.write(data, 1)
            return go

        def read(threads):
            def go():
                with rasterio.open(path, num_threads="ALL_CPUS") if threads else rasterio.open(path) as d:
                    d.read(1)
            return go

        for op, group, fn in [("write", "io_write", write), ("read", "io_read", read)]:
            ours = nbytes / criterion_seconds(group, name) / 1e6
            gdal1 = nbytes / timed(fn(False), args.repeats) / 1e6
            gdaln = nbytes / timed(fn(True), args.repeats) / 1e6
            rows.append((f"{op} {name}", ours, gdal1, gdaln))

    side = int(np.sqrt(nbytes / 4))
    print(f"\nGeoTIFF I/O, float32 {side} x {side}, tiles 512 x 512 "
          f"(rasterio {rasterio.__version__}, GDAL {rasterio.__gdal_version__}, {os.cpu_count()} CPUs)")
    print(f"{'operation':<22}{'terrastack MB/s':>16}{'GDAL MB/s':>12}{'ratio':>8}"
          f"{'GDAL all-CPU MB/s':>19}{'ratio':>8}")
    for op, ours, gdal1, gdaln in rows:
        print(f"{op:<22}{ours:>16.1f}{gdal1:>12.1f}{ours / gdal1:>8.2f}{gdaln:>19.1f}{ours / gdaln:>8.2f}")
    # Issue #13 target 4: read and write at least GDAL's throughput on the same files
    # (terrastack on all cores against GDAL with NUM_THREADS=ALL_CPUS).
    for op, ours, gdal1, gdaln in rows:
        print(f"target: {op} at least GDAL's throughput: {ours / gdaln:.2f}x GDAL all-CPU, "
              f"{'met' if ours >= gdaln else 'NOT met'}")
    return 0


if __name__ == "__main__":
    sys.exit(main())

#!/usr/bin/env python3
"""Terrain speed comparison: terrastack's criterion benchmarks against the hand-written
numpy/scipy way, timed in the same run on the same synthetic DSM (formula shared with
benches/terrain.rs), printing Mpx/s for both and the ratios.

Usage: python3 scripts/bench_terrain.py [--size N] [--skip-cargo]

--size sets the DSM side (default 4000, as in the benchmark); --skip-cargo reads existing
criterion estimates from target/criterion instead of running `cargo bench`.

The numpy/scipy way (what an analyst would write):
- 3x3 set: Horn p, q by array slicing; slope, aspect, northness, eastness; Evans-Young
  p, q, r, s, t; five curvatures; TRI. float64, no nodata handling beyond NaN propagation.
- square windows: scipy.ndimage.uniform_filter for mean and mean of squares,
  scipy.ndimage.minimum_filter for the minimum (both separable, O(1) per cell in r).
- disc windows: scipy.signal.fftconvolve with a disc kernel for the sums (O(log N) per
  cell), scipy.ndimage.minimum_filter with a disc footprint for the minimum (O(r^2) per
  cell; skipped when the footprint exceeds 40 000 cells, reported as not timed).
Each Python case is timed once (best of `--repeat`, default 1) on the same output size as
the Rust case. Report ratios, not absolute times: the machine is shared.
"""

import argparse
import json
import os
import subprocess
import sys
import time

import numpy as np
from scipy import ndimage, signal

H = 0.05
ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def dsm(size, halo=0):
    n = size + 2 * halo
    idx = (np.arange(n) - halo) * H
    x = idx[None, :]
    y = idx[:, None]
    return (
        120.0
        + 3.0 * np.sin(x / 37.0) * np.cos(y / 23.0)
        + 0.4 * np.sin(x / 3.1 + y / 4.3)
        + 0.05 * np.sin(x * 12.9898 + y * 78.233)
    ).astype(np.float32)


def numpy_3x3(z32):
    z = z32.astype(np.float64)
    z1, z2, z3 = z[:-2, :-2], z[:-2, 1:-1], z[:-2, 2:]
    z4, z5, z6 = z[1:-1, :-2], z[1:-1, 1:-1], z[1:-1, 2:]
    z7, z8, z9 = z[2:, :-2], z[2:, 1:-1], z[2:, 2:]
    p = ((z3 + 2 * z6 + z9) - (z1 + 2 * z4 + z7)) / (8 * H)
    q = ((z1 + 2 * z2 + z3) - (z7 + 2 * z8 + z9)) / (8 * H)
    g = np.hypot(p, q)
    slope = np.degrees(np.arctan(g))
    aspect = np.mod(np.degrees(np.arctan2(-p, -q)), 360.0)
    aspect[g == 0] = np.nan
    with np.errstate(invalid="ignore", divide="ignore"):
        north = np.where(g == 0, 0.0, -q / g)
        east = np.where(g == 0, 0.0, -p / g)
        pe = (z3 + z6 + z9 - z1 - z4 - z7) / (6 * H)
        qe = (z1 + z2 + z3 - z7 - z8 - z9) / (6 * H)
        r = (z1 + z3 + z4 + z6 + z7 + z9 - 2 * (z2 + z5 + z8)) / (3 * H * H)
        t = (z1 + z2 + z3 + z7 + z8 + z9 - 2 * (z4 + z5 + z6)) / (3 * H * H)
        s = (z3 + z7 - z1 - z9) / (4 * H * H)
        g2 = pe * pe + qe * qe
        w = 1 + g2
        kn = -(pe * pe * r + 2 * pe * qe * s + qe * qe * t) / (g2 * w**1.5)
        num_t = qe * qe * r - 2 * pe * qe * s + pe * pe * t
        kt = -num_t / (g2 * np.sqrt(w))
        kc = -num_t / g2**1.5
        hm = -((1 + qe * qe) * r - 2 * pe * qe * s + (1 + pe * pe) * t) / (2 * w**1.5)
        kg = (r * t - s * s) / (w * w)
    tri = np.sqrt(sum((v - z5) ** 2 for v in (z1, z2, z3, z4, z6, z7, z8, z9)))
    return [slope, aspect, north, east, kn, kt, kc, hm, kg, tri]


def numpy_square(z32, k):
    z = z32.astype(np.float64)
    size = 2 * k + 1
    mean = ndimage.uniform_filter(z, size=size, mode="nearest")
    sq = ndimage.uniform_filter(z * z, size=size, mode="nearest")
    tpi = z - mean
    rough = np.sqrt(np.maximum(sq - mean * mean, 0.0))
    rel = z - ndimage.minimum_filter(z, size=size, mode="nearest")
    return tpi, rough, rel


def disc(k):
    yy, xx = np.mgrid[-k : k + 1, -k : k + 1]
    return (xx * xx + yy * yy) <= k * k * (1 + 1e-9)


def numpy_disc(z32, k, with_min):
    z = z32.astype(np.float64)
    fp = disc(k)
    w = fp.astype(np.float64) / fp.sum()
    mean = signal.fftconvolve(z, w, mode="same")
    sq = signal.fftconvolve(z * z, w, mode="same")
    tpi = z - mean
    rough = np.sqrt(np.maximum(sq - mean * mean, 0.0))
    rel = z - ndimage.minimum_filter(z, footprint=fp, mode="nearest") if with_min else None
    return tpi, rough, rel


def timed(fn, repeat):
    best = float("inf")
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def criterion_seconds(group, bench):
    path = os.path.join(ROOT, "target", "criterion", group, bench, "new", "estimates.json")
    with open(path) as fh:
        est = json.load(fh)
    return est["mean"]["point_estimate"] * 1e-9


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--size", type=int, default=4000)
    ap.add_argument("--skip-cargo", action="store_true")
    ap.add_argument("--repeat", type=int, default=1)
    args = ap.parse_args()
    n = args.size
    nd = n // 8

    if not args.skip_cargo:
        env = dict(os.environ, TERRASTACK_BENCH_SIZE=str(n))
        subprocess.run(
            ["cargo", "bench", "--bench", "terrain", "--", "--noplot"],
            cwd=ROOT, env=env, check=True,
        )

    rows = []
    z = dsm(n, 1)
    t_np = timed(lambda: numpy_3x3(z), args.repeat)
    rows.append(("3x3 set (10 bands)", n, criterion_seconds("terrain_3x3", "set"), t_np, "numpy slicing"))
    del z

    rust_sq = {}
    rust_disc = {}
    for r in (0.5, 5.0, 25.0):
        k = int(np.floor(r / H * (1 + 1e-9)))
        z = dsm(n)
        t_np = timed(lambda: numpy_square(z, k), args.repeat)
        t_rs = criterion_seconds("terrain_square", f"r{r:g}m")
        rust_sq[r] = t_rs
        rows.append((f"square r={r:g} m (TPI, roughness, rel. elev.)", n, t_rs, t_np, "uniform_filter + minimum_filter"))
        zd = dsm(nd)
        with_min = disc(k).sum() <= 40000
        t_np = timed(lambda: numpy_disc(zd, k, with_min), args.repeat)
        t_rs = criterion_seconds("terrain_disc", f"r{r:g}m")
        rust_disc[r] = t_rs
        how = "fftconvolve + minimum_filter(footprint)" if with_min else "fftconvolve only (min filter not timed)"
        rows.append((f"disc r={r:g} m (TPI, roughness, rel. elev.)", nd, t_rs, t_np, how))

    print()
    print(f"{'case':<46} {'cells':>11} {'rust Mpx/s':>11} {'numpy Mpx/s':>12} {'ratio':>7}  numpy way")
    for name, side, t_rs, t_np, how in rows:
        mpx = side * side / 1e6
        print(f"{name:<46} {side:>5}x{side:<5} {mpx / t_rs:>11.2f} {mpx / t_np:>12.2f} {t_np / t_rs:>7.2f}  {how}")
    print()
    print("ratio = numpy time / rust time on the same output size (higher is faster rust)")
    print(f"3x3 target >= 20x: measured {rows[0][3] / rows[0][2]:.1f}x")
    flat = rust_sq[25.0] / rust_sq[0.5]
    print(f"default window (square), time at 25 m / time at 0.5 m (issue #13 target <= 2): "
          f"{flat:.2f}, {'met' if flat <= 2.0 else 'NOT met'}")
    print(f"disc windows (--window disc), time at 25 m / time at 0.5 m (exact discs are "
          f"O(r/h) per cell): {rust_disc[25.0] / rust_disc[0.5]:.2f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())

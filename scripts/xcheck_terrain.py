#!/usr/bin/env python3
"""Independent references for terrastack's terrain kernels on a real open DEM.

Usage: python3 scripts/xcheck_terrain.py DIR
then:  TERRASTACK_XCHECK_DIR=DIR cargo test --release --test xcheck_terrain

Source data: the Jacksboro fault DEM that matplotlib ships
(matplotlib.cbook.get_sample_data('jacksboro_fault_dem.npz')): int16 elevations in metres,
344 x 403 cells of 3 arc-seconds (dx = dy = 1/1200 degree) on a geographic grid. The npz
labels its latitude bounds 'ymin' = 36.7329 and 'ymax' = 36.4463; the grid is placed with
row 0 at the northern edge (36.7329 N), as the array displays. Both sides of the comparison
read the same GeoTIFF, so the orientation choice does not affect the check.

A rectangular hole of nodata is punched into the DEM (written with nodata -32768) so that
the valid-fraction masking of windowed statistics is exercised as well.

References are computed here with numpy and scipy only, written independently of the Rust
code from the formulas in docs/methods.md:
- metres per degree on WGS84 at each row's centre latitude (M and N radii of curvature);
- Horn 1981 slope and aspect (degrees; aspect clockwise from north, downslope; NaN flat);
- disc TPI (z minus the centre value of the least-squares plane through the window's
  valid cells, which is z - mean on a full window) and roughness (population std) at
  radii of 200 m and 400 m with
  scipy.ndimage.correlate on disc footprints built per row (cells whose centres lie within
  r: north-south offset with the centre row's cell height, east-west offset with each
  row's own cell width), windows with fewer than 75 % valid cells masked.

Outputs in DIR: jacksboro.tif (GeoTIFF, EPSG:4326, int16, nodata -32768),
jacksboro_dem.f32 (the same DEM as raw little-endian float32, NaN nodata, row-major), one
raw float32 file per reference, and manifest.json describing them.
"""

import json
import math
import os
import sys

import numpy as np
from scipy import ndimage

RADII_M = [200.0, 400.0]
MIN_VALID_FRACTION = 0.75
NODATA = -32768
HOLE = (slice(120, 150), slice(200, 240))  # rows, cols of the punched hole


def metres_per_degree(lat_deg):
    """WGS84 metres per degree of latitude and of longitude (docs/methods.md formulas)."""
    a = 6378137.0
    f = 1.0 / 298.257223563
    e2 = f * (2.0 - f)
    phi = np.radians(lat_deg)
    w2 = 1.0 - e2 * np.sin(phi) ** 2
    m = a * (1.0 - e2) / w2**1.5
    n = a / np.sqrt(w2)
    k = math.pi / 180.0
    return m * k, n * np.cos(phi) * k


def load_dem():
    from matplotlib.cbook import get_sample_data

    d = get_sample_data("jacksboro_fault_dem.npz")
    z = np.asarray(d["elevation"]).astype(np.int16)
    dx = float(d["dx"])
    dy = float(d["dy"])
    west = float(d["xmin"])
    north = max(float(d["ymin"]), float(d["ymax"]))
    return z, dx, dy, west, north


def horn(z, hx_rows, hy_rows):
    """Horn 1981 p, q with y north (rows run south); NaN where the 3x3 is incomplete."""
    rows, cols = z.shape
    p = np.full(z.shape, np.nan)
    q = np.full(z.shape, np.nan)
    z1 = z[:-2, :-2]
    z2 = z[:-2, 1:-1]
    z3 = z[:-2, 2:]
    z4 = z[1:-1, :-2]
    z6 = z[1:-1, 2:]
    z7 = z[2:, :-2]
    z8 = z[2:, 1:-1]
    z9 = z[2:, 2:]
    hx = hx_rows[1:-1, None]
    hy = hy_rows[1:-1, None]
    p[1:-1, 1:-1] = ((z3 + 2 * z6 + z9) - (z1 + 2 * z4 + z7)) / (8 * hx)
    q[1:-1, 1:-1] = ((z1 + 2 * z2 + z3) - (z7 + 2 * z8 + z9)) / (8 * hy)
    return p, q


def disc_footprint(r, row, hx_rows, hy_rows):
    """Disc membership for centre row `row` (cells beyond the raster use the edge row's
    width, as the Rust side's per-row cell sizes extrapolate smoothly; the difference is
    irrelevant because those cells are nodata)."""
    hy0 = hy_rows[row]
    ry = int(math.floor(r / hy0 * (1 + 1e-9)))
    rxmax = int(math.floor(r / hx_rows.min() * (1 + 1e-9))) + 1
    fp = np.zeros((2 * ry + 1, 2 * rxmax + 1), dtype=bool)
    for dy in range(-ry, ry + 1):
        rr = min(max(row + dy, 0), len(hx_rows) - 1)
        hx = hx_rows[rr] if dy != 0 else hx_rows[row]
        for dx in range(-rxmax, rxmax + 1):
            if (dx * hx) ** 2 + (dy * hy0) ** 2 <= (r * (1 + 1e-9)) ** 2:
                fp[dy + ry, dx + rxmax] = True
    return fp


def disc_stats(zf, valid, r, hx_rows, hy_rows):
    rows = zf.shape[0]
    z0 = np.where(valid, zf, 0.0)
    tpi = np.full(zf.shape, np.nan)
    rough = np.full(zf.shape, np.nan)
    groups = {}
    for row in range(rows):
        fp = disc_footprint(r, row, hx_rows, hy_rows)
        groups.setdefault(fp.tobytes() + bytes(str(fp.shape), "ascii"), (fp, []))[1].append(row)
    vf = valid.astype(np.float64)
    for fp, members in groups.values():
        w = fp.astype(np.float64)
        # Cell offsets from the window's centre: dx along columns, dy along rows.
        oy, ox = np.mgrid[-(fp.shape[0] // 2) : fp.shape[0] // 2 + 1, -(fp.shape[1] // 2) : fp.shape[1] // 2 + 1]
        corr = lambda a, k: ndimage.correlate(a, k, mode="constant", cval=0.0)
        cnt = corr(vf, w)
        s1 = corr(z0, w)
        s2 = corr(z0 * z0, w)
        # Moments of the valid cells and of z against the offsets, for the least-squares
        # plane z = a + b·dx + c·dy through the window's valid cells.
        sx, sy = corr(vf, w * ox), corr(vf, w * oy)
        sxx, syy, sxy = corr(vf, w * ox * ox), corr(vf, w * oy * oy), corr(vf, w * ox * oy)
        szx, szy = corr(z0, w * ox), corr(z0, w * oy)
        cells = fp.sum()
        for row in members:
            n = cnt[row]
            ok = (n >= MIN_VALID_FRACTION * cells) & (n >= 1) & valid[row]
            mean = s1[row] / np.maximum(n, 1)
            var = np.maximum(s2[row] / np.maximum(n, 1) - mean**2, 0.0)
            # TPI = z minus the plane's value at the centre (docs/methods.md, "Window
            # statistics"): z - mean where the valid cells are symmetric about the centre.
            m = np.stack(
                [
                    np.stack([n, sx[row], sy[row]], -1),
                    np.stack([sx[row], sxx[row], sxy[row]], -1),
                    np.stack([sy[row], sxy[row], syy[row]], -1),
                ],
                -2,
            )
            rhs = np.stack([s1[row], szx[row], szy[row]], -1)
            level = np.full(n.shape, np.nan)
            solvable = ok & (np.abs(np.linalg.det(np.where(ok[:, None, None], m, np.eye(3)))) > 1e-9)
            if solvable.any():
                level[solvable] = np.linalg.solve(m[solvable], rhs[solvable][..., None])[..., 0, 0]
            tpi[row] = np.where(solvable, zf[row] - level, np.nan)
            ok_r = (n >= MIN_VALID_FRACTION * cells) & (n >= 1)
            rough[row] = np.where(ok_r, np.sqrt(var), np.nan)
    return tpi, rough, len(groups)


def main():
    if len(sys.argv) != 2:
        sys.exit("usage: xcheck_terrain.py DIR")
    out = sys.argv[1]
    os.makedirs(out, exist_ok=True)
    z, dx, dy, west, north = load_dem()
    z = z.copy()
    z[HOLE] = NODATA
    rows, cols = z.shape

    import rasterio
    from rasterio.transform import from_origin

    transform = from_origin(west, north, dx, dy)
    with rasterio.open(
        os.path.join(out, "jacksboro.tif"), "w", driver="GTiff", height=rows, width=cols,
        count=1, dtype="int16", crs="EPSG:4326", transform=transform, nodata=NODATA,
    ) as ds:
        ds.write(z, 1)

    valid = z != NODATA
    zf = np.where(valid, z.astype(np.float64), np.nan)
    zf.astype("<f4").tofile(os.path.join(out, "jacksboro_dem.f32"))

    lat = north - (np.arange(rows) + 0.5) * dy
    m_lat, m_lon = metres_per_degree(lat)
    hx_rows = m_lon * dx
    hy_rows = m_lat * dy

    p, q = horn(zf, hx_rows, hy_rows)
    slope = np.degrees(np.arctan(np.hypot(p, q)))
    flat = (p == 0) & (q == 0)
    aspect = np.mod(np.degrees(np.arctan2(-p, -q)), 360.0)
    aspect[flat] = np.nan

    refs = {"slope_horn": slope, "aspect_horn": aspect}
    groups = {}
    for r in RADII_M:
        tpi, rough, ng = disc_stats(zf, valid, r, hx_rows, hy_rows)
        tag = f"r{r:g}m"
        refs[f"tpi_{tag}"] = tpi
        refs[f"roughness_{tag}"] = rough
        groups[tag] = ng

    files = {}
    for name, arr in refs.items():
        fn = f"ref_{name}.f32"
        arr.astype("<f4").tofile(os.path.join(out, fn))
        files[name] = fn
    manifest = {
        "source": "matplotlib sample data jacksboro_fault_dem.npz",
        "width": cols,
        "height": rows,
        "transform": [west, dx, 0.0, north, 0.0, -dy],
        "epsg": 4326,
        "nodata": NODATA,
        "geotiff": "jacksboro.tif",
        "raw_dem": "jacksboro_dem.f32",
        "radii_m": RADII_M,
        "min_valid_fraction": MIN_VALID_FRACTION,
        "references": files,
        "footprint_groups": groups,
    }
    with open(os.path.join(out, "manifest.json"), "w") as fh:
        json.dump(manifest, fh, indent=2)
    print(f"wrote {len(files)} references for a {rows}x{cols} DEM to {out}")


if __name__ == "__main__":
    main()

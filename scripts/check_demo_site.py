#!/usr/bin/env python3
"""Independent check of the committed demo site (sample-dsm/) with rasterio, numpy and scipy.

Usage: python3 scripts/check_demo_site.py [SAMPLE_DSM_DIR]

It reads the files through GDAL (rasterio), not through terrastack, and checks:
  * CRS, grids, sample types, nodata, band descriptions and block layout against site.json;
  * the DSM's matching noise (1.5 cm, as sample-dsm/README.md states) from quadratic fits
    inside the farm-track circles of samples.csv (least squares, numpy.linalg.lstsq);
  * the georeferencing shifts recorded in site.json, recovered from the data with a
    continuous sub-pixel search on smoothed gradients (scipy.ndimage, bilinear resampling
    by map_coordinates, Nelder-Mead by scipy.optimize.minimize): DSM against the
    reference DSM, and orthomosaic near-infrared against the reference orthomosaic's;
  * every sample circle lies over valid DSM cells of the reference flight.
Exits 1 with a message naming the file on the first failed check.
"""

import csv
import json
import sys
from pathlib import Path

import numpy as np
import rasterio
from scipy import ndimage, optimize


def fail(path, problem):
    print(f"FAIL {path}: {problem}", file=sys.stderr)
    sys.exit(1)


def check(cond, path, problem):
    if not cond:
        fail(path, problem)


def read(path):
    with rasterio.open(path) as src:
        return src.read(masked=True), src.profile.copy(), src.descriptions, src.transform


def smoothed_gradients(z, ok, sigma):
    """East and south derivatives (per cell) of z after a normalised Gaussian smoothing
    that ignores invalid cells (scipy.ndimage.gaussian_filter)."""
    w = ndimage.gaussian_filter(ok.astype(float), sigma)
    zs = ndimage.gaussian_filter(np.where(ok, z, 0.0), sigma) / np.maximum(w, 1e-9)
    gy, gx = np.gradient(zs)
    good = ndimage.binary_erosion(ok, iterations=int(3 * sigma) + 1)
    return gx, gy, good


def estimate_shift(ref, ref_ok, other, other_ok, cell, sigma=2.0, scale=None):
    """Displacement (dx, dy) in metres of `other`'s content against `ref` (same grid).

    Both rasters are smoothed and differentiated, which removes seasonal offsets; the
    shift minimises a robust (Geman-McClure) mismatch of the gradients, with `other`'s
    gradients resampled bilinearly (scipy.ndimage.map_coordinates) at each trial shift:
    integer search over +-5 cells, then Nelder-Mead (scipy.optimize.minimize)."""
    ax, ay, aok = smoothed_gradients(ref, ref_ok, sigma)
    bx, by, bok = smoothed_gradients(other, other_ok, sigma)
    if scale is None:
        scale = np.percentile(np.hypot(ax[aok], ay[aok]), 90)
    rows, cols = np.mgrid[0:ref.shape[0], 0:ref.shape[1]]
    inner = np.zeros(ref.shape, bool)
    inner[12:-12:2, 12:-12:2] = True
    sel = aok & inner
    r0, c0 = rows[sel].astype(float), cols[sel].astype(float)
    fx, fy, fok = np.where(bok, bx, 0.0), np.where(bok, by, 0.0), bok.astype(float)

    def cost(p):
        sc, sr = p
        coords = np.vstack([r0 + sr, c0 + sc])
        w = ndimage.map_coordinates(fok, coords, order=1)
        dx = ndimage.map_coordinates(fx, coords, order=1) - ax[sel]
        dy = ndimage.map_coordinates(fy, coords, order=1) - ay[sel]
        e2 = (dx * dx + dy * dy) / scale**2
        rho = e2 / (e2 + 1.0)
        good = w > 0.999
        return rho[good].mean()

    best = min(((sc, sr) for sc in range(-5, 6) for sr in range(-5, 6)), key=cost)
    start = np.array(best, float)
    simplex = start + np.array([[0.0, 0.0], [0.5, 0.0], [0.0, 0.5]])
    res = optimize.minimize(cost, start, method="Nelder-Mead",
                            options={"xatol": 0.01, "fatol": 1e-9, "initial_simplex": simplex})
    sc, sr = res.x
    # Content moved east appears at higher columns; moved north at lower rows.
    return sc * cell, -sr * cell


def main():
    root = Path(sys.argv[1] if len(sys.argv) > 1 else "sample-dsm")
    site_path = root / "site.json"
    site = json.loads(site_path.read_text())
    check(site.get("invented") is True, site_path, "the site must say it is invented")
    epsg = site["crs"]["epsg"]
    flights = site["flights"]
    ref = [f for f in flights if f["reference"]]
    check(len(ref) == 1 and ref[0]["shift_m"] == [0.0, 0.0], site_path,
          "exactly one reference flight with shift (0, 0)")
    ref = ref[0]
    names = [c["name"] for c in site["classes"]]

    dsms, orthos = {}, {}
    for f in flights:
        for kind, spec in (("dsm", site["dsm"]), ("ortho", site["ortho"])):
            path = root / f[kind]
            data, prof, desc, transform = read(path)
            check(prof["crs"].to_epsg() == epsg, path, f"CRS is {prof['crs']}, not EPSG:{epsg}")
            check((prof["width"], prof["height"]) == (spec["width"], spec["height"]), path, "size")
            check(np.allclose(transform.to_gdal(), spec["transform"], rtol=0, atol=1e-9), path,
                  f"transform {transform.to_gdal()} differs from site.json")
            check(prof["dtype"] == spec["sample_type"], path, f"sample type {prof['dtype']}")
            check(prof["nodata"] == spec["nodata"], path, f"nodata {prof['nodata']}")
            check(list(desc) == spec["bands"], path, f"band descriptions {desc}")
            check(prof.get("tiled") and prof["blockxsize"] == 256 and prof["blockysize"] == 256,
                  path, "expected 256 x 256 tiles")
            check(str(prof.get("compress", "")).lower() == "deflate", path, "expected Deflate")
            if kind == "dsm":
                dsms[f["date"]] = data[0]
            else:
                check(str(prof.get("interleave", "")).lower() == "pixel", path,
                      "expected pixel interleaving")
                orthos[f["date"]] = data

    cell = site["dsm"]["cell_size_m"]
    dref = dsms[ref["date"]]
    for date, d in dsms.items():
        holes = d.mask.mean()
        path = root / date / "dsm.tif"
        check(0.001 < holes < 0.05, path, f"nodata share {holes:.4f} outside 0.1-5 %")
        check(200.0 < d.min() and d.max() < 230.0, path, "elevations outside 200-230 m")

    # Samples: columns, counts, validity on the reference DSM.
    samples_path = root / "samples.csv"
    with open(samples_path, newline="") as fh:
        rows = list(csv.DictReader(fh))
    check(list(rows[0].keys()) == ["id", "x", "y", "radius_m", "class"], samples_path, "columns")
    t = site["dsm"]["transform"]
    cc, rr = np.meshgrid(np.arange(dref.shape[1]), np.arange(dref.shape[0]))
    xs, ys = t[0] + (cc + 0.5) * t[1], t[3] + (rr + 0.5) * t[5]
    for name in names:
        k = sum(r["class"] == name for r in rows)
        check(15 <= k <= 30, samples_path, f"{k} circles of {name}")
    resid = []
    for r in rows:
        x, y, rad = float(r["x"]), float(r["y"]), float(r["radius_m"])
        check(0.5 <= rad <= 2.0, samples_path, f"circle {r['id']} radius {rad}")
        inside = (xs - x) ** 2 + (ys - y) ** 2 <= rad ** 2
        check(inside.sum() > 0 and not dref.mask[inside].any(), samples_path,
              f"circle {r['id']} not wholly over valid reference DSM cells")
        if r["class"] == "farm_track":
            # Quadratic surface z = a + bx + cy + dx² + exy + fy² by least squares.
            u, v = xs[inside] - x, ys[inside] - y
            A = np.column_stack([np.ones_like(u), u, v, u * u, u * v, v * v])
            z = dref.data[inside].astype(float)
            coef, *_ = np.linalg.lstsq(A, z, rcond=None)
            resid.append(z - A @ coef)
    sd = np.concatenate(resid).std()
    # 1.5 cm matching noise, as sample-dsm/README.md states; 10 % tolerance.
    check(abs(sd - 0.015) < 0.0015, root / ref["dsm"], f"noise on the track {sd:.4f} m, not 0.015 m")
    print(f"DSM noise on the farm track: {sd * 100:.2f} cm (README: 1.5 cm)")

    # Shifts.
    nir_ref = orthos[ref["date"]][4]
    ocell = site["ortho"]["cell_size_m"]
    for f in flights:
        dx, dy = f["shift_m"]
        d = dsms[f["date"]]
        ex, ey = estimate_shift(dref.data.astype(float), ~dref.mask, d.data.astype(float), ~d.mask, cell)
        print(f"{f['date']}: recorded ({dx:+.3f}, {dy:+.3f}) m, DSM gives ({ex:+.3f}, {ey:+.3f}) m")
        check(abs(ex - dx) < 0.02 and abs(ey - dy) < 0.02, root / f["dsm"],
              f"shift ({ex:.3f}, {ey:.3f}) m found, ({dx}, {dy}) m recorded")
        # Water (near-infrared reflectance below 0.05) in the orthomosaics: dark in every
        # season, so its outline moves only with the shift.
        nir = orthos[f["date"]][4]
        wr = (nir_ref.data < 500).astype(float)
        wo = (nir.data < 500).astype(float)
        # Gradients of a smoothed 0/1 outline stay below 0.2 per cell: scale 1 makes the
        # mismatch a plain sum of squares.
        ox, oy = estimate_shift(wr, ~nir_ref.mask, wo, ~nir.mask, ocell, scale=1.0)
        print(f"{f['date']}: orthomosaic water outline gives ({ox:+.3f}, {oy:+.3f}) m")
        check(abs(ox - dx) < 0.02 and abs(oy - dy) < 0.02, root / f["ortho"],
              f"shift ({ox:.3f}, {oy:.3f}) m found, ({dx}, {dy}) m recorded")
    print("demo site checks passed")


if __name__ == "__main__":
    main()

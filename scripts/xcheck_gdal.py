#!/usr/bin/env python3
"""Reference data for terrastack's GDAL warping and point transforms, made with rasterio.

rasterio carries its own GDAL (3.10 in its wheels) and PROJ, independent of the system
GDAL terrastack links, so `rasterio.warp.reproject` and `rasterio.warp.transform` give an
outside reference for `raster::gdal::warp_window` and `raster::gdal::transform_points`.

    python3 scripts/xcheck_gdal.py gen DIR
    TERRASTACK_XCHECK_DIR=DIR cargo test --release --features gdal --test gdal_backend

`gen DIR` writes into DIR:
  source.tif          2 bands, Float32, 5 m cells in WGS 84 / UTM zone 32N (EPSG:32632),
                      straddling 12° E (the boundary between zones 32 and 33) at 47.3° N,
                      nodata -9999 in a 12 x 10 block of band 1
  cases.json          target grids in UTM zone 33N (EPSG:32633) and one case per
                      (band, resampling), plus points transformed 32632 -> 32633 and
                      32632 -> 4326 by rasterio.warp.transform
  expect_*.tif        rasterio.warp.reproject of each case, Float32, NaN where no data,
                      with the kernel scales (XSCALE/YSCALE) terrastack fixes per grid

rasterio.warp.reproject always runs GDAL's approximate transformer (linear interpolation
along each target row, at most 0.125 source pixels off), while terrastack transforms every
point exactly. So that the comparison can say which differences are allowed, `gen` also
records `approx_bound_px`: the largest distance, in source pixels, between the exact
source position of any target cell centre or corner and the straight chord through its
row's end points. The approximate transformer interpolates along such chords (or shorter
ones), so its positions differ from the exact ones by at most this bound.

The source values are synthetic test data (a smooth surface plus seeded noise), not demo
data.
"""

import json
import os
import sys

import numpy as np
import rasterio
from rasterio.crs import CRS
from rasterio.enums import Resampling
from rasterio.transform import Affine
from rasterio.warp import reproject, transform

SRC_EPSG = 32632
DST_EPSG = 32633
NODATA = -9999.0


def source_arrays(width, height, x0, y0, cell):
    rng = np.random.default_rng(20240611)
    cols = np.arange(width)
    rows = np.arange(height)
    x = x0 + (cols + 0.5) * cell
    y = y0 - (rows + 0.5) * cell
    xx, yy = np.meshgrid(x - x0, y0 - y)
    band1 = 250.0 + 12.0 * np.sin(xx / 70.0) * np.cos(yy / 45.0) + 0.02 * xx - 0.015 * yy
    band1 += rng.uniform(-0.5, 0.5, size=band1.shape)
    band2 = 0.3 + 0.2 * np.cos(xx / 33.0 + yy / 51.0) + rng.uniform(-0.02, 0.02, size=band1.shape)
    band1[80:90, 100:112] = NODATA
    return band1.astype(np.float32), band2.astype(np.float32)


def chord_bound(t, x0, y0, cell):
    """Largest distance (source pixels) of exact source positions of a target grid's cell
    centres and corners from the chord through the end points of their row."""
    tr = t["transform"]
    worst = 0.0
    for off in (0.5, 0.0):
        cols = np.arange(t["width"] + (1 if off == 0.0 else 0)) + off
        for r in np.arange(t["height"] + (1 if off == 0.0 else 0)) + off:
            xs = tr[0] + cols * tr[1]
            ys = np.full_like(xs, tr[3] + r * tr[5])
            sx, sy = transform(CRS.from_epsg(DST_EPSG), CRS.from_epsg(SRC_EPSG), xs, ys)
            pc = (np.asarray(sx) - x0) / cell
            pr = (y0 - np.asarray(sy)) / cell
            f = (cols - cols[0]) / (cols[-1] - cols[0])
            dc = pc - (pc[0] + f * (pc[-1] - pc[0]))
            dr = pr - (pr[0] + f * (pr[-1] - pr[0]))
            worst = max(worst, float(np.max(np.hypot(dc, dr))))
    return worst


def kernel_scales(t, x0, y0, cell):
    """Destination pixels per source pixel along the target's x and y axes at the
    target's centre, capped at 1: GDAL's XSCALE/YSCALE warp options. terrastack fixes
    them per target grid (GDAL would otherwise derive them per processing chunk), so the
    reference is made with the same fixed values."""
    tr = t["transform"]
    cc, cr = t["width"] / 2.0, t["height"] / 2.0
    cols = [cc + 0.5, cc + 1.5, cc + 0.5]
    rows = [cr + 0.5, cr + 0.5, cr + 1.5]
    xs = [tr[0] + c * tr[1] for c in cols]
    ys = [tr[3] + r * tr[5] for r in rows]
    sx, sy = transform(CRS.from_epsg(DST_EPSG), CRS.from_epsg(SRC_EPSG), xs, ys)
    pc = [(x - x0) / cell for x in sx]
    pr = [(y0 - y) / cell for y in sy]
    lx = np.hypot(pc[1] - pc[0], pr[1] - pr[0])
    ly = np.hypot(pc[2] - pc[0], pr[2] - pr[0])
    return float(min(1.0, 1.0 / lx)), float(min(1.0, 1.0 / ly))


def gen(out_dir):
    os.makedirs(out_dir, exist_ok=True)
    width, height, cell = 280, 200, 5.0
    x0, y0 = 725_600.0, 5_243_600.0
    b1, b2 = source_arrays(width, height, x0, y0, cell)
    src_path = os.path.join(out_dir, "source.tif")
    profile = dict(
        driver="GTiff",
        width=width,
        height=height,
        count=2,
        dtype="float32",
        crs=CRS.from_epsg(SRC_EPSG),
        transform=Affine(cell, 0.0, x0, 0.0, -cell, y0),
        nodata=NODATA,
        tiled=True,
        blockxsize=64,
        blockysize=64,
    )
    with rasterio.open(src_path, "w", **profile) as dst:
        dst.write(b1, 1)
        dst.write(b2, 2)

    # The source's corners in zone 33N, to place the targets so that they overlap it
    # and also reach past its west edge (cells there have no source data).
    cx, cy = transform(
        CRS.from_epsg(SRC_EPSG),
        CRS.from_epsg(DST_EPSG),
        [x0, x0 + width * cell, x0, x0 + width * cell],
        [y0, y0, y0 - height * cell, y0 - height * cell],
    )
    xmin, ymax = min(cx), max(cy)
    targets = {
        # Finer-than-source-ish 6 m cells, origin off any round number.
        "fine": dict(width=200, height=150, transform=[xmin - 60.37, 6.0, 0.0, ymax - 40.21, 0.0, -6.0]),
        # Coarser 11 m cells for averaging.
        "coarse": dict(width=110, height=80, transform=[xmin - 40.13, 11.0, 0.0, ymax - 30.77, 0.0, -11.0]),
    }
    cases = [
        ("nearest", 1, "fine"),
        ("bilinear", 1, "fine"),
        ("cubic", 1, "fine"),
        ("average", 1, "coarse"),
        ("nearest", 2, "fine"),
        ("bilinear", 2, "fine"),
    ]
    for t in targets.values():
        t["xscale"], t["yscale"] = kernel_scales(t, x0, y0, cell)
    case_list = []
    with rasterio.open(src_path) as src:
        for method, band, tname in cases:
            t = targets[tname]
            tr = t["transform"]
            dst_tr = Affine(tr[1], tr[2], tr[0], tr[4], tr[5], tr[3])
            out = np.full((t["height"], t["width"]), np.nan, dtype=np.float32)
            reproject(
                rasterio.band(src, band),
                out,
                dst_transform=dst_tr,
                dst_crs=CRS.from_epsg(DST_EPSG),
                dst_nodata=np.nan,
                resampling=Resampling[method],
                init_dest_nodata=True,
                XSCALE="%.17g" % t["xscale"],
                YSCALE="%.17g" % t["yscale"],
            )
            name = f"expect_{method}_b{band}.tif"
            with rasterio.open(
                os.path.join(out_dir, name),
                "w",
                driver="GTiff",
                width=t["width"],
                height=t["height"],
                count=1,
                dtype="float32",
                crs=CRS.from_epsg(DST_EPSG),
                transform=dst_tr,
                nodata=np.nan,
            ) as dst:
                dst.write(out, 1)
            case_list.append(dict(method=method, band=band, target=tname, file=name))
    for t in targets.values():
        t["approx_bound_px"] = chord_bound(t, x0, y0, cell)

    # Points: a grid of source-CRS positions over the raster, to 33N and to lon/lat.
    px = [x0 + f * width * cell for f in (0.0, 0.25, 0.5, 0.75, 1.0)]
    py = [y0 - f * height * cell for f in (0.0, 0.5, 1.0)]
    pts = [(x, y) for x in px for y in py]
    xs, ys = [p[0] for p in pts], [p[1] for p in pts]
    ux, uy = transform(CRS.from_epsg(SRC_EPSG), CRS.from_epsg(DST_EPSG), xs, ys)
    lx, ly = transform(CRS.from_epsg(SRC_EPSG), CRS.from_epsg(4326), xs, ys)
    doc = dict(
        generator="scripts/xcheck_gdal.py",
        rasterio=rasterio.__version__,
        gdal=rasterio.__gdal_version__,
        source=dict(file="source.tif", epsg=SRC_EPSG, nodata=NODATA),
        target_epsg=DST_EPSG,
        targets=targets,
        cases=case_list,
        points=dict(
            source=[[x, y] for x, y in pts],
            utm33=[[x, y] for x, y in zip(ux, uy)],
            lonlat=[[x, y] for x, y in zip(lx, ly)],
        ),
    )
    with open(os.path.join(out_dir, "cases.json"), "w") as f:
        json.dump(doc, f, indent=1)
    print(f"wrote {len(case_list)} warp cases and {len(pts)} points to {out_dir}")


def main(argv):
    if len(argv) != 3 or argv[1] != "gen":
        print(__doc__)
        print("usage: xcheck_gdal.py gen DIR", file=sys.stderr)
        return 2
    gen(argv[2])
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))

#!/usr/bin/env python3
"""Reference values for terrastack's spectral indices, band math and resampling.

    python3 scripts/xcheck_spectral.py gen DIR
    TERRASTACK_XCHECK_DIR=DIR cargo test --release --test xcheck_spectral

`gen` writes, under DIR, raw little-endian float32 arrays and one `manifest.json`:

* spectral/: five reflectance bands (seeded random values with zero and NaN cells), the
  index values computed by spyndex (Awesome Spectral Indices, `pip install spyndex`), and
  band-math expressions evaluated with numpy.
* resample/: a real open DEM (matplotlib's `jacksboro_fault_dem.npz`, 3 arc-second,
  geographic) with nodata holes, and the same DEM resampled by GDAL's warper through
  `rasterio.warp.reproject` onto several target grids, for each method.

Requirements: numpy, rasterio, matplotlib, spyndex.
"""

import json
import os
import sys
import warnings

import numpy as np


def write_f32(path, array):
    np.ascontiguousarray(array, dtype="<f4").tofile(path)


def finite_or_nan(values):
    values = np.asarray(values, dtype=np.float64)
    return np.where(np.isfinite(values), values, np.nan)


def gen_spectral(root):
    import spyndex

    out = os.path.join(root, "spectral")
    os.makedirs(out, exist_ok=True)
    rng = np.random.default_rng(20260412)
    shape = (120, 150)
    bands = {}
    for role in ["blue", "green", "red", "rededge", "nir"]:
        band = rng.uniform(0.005, 0.65, size=shape).astype(np.float32)
        bands[role] = band
    # Degenerate cells: all bands zero (0/0), a zero denominator for the ratio indices, NaN.
    for role in bands:
        bands[role][0, :10] = 0.0
    bands["rededge"][1, :10] = 0.0
    bands["green"][2, :10] = 0.0
    bands["red"][3, 5:15] = np.nan
    for role, band in bands.items():
        write_f32(os.path.join(out, role + ".f32"), band)

    b = {k: v.astype(np.float64) for k, v in bands.items()}
    total = b["red"] + b["green"] + b["blue"]
    with np.errstate(divide="ignore", invalid="ignore"):
        chroma = {k: b[k] / total for k in ("red", "green", "blue")}

    # terrastack name -> (spyndex index, parameters). Coefficients are passed explicitly:
    # spyndex's shared constant L defaults to 1.0 (EVI's L), whereas SAVI's published L is
    # 0.5 (Huete 1988); EVI's g = 2.5, C1 = 6, C2 = 7.5, L = 1 (Huete et al. 2002).
    # spyndex's ExG is 2G - R - B on the bands themselves; terrastack's exg follows
    # Woebbecke et al. 1995 on chromatic coordinates, so spyndex's formula is fed r, g, b.
    cases = {
        "ndvi": ("NDVI", {"N": b["nir"], "R": b["red"]}),
        "gndvi": ("GNDVI", {"N": b["nir"], "G": b["green"]}),
        "ndre": ("NDREI", {"N": b["nir"], "RE1": b["rededge"]}),
        "savi": ("SAVI", {"N": b["nir"], "R": b["red"], "L": 0.5}),
        "osavi": ("OSAVI", {"N": b["nir"], "R": b["red"]}),
        "msavi2": ("MSAVI", {"N": b["nir"], "R": b["red"]}),
        "evi": (
            "EVI",
            {"N": b["nir"], "R": b["red"], "B": b["blue"], "g": 2.5, "C1": 6.0, "C2": 7.5, "L": 1.0},
        ),
        "evi2": ("EVI2", {"N": b["nir"], "R": b["red"], "g": 2.5, "L": 1.0}),
        "ndwi": ("NDWI", {"G": b["green"], "N": b["nir"]}),
        "cire": ("CIRE", {"N": b["nir"], "RE1": b["rededge"]}),
        "cigreen": ("CIG", {"N": b["nir"], "G": b["green"]}),
        "exg": ("ExG", {"G": chroma["green"], "R": chroma["red"], "B": chroma["blue"]}),
        "vari": ("VARI", {"G": b["green"], "R": b["red"], "B": b["blue"]}),
    }
    indices = {}
    with warnings.catch_warnings(), np.errstate(divide="ignore", invalid="ignore"):
        warnings.simplefilter("ignore")
        for name, (sname, params) in cases.items():
            ref = finite_or_nan(spyndex.computeIndex(index=sname, params=params))
            write_f32(os.path.join(out, "index_" + name + ".f32"), ref.astype(np.float32))
            indices[name] = {
                "file": "index_" + name + ".f32",
                "spyndex": sname,
                "spyndex_formula": spyndex.indices[sname].formula,
            }

    # Band math, evaluated with numpy (f64, undefined -> NaN as terrastack documents).
    n, r, g, bl, re = b["nir"], b["red"], b["green"], b["blue"], b["rededge"]
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        expressions = [
            (
                "wet_gate",
                "if nir > 0.3 and red < 0.2 then sqrt(nir - red) else ln(red + 0.01)",
                np.where(
                    np.isnan(n) | np.isnan(r),
                    np.nan,
                    np.where((n > 0.3) & (r < 0.2), np.sqrt(n - r), np.log(r + 0.01)),
                ),
            ),
            (
                "clamped_sq",
                "clamp(2.5 * (nir - red) / (nir + 2.4 * red + 1), -0.5, 0.5) ^ 2",
                np.clip(2.5 * (n - r) / (n + 2.4 * r + 1), -0.5, 0.5) ** 2,
            ),
            (
                "spread",
                "max(nir, rededge, 0.2) / min(green, blue) - abs(red - 0.3) * exp(-nir)",
                np.maximum(np.maximum(n, re), 0.2) / np.minimum(g, bl) - np.abs(r - 0.3) * np.exp(-n),
            ),
            (
                "logic",
                "not (green >= blue or red == 0) and -red^2 < -0.01",
                ((~((g >= bl) | (r == 0))) & (-(r**2) < -0.01)).astype(np.float64),
            ),
        ]
    exprs = []
    for name, text, ref in expressions:
        ref = finite_or_nan(ref)
        if name == "logic":
            # Comparisons and logic of a NaN operand are NaN in terrastack.
            ref = np.where(np.isnan(r) | np.isnan(g) | np.isnan(bl), np.nan, ref)
        if name == "spread":
            # Division by an exact zero is NaN in terrastack (numpy gives inf, mapped above).
            ref = np.where(np.minimum(g, bl) == 0, np.nan, ref)
        write_f32(os.path.join(out, "expr_" + name + ".f32"), ref.astype(np.float32))
        exprs.append({"name": name, "text": text, "file": "expr_" + name + ".f32"})
    return {"shape": list(shape), "indices": indices, "expressions": exprs}


def gen_resample(root):
    import matplotlib.cbook as cbook
    import rasterio
    from rasterio.crs import CRS
    from rasterio.transform import Affine
    from rasterio.warp import Resampling, reproject

    out = os.path.join(root, "resample")
    os.makedirs(out, exist_ok=True)
    dem = cbook.get_sample_data("jacksboro_fault_dem.npz")
    z = dem["elevation"].astype(np.float32)
    h, w = z.shape
    d = float(dem["dx"])
    west = float(dem["xmin"])
    north = max(float(dem["ymin"]), float(dem["ymax"]))
    # Nodata holes: a 6 x 9 block and a scatter of single cells.
    z[100:106, 200:209] = np.nan
    rng = np.random.default_rng(7)
    z[rng.integers(0, h, 40), rng.integers(0, w, 40)] = np.nan
    write_f32(os.path.join(out, "source.f32"), z)
    src_transform = Affine(d, 0.0, west, 0.0, -d, north)
    crs = CRS.from_epsg(4326)
    # The same DEM as a tiled GeoTIFF written by GDAL, read by terrastack's own reader.
    with rasterio.open(
        os.path.join(out, "source.tif"),
        "w",
        driver="GTiff",
        width=w,
        height=h,
        count=1,
        dtype="float32",
        crs=crs,
        transform=src_transform,
        nodata=np.nan,
        tiled=True,
        blockxsize=128,
        blockysize=128,
        compress="deflate",
    ) as ds:
        ds.write(z, 1)

    # Target grids: cell size as a multiple of the source's, origin offset in source cells
    # (offsets chosen so no target centre falls exactly on a source cell edge).
    targets = [
        ("finer", 0.8, 3.13, 2.71),
        ("coarser", 1.25, 1.37, 4.19),
        ("much_coarser", 2.5, 0.61, 1.83),
    ]
    methods = {
        "nearest": Resampling.nearest,
        "bilinear": Resampling.bilinear,
        "cubic": Resampling.cubic,
        "average": Resampling.average,
    }
    cases = []
    for tname, ratio, ox, oy in targets:
        step = d * ratio
        tw = int((w - ox - 1) / ratio)
        th = int((h - oy - 1) / ratio)
        t = Affine(step, 0.0, west + ox * d, 0.0, -step, north - oy * d)
        for mname, method in methods.items():
            dst = np.full((th, tw), np.nan, dtype=np.float32)
            # XSCALE/YSCALE = 1 keep GDAL's bilinear and cubic kernels unstretched when
            # going coarser, which is what terrastack computes (see src/resample.rs).
            options = {"XSCALE": 1, "YSCALE": 1} if mname in ("bilinear", "cubic") else {}
            reproject(
                source=z,
                destination=dst,
                src_transform=src_transform,
                src_crs=crs,
                src_nodata=np.nan,
                dst_transform=t,
                dst_crs=crs,
                dst_nodata=np.nan,
                resampling=method,
                init_dest_nodata=True,
                **options,
            )
            fname = "{}_{}.f32".format(tname, mname)
            write_f32(os.path.join(out, fname), dst)
            cases.append(
                {
                    "target": tname,
                    "method": mname,
                    "width": tw,
                    "height": th,
                    "transform": [t.c, t.a, t.b, t.f, t.d, t.e],
                    "file": fname,
                }
            )
    return {
        "source": {
            "file": "source.f32",
            "geotiff": "source.tif",
            "width": w,
            "height": h,
            "transform": [src_transform.c, src_transform.a, 0.0, src_transform.f, 0.0, src_transform.e],
            "epsg": 4326,
            "origin": "matplotlib sample data jacksboro_fault_dem.npz",
        },
        "cases": cases,
        "gdal_version": rasterio.__gdal_version__,
    }


def main():
    if len(sys.argv) != 3 or sys.argv[1] != "gen":
        sys.exit("usage: python3 scripts/xcheck_spectral.py gen DIR")
    root = sys.argv[2]
    os.makedirs(root, exist_ok=True)
    manifest = {"spectral": gen_spectral(root), "resample": gen_resample(root)}
    with open(os.path.join(root, "manifest.json"), "w") as f:
        json.dump(manifest, f, indent=1)
    print("wrote spectral and resampling references to", root)


if __name__ == "__main__":
    main()

#!/usr/bin/env python3
"""Cross-check terrastack's GeoTIFF reader and writer against GDAL, through rasterio.

Two halves, run around the Rust test `tests/xcheck_io.rs`:

    python3 scripts/xcheck_io.py gen DIR
        Writes GeoTIFFs with rasterio (GDAL) into DIR/gdal/: every sample type, strips
        and tiles, band and pixel interleave, no compression, LZW, Deflate, ZSTD and
        PackBits, predictors 1/2/3, BigTIFF, big-endian files, pixel-is-point, projected
        UTM, geographic and US-survey-feet CRSs, nodata and band descriptions. Beside each
        file: its pixels as GDAL reads them (NAME.bK.raw, little-endian) and, in
        DIR/gdal/expected.json, the metadata as GDAL reports it after reopening.

    TERRASTACK_XCHECK_DIR=DIR cargo test --release --test xcheck_io
        Reads DIR/gdal/ with terrastack and compares exactly; writes DIR/terrastack/ in
        every writer layout, with its own expectations.

    python3 scripts/xcheck_io.py check DIR
        Reads DIR/terrastack/ with rasterio and compares pixels, transform, CRS, nodata,
        band descriptions and layout exactly. Exit status 1 on any difference.

The reference throughout is GDAL (via rasterio), an independent implementation of the
TIFF 6.0, BigTIFF and OGC GeoTIFF 1.1 specifications and of GDAL's own nodata/metadata
tags.
"""

import json
import math
import struct
import sys
from pathlib import Path

import numpy as np
import rasterio
from rasterio.transform import Affine

WIDTH, HEIGHT, COUNT = 37, 23, 3

DTYPES = ["uint8", "uint16", "int16", "uint32", "int32", "float32", "float64"]

NODATA = {
    "uint8": 255,
    "uint16": 0,
    "int16": -32768,
    "uint32": 4294967295,
    "int32": -9999,
    "float32": float(np.finfo(np.float32).min),
    "float64": float("nan"),
}


def bits(x):
    """The IEEE 754 bits of a double, as 16 hex digits (exact comparison through JSON)."""
    return None if x is None else struct.pack(">d", float(x)).hex()


def values(dtype, band, rng, nodata):
    """Deterministic test values spanning the type's range; cell (band, last row) holds
    the nodata value when there is one."""
    shape = (HEIGHT, WIDTH)
    if np.dtype(dtype).kind in "ui":
        info = np.iinfo(dtype)
        a = rng.integers(info.min, info.max, size=shape, dtype=dtype, endpoint=True)
        a[0, :5] = [info.min, info.max, 0 if info.min == 0 else -1, 1, info.max - 1]
    else:
        a = (rng.standard_normal(shape) * 10.0 ** rng.integers(-5, 6, size=shape)).astype(dtype)
        a[0, :4] = [0.0, -0.0, np.finfo(dtype).max, np.finfo(dtype).tiny]
    if nodata is not None:
        a[HEIGHT - 1, band] = nodata
    return a


def metadata_of(path):
    """What GDAL reports about a file (the expectation both sides are checked against)."""
    with rasterio.open(path) as d:
        crs = d.crs
        if crs is None:
            kind, epsg, unit = "unknown", None, None
        elif crs.is_geographic:
            kind, epsg, unit = "geographic", crs.to_epsg(), None
        else:
            kind, epsg, unit = "projected", crs.to_epsg(), crs.linear_units_factor[1]
        structure = d.tags(ns="IMAGE_STRUCTURE")
        rows, cols = d.block_shapes[0]
        with open(path, "rb") as f:
            head = f.read(4)
        return {
            "dtype": d.dtypes[0],
            "width": d.width,
            "height": d.height,
            "count": d.count,
            "transform": list(d.transform.to_gdal()),
            "transform_bits": [bits(v) for v in d.transform.to_gdal()],
            "crs_kind": kind,
            "epsg": epsg,
            "linear_unit_m": unit,
            "linear_unit_m_bits": bits(unit),
            "nodata": None if d.nodata is None else ("nan" if math.isnan(d.nodata) else d.nodata),
            "nodata_bits": bits(d.nodata),
            "descriptions": list(d.descriptions),
            "raster_space": "point" if d.tags().get("AREA_OR_POINT") == "Point" else "area",
            "tiled": bool(d.profile.get("tiled", False)),
            "block": [cols, rows],
            "interleave": d.interleaving.value.lower() if d.interleaving else "band",
            "compression": (structure.get("COMPRESSION") or "NONE").lower(),
            "predictor": int(structure.get("PREDICTOR", "1")),
            "bigtiff": head[2:4] in (b"+\0", b"\0+"),
            "big_endian": head[:2] == b"MM",
        }


def gen_cases():
    """(name, dtype, creation options, crs, transform, nodata, point, descriptions)."""
    utm = Affine(0.05, 0.0, 512345.25, 0.0, -0.05, 5301234.75)
    cases = []
    for dt in DTYPES:
        is_float = dt.startswith("float")
        pred = 3 if is_float else 2
        base = dict(crs="EPSG:32633", transform=utm, nodata=NODATA[dt], point=False, desc=True)
        cases += [
            (f"{dt}_tiles_deflate_p{pred}_band", dt,
             dict(tiled=True, blockxsize=16, blockysize=16, compress="deflate", predictor=pred,
                  interleave="band"), base),
            (f"{dt}_strips_lzw_p{pred}_pixel_be", dt,
             dict(blockysize=5, compress="lzw", predictor=pred, interleave="pixel",
                  ENDIANNESS="BIG"), base),
            (f"{dt}_tiles_zstd_pixel", dt,
             dict(tiled=True, blockxsize=32, blockysize=16, compress="zstd", interleave="pixel"),
             base),
            (f"{dt}_strips_packbits_band", dt,
             dict(blockysize=7, compress="packbits", interleave="band"), base),
            (f"{dt}_tiles_none_band_bigtiff", dt,
             dict(tiled=True, blockxsize=16, blockysize=32, interleave="band", BIGTIFF="YES"),
             base),
            (f"{dt}_strips_none_pixel", dt, dict(blockysize=23, interleave="pixel"), base),
        ]
    geo = Affine(1 / 1200, 0.0, -3.25, 0.0, -1 / 1200, 36.75)
    ftus = Affine(2.5, 0.0, 6012345.0, 0.0, -2.5, 2101234.5)
    f32 = dict(tiled=True, blockxsize=16, blockysize=16, compress="deflate", predictor=3,
               interleave="band")
    cases += [
        ("geographic_point", "float32", f32,
         dict(crs="EPSG:4326", transform=geo, nodata=-9999.0, point=True, desc=True)),
        ("us_feet_2227", "float32", f32,
         dict(crs="EPSG:2227", transform=ftus, nodata=-9999.0, point=False, desc=True)),
        ("utm_point_nan_nodata", "float32", f32,
         dict(crs="EPSG:32633", transform=Affine(0.5, 0, 400000.0, 0, -0.5, 5000000.0),
              nodata=float("nan"), point=True, desc=False)),
        ("etrs89_no_nodata", "uint16", dict(compress="deflate", interleave="band"),
         dict(crs="EPSG:25832", transform=Affine(0.1, 0, 300000.0, 0, -0.1, 5600000.0),
              nodata=None, point=False, desc=False)),
    ]
    return cases


def gen(root):
    out = root / "gdal"
    out.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(20240611)
    expected = []
    for name, dt, opts, g in gen_cases():
        path = out / f"{name}.tif"
        bands = [values(dt, b, rng, g["nodata"]) for b in range(COUNT)]
        with rasterio.open(path, "w", driver="GTiff", width=WIDTH, height=HEIGHT, count=COUNT,
                           dtype=dt, crs=g["crs"], transform=g["transform"], nodata=g["nodata"],
                           **opts) as d:
            for b, a in enumerate(bands):
                d.write(a, b + 1)
                if g["desc"]:
                    d.set_band_description(b + 1, f"{name}_layer{b + 1} <&> \"q\"")
            if g["point"]:
                d.update_tags(AREA_OR_POINT="Point")
        meta = metadata_of(path)
        meta["file"] = path.name
        with rasterio.open(path) as d:
            for b in range(COUNT):
                # Pixels as GDAL decodes them, little-endian.
                d.read(b + 1).astype(np.dtype(dt).newbyteorder("<")).tofile(
                    out / f"{name}.b{b + 1}.raw")
        expected.append(meta)
    (out / "expected.json").write_text(json.dumps(expected, indent=1))
    print(f"wrote {len(expected)} GeoTIFFs with rasterio {rasterio.__version__} "
          f"(GDAL {rasterio.__gdal_version__}) into {out}")


def same(a, b):
    """Exact equality, NaN equal to NaN."""
    if isinstance(a, float) and isinstance(b, float) and math.isnan(a) and math.isnan(b):
        return True
    return a == b


def check(root):
    src = root / "terrastack"
    cases = json.loads((src / "expected.json").read_text())
    failures = 0
    for case in cases:
        path = src / case["file"]
        problems = []
        got = metadata_of(path)  # what GDAL (via rasterio) reads from terrastack's file
        keys = ["dtype", "width", "height", "count", "crs_kind", "epsg", "raster_space",
                "tiled", "interleave", "compression", "predictor", "bigtiff",
                "transform_bits", "nodata_bits", "descriptions"]
        # GDAL presents uncompressed strips in blocks of its own choosing ("strip
        # chopping"), so the block size is a file property only otherwise.
        if case["tiled"] or case["compression"] != "none":
            keys.append("block")
        for key in keys:
            if not same(got[key], case[key]):
                problems.append(f"{key}: GDAL reads {got[key]!r}, terrastack wrote {case[key]!r}")
        # PROJ derives the US survey foot as 12/39.37 and terrastack as 1200/3937: the two
        # doubles may differ in the last bit, so units compare to 1e-15 relative.
        want_unit = case.get("linear_unit_m")
        if want_unit is not None and (got["linear_unit_m"] is None
                                      or abs(got["linear_unit_m"] - want_unit) > 1e-15 * want_unit):
            problems.append(f"linear unit: GDAL {got['linear_unit_m']!r}, "
                            f"terrastack {want_unit!r}")
        with rasterio.open(path) as d:
            for b in range(case["count"]):
                dt = np.dtype(case["dtype"]).newbyteorder("<")
                want = np.fromfile(src / f"{path.stem}.b{b + 1}.raw", dtype=dt)
                have = d.read(b + 1).astype(dt).ravel()
                # Compare bit patterns so that NaN payloads and -0.0 count too.
                uint = np.dtype(f"<u{dt.itemsize}")
                if want.size != have.size or not np.array_equal(want.view(uint), have.view(uint)):
                    diff = int(np.count_nonzero(want.view(uint) != have.view(uint))) \
                        if want.size == have.size else "size"
                    problems.append(f"band {b + 1}: {diff} cells differ")
        if problems:
            failures += 1
            print(f"FAIL {case['file']}")
            for p in problems:
                print(f"     {p}")
    print(f"{len(cases) - failures}/{len(cases)} terrastack-written GeoTIFFs read identically "
          f"by rasterio {rasterio.__version__} (GDAL {rasterio.__gdal_version__})")
    return failures == 0


def main(argv):
    if len(argv) != 3 or argv[1] not in ("gen", "check"):
        print(__doc__)
        return 2
    root = Path(argv[2])
    if argv[1] == "gen":
        gen(root)
        return 0
    return 0 if check(root) else 1


if __name__ == "__main__":
    sys.exit(main(sys.argv))

#!/usr/bin/env python3
"""Check finished terrastack stacks with an independent reader (GDAL through rasterio).

For every STACK_DIR given: stack.tif opens in rasterio with the transform, CRS, nodata
and band names that stack.json states; every band's statistics in stack.json equal
numpy's over rasterio's pixels (min/max exactly, mean/std to 1e-9 relative: the sums run
in a different order); the image is tiled and compressed as documented.

Usage: python3 scripts/check_stack.py STACK_DIR [STACK_DIR ...]
"""
import json
import math
import sys

import numpy as np
import rasterio


def check(stack_dir):
    meta = json.load(open(f"{stack_dir}/stack.json"))
    assert meta["format"] == "terrastack-stack/1", meta["format"]
    with rasterio.open(f"{stack_dir}/stack.tif") as ds:
        # Source: rasterio (GDAL) — georeferencing and band names as GDAL-based tools see them.
        assert ds.count == len(meta["bands"]), (ds.count, len(meta["bands"]))
        assert (ds.width, ds.height) == (meta["grid"]["width"], meta["grid"]["height"])
        assert tuple(ds.transform.to_gdal()) == tuple(meta["grid"]["transform"]), (ds.transform.to_gdal(), meta["grid"]["transform"])
        epsg = meta["grid"]["crs"]["epsg"]
        if epsg is not None:
            assert ds.crs.to_epsg() == epsg, (ds.crs, epsg)
        assert ds.nodata is not None and math.isnan(ds.nodata), ds.nodata
        assert all(dt == "float32" for dt in ds.dtypes)
        assert list(ds.descriptions) == [b["name"] for b in meta["bands"]], ds.descriptions
        assert ds.profile["tiled"] and ds.compression is not None
        for band in meta["bands"]:
            a = ds.read(band["index"]).astype(np.float64)
            valid = a[~np.isnan(a)]
            s = band["stats"]
            assert abs(s["valid_fraction"] - valid.size / a.size) < 1e-12, (band["name"], s)
            if valid.size == 0:
                assert s["mean"] is None
                continue
            # Source: numpy over rasterio's pixels.
            assert s["min"] == valid.min() and s["max"] == valid.max(), (band["name"], s, valid.min(), valid.max())
            assert math.isclose(s["mean"], valid.mean(), rel_tol=1e-9, abs_tol=1e-12), (band["name"], s["mean"], valid.mean())
            assert math.isclose(s["std"], valid.std(), rel_tol=1e-9, abs_tol=1e-12), (band["name"], s["std"], valid.std())
    print(f"{stack_dir}: {len(meta['bands'])} bands agree with rasterio/numpy")


if __name__ == "__main__":
    if len(sys.argv) < 2:
        sys.exit(__doc__)
    for d in sys.argv[1:]:
        check(d)

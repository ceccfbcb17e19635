"""Cross-check of terrastack's catalogue outputs against pystac, pyproj, geopandas, pyarrow.

Usage: python3 scripts/xcheck_catalog.py TERRASTACK WORK BATCH_ROOT

1. Small DSMs in several CRSs (UTM north and south on WGS84, ETRS89 UTM, Pseudo-Mercator,
   World Mercator, WGS84 geographic), written by rasterio, are built with `--date`; each
   stack.stac.json opens in pystac, its footprint equals pyproj's transformation (through
   rasterio.warp.transform) of the same densified outline within 1e-8 degree, its bbox holds
   every point, proj:* equal rasterio's view of stack.tif, the band list equals
   stack.json's, file:size and file:checksum equal the file's.
2. A CRS the default build cannot invert (EPSG:2056) gives a warning naming it and no Item.
3. The batch's collection.json and every Item it links open in pystac.
4. Training tables as CSV and GeoParquet: geopandas reads the Parquet table with the
   stack's CRS (pyproj equality with the EPSG CRS), points equal to the CSV's x, y and
   values equal to the CSV's (NaN where empty); pyarrow reads the `geo` metadata
   (GeoParquet 1.1.0).
"""

import hashlib
import json
import subprocess
import sys
from pathlib import Path

import geopandas
import numpy as np
import pandas
import pyarrow.parquet as pq
import pystac
import rasterio
from pyproj import CRS
from rasterio.transform import from_origin
from rasterio.warp import transform as warp_transform

TS, WORK, BATCH = sys.argv[1], Path(sys.argv[2]), Path(sys.argv[3])
PER_SIDE = 10


def fail(msg):
    sys.exit(f"catalog cross-check FAILED: {msg}")


def run(*args):
    p = subprocess.run([TS, *map(str, args)], capture_output=True, text=True)
    if p.returncode != 0:
        fail(f"terrastack {' '.join(map(str, args))}: {p.stderr}")
    return p


def outline(ds):
    # The same densified outline as terrastack's (src/lonlat.rs `outline`).
    x0, y0, x1, y1 = ds.bounds.left, ds.bounds.bottom, ds.bounds.right, ds.bounds.top
    t = [i / PER_SIDE for i in range(PER_SIDE)]
    pts = [(x0 + (x1 - x0) * s, y0) for s in t] + [(x1, y0 + (y1 - y0) * s) for s in t]
    pts += [(x1 - (x1 - x0) * s, y1) for s in t] + [(x0, y1 - (y1 - y0) * s) for s in t]
    return pts + [pts[0]]


def check_item(stack_dir, code):
    item_path = stack_dir / "stack.stac.json"
    item = pystac.Item.from_file(str(item_path))
    meta = json.loads((stack_dir / "stack.json").read_text())
    with rasterio.open(stack_dir / "stack.tif") as ds:
        pts = outline(ds)
        lon, lat = warp_transform(ds.crs, "EPSG:4326", [p[0] for p in pts], [p[1] for p in pts])
        ring = item.geometry["coordinates"][0]
        err = max(max(abs(a[0] - b), abs(a[1] - c)) for a, b, c in zip(ring, lon, lat))
        if len(ring) != len(pts) or err > 1e-8:
            fail(f"{item_path}: footprint differs from pyproj's by {err:.3g} degree")
        w, s, e, n = item.bbox
        tol = 1e-8  # the footprint tolerance above
        if not (w <= min(lon) + tol and e >= max(lon) - tol and s <= min(lat) + tol
                and n >= max(lat) - tol):
            fail(f"{item_path}: bbox {item.bbox} does not hold the footprint")
        props = item.properties
        if props["proj:code"] != f"EPSG:{code}":
            fail(f"{item_path}: proj:code {props['proj:code']}")
        if props["proj:shape"] != [ds.height, ds.width]:
            fail(f"{item_path}: proj:shape {props['proj:shape']}")
        if not np.allclose(props["proj:transform"], list(ds.transform)[:6], rtol=0, atol=1e-9):
            fail(f"{item_path}: proj:transform {props['proj:transform']} vs {ds.transform}")
        if props.get("proj:projjson") is not None and CRS.from_json_dict(props["proj:projjson"]) != CRS.from_epsg(code):
            fail(f"{item_path}: proj:projjson is not EPSG:{code}")
        descriptions = list(ds.descriptions)
    asset = item.assets["stack"]
    bands = asset.extra_fields["bands"]
    names = [b["name"] for b in sorted(meta["bands"], key=lambda b: b["index"])]
    if [b["name"] for b in bands] != names or names != descriptions:
        fail(f"{item_path}: bands {[b['name'] for b in bands]} vs stack.json {names}")
    for b, m in zip(bands, sorted(meta["bands"], key=lambda b: b["index"])):
        if b["data_type"] != "float32" or b["nodata"] != "nan":
            fail(f"{item_path}: band {b['name']} data type / nodata")
        if m["stats"]["min"] is not None and b["statistics"]["minimum"] != m["stats"]["min"]:
            fail(f"{item_path}: band {b['name']} minimum differs from stack.json")
    data = (stack_dir / "stack.tif").read_bytes()
    if asset.extra_fields["file:size"] != len(data):
        fail(f"{item_path}: file:size")
    if asset.extra_fields["file:checksum"] != "1220" + hashlib.sha256(data).hexdigest():
        fail(f"{item_path}: file:checksum")
    return err


def dsm(path, crs, x0, y0, cell, n=64):
    yy, xx = np.mgrid[0:n, 0:n]
    z = (100 + 0.5 * xx + 0.2 * yy + np.sin(xx / 5.0)).astype(np.float32)
    with rasterio.open(path, "w", driver="GTiff", width=n, height=n, count=1, dtype="float32",
                       crs=crs, transform=from_origin(x0, y0, cell, cell), nodata=np.nan) as ds:
        ds.write(z, 1)


WORK.mkdir(parents=True, exist_ok=True)
# (EPSG, west, north, cell): sites far from the central meridian stress the series.
cases = [
    (32633, 230_000.0, 5_400_000.0, 40.0),   # UTM 33N, 270 km west of 15° E
    (32756, 760_000.0, 6_250_000.0, 40.0),   # UTM 56S (southern hemisphere)
    (32601, 500_000.0, 8_100_000.0, 40.0),   # UTM 1N, 73° N
    (25832, 690_000.0, 5_900_000.0, 30.0),   # ETRS89 / UTM 32N
    (3857, 1_400_000.0, 6_900_000.0, 30.0),  # Pseudo-Mercator
    (3395, 1_400_000.0, 6_850_000.0, 30.0),  # World Mercator
    (4326, 12.25, 48.75, 0.0004),            # WGS84 geographic
]
worst = 0.0
for code, x0, y0, cell in cases:
    src = WORK / f"dsm_{code}.tif"
    out = WORK / f"stack_{code}"
    dsm(src, f"EPSG:{code}", x0, y0, cell)
    run("build", "--dsm", src, "--features", "elevation,slope", "--out", out, "--force",
        "--date", "2026-07-08", "--quiet")
    worst = max(worst, check_item(out, code))
    # Training tables: random points inside the stack, CSV and GeoParquet.
    rng = np.random.default_rng(code)
    xs = x0 + rng.uniform(0, 64 * cell, 40)
    ys = y0 - rng.uniform(0, 64 * cell, 40)
    pandas.DataFrame({"x": xs, "y": ys, "class": rng.choice(["fen", "reed"], 40)}).to_csv(
        WORK / f"pts_{code}.csv", index=False)
    for ext in ("csv", "parquet"):
        run("sample", "--stack", out, "--samples", WORK / f"pts_{code}.csv", "--out",
            WORK / f"table_{code}.{ext}", "--folds", "2", "--force")
    csv = pandas.read_csv(WORK / f"table_{code}.csv")
    gdf = geopandas.read_parquet(WORK / f"table_{code}.parquet")
    if code in (4326, 3857) or 32601 <= code <= 32760:
        if gdf.crs != CRS.from_epsg(code) or gdf.crs.to_epsg() != code:
            fail(f"table_{code}.parquet: CRS {gdf.crs} is not EPSG:{code}")
    elif gdf.crs is not None:
        fail(f"table_{code}.parquet: CRS {gdf.crs} where this build writes null (unknown)")
    if list(gdf.columns) != ["geometry", *csv.columns]:
        fail(f"table_{code}.parquet: columns {list(gdf.columns)} vs CSV {list(csv.columns)}")
    if not (np.array_equal(gdf.geometry.x.to_numpy(), csv["x"].to_numpy())
            and np.array_equal(gdf.geometry.y.to_numpy(), csv["y"].to_numpy())):
        fail(f"table_{code}.parquet: points differ from the CSV's x, y")
    for c in csv.columns:
        a, b = gdf[c].to_numpy(), csv[c].to_numpy()
        if a.dtype.kind == "f":
            same = np.array_equal(a.astype(np.float32), b.astype(np.float32), equal_nan=True)
        else:
            same = [str(v) for v in a] == [str(v) for v in b]
        if not same:
            fail(f"table_{code}.parquet: column {c} differs from the CSV")
    geo = json.loads(pq.read_metadata(WORK / f"table_{code}.parquet").metadata[b"geo"])
    if geo["version"] != "1.1.0" or geo["columns"]["geometry"]["geometry_types"] != ["Point"]:
        fail(f"table_{code}.parquet: geo metadata {geo}")
print(f"{len(cases)} CRSs: Items open in pystac, footprints equal pyproj's within {worst:.2g} degree; "
      f"GeoParquet tables equal the CSVs in geopandas with the stack's CRS")

# 2. A CRS this build cannot invert: a warning, no Item.
src = WORK / "dsm_2056.tif"
dsm(src, "EPSG:2056", 2_600_000.0, 1_200_000.0, 2.0)
p = run("build", "--dsm", src, "--features", "elevation", "--out", WORK / "stack_2056", "--force",
        "--date", "2026-07-08", "--quiet")
if (WORK / "stack_2056" / "stack.stac.json").exists() or "EPSG:2056" not in p.stderr \
        or "--features gdal" not in p.stderr:
    fail(f"EPSG:2056: expected a warning and no Item, got: {p.stderr}")
print("EPSG:2056 (not invertible without GDAL): warning, no Item")

# 3. The batch's Collection and its Items.
col = pystac.Collection.from_file(str(BATCH / "collection.json"))
items = list(col.get_items())
if len(items) < 2:
    fail(f"collection.json links {len(items)} item(s)")
for it in items:
    stack_dir = Path(it.get_self_href()).parent
    check_item(stack_dir, 32633)
print(f"collection.json: {len(items)} Items ({', '.join(i.id for i in items)}), each checked")
print("catalog cross-check passed")

#!/usr/bin/env bash
# Cross-check of `terrastack sample` against rasterio (GDAL 3.x through its Python API):
#   1. rasterio writes a small stack-like GeoTIFF (float32, NaN nodata, band descriptions,
#      tiled, deflate) and a stack.json; numpy draws random points, circles and polygons;
#   2. terrastack samples it (cells, polygons, means, spatial blocks);
#   3. every table value must equal rasterio's float32 value at the row's coordinates,
#      bit for bit; cell sets must equal numpy's brute-force circle test and GDAL's
#      polygon rasterisation (rasterio.features.rasterize, cell-centre rule); means must
#      equal numpy's; folds must hold samples and blocks together, be stratified and
#      repeat for a seed;
#   4. scripts/sample_forest.py trains a random forest on the table with its folds;
#   5. scripts/xcheck_separability.py checks the separability reports (F and p against
#      scikit-learn's f_classif, correlations against numpy.corrcoef).
# Env: XCHECK_ROOT = scratch folder (required). TERRASTACK = a built binary to use instead
# of `cargo build --release` (for local runs).
set -euo pipefail
cd "$(dirname "$0")/../.."
: "${XCHECK_ROOT:?set XCHECK_ROOT to a scratch folder}"
WORK="$XCHECK_ROOT/sample"
rm -rf "$WORK"
mkdir -p "$WORK"

if [ -z "${TERRASTACK:-}" ]; then
    cargo build --release --quiet
    TERRASTACK="$PWD/target/release/terrastack"
fi
python3 -c "import sklearn" 2>/dev/null ||
    python3 -m pip install --quiet --disable-pip-version-check scikit-learn

WORK="$WORK" python3 - <<'EOF'
# Inputs: the stack (rasterio) and the samples (numpy, seeded).
import json, os
import numpy as np
import rasterio
from rasterio.transform import from_origin

work = os.environ["WORK"]
os.makedirs(f"{work}/stack")
rng = np.random.default_rng(20261202)
h, w, res = 500, 700, 0.2
x0, y0 = 512_300.0, 5_401_200.0
names = ["elevation", "slope_horn", "ndvi"]
data = rng.normal(100.0, 15.0, size=(3, h, w)).astype(np.float32)
data[0, 200:240, 300:330] = np.nan          # a nodata patch in band 1
data[:, :, :3] = np.nan                     # nodata west edge in all bands
profile = dict(driver="GTiff", width=w, height=h, count=3, dtype="float32",
               crs="EPSG:32633", transform=from_origin(x0, y0, res, res), nodata=np.nan,
               tiled=True, blockxsize=256, blockysize=256, compress="deflate", predictor=3)
with rasterio.open(f"{work}/stack/stack.tif", "w", **profile) as ds:
    ds.write(data)
    for i, n in enumerate(names, 1):
        ds.set_band_description(i, n)
stats = dict(min=None, max=None, mean=None, std=None, valid_fraction=1.0)
meta = {
    "format": "terrastack-stack/1",
    "grid": {"width": w, "height": h, "transform": [x0, res, 0.0, y0, 0.0, -res],
             "crs": {"epsg": 32633, "wkt": None}},
    "nodata": "NaN",
    "bands": [dict(index=i, name=n, feature="elevation", method=None, scale_m=None,
                   window_px=None, units="metres", source="dsm", date=None, stats=stats)
              for i, n in enumerate(names, 1)],
    "sources": [], "parameters": {}, "software": {"name": "terrastack", "version": "0"},
}
with open(f"{work}/stack/stack.json", "w") as f:
    json.dump(meta, f)

classes = ["reed", "sedge", "willow", "gravel"]
with open(f"{work}/points.csv", "w") as f:
    f.write("sample_id,Easting,Northing,Class,radius_m\n")
    for i in range(120):
        x = x0 + rng.uniform(-3.0, w * res + 3.0)   # a few fall outside
        y = y0 - rng.uniform(-3.0, h * res + 3.0)
        r = "" if i % 3 == 0 else f"{rng.uniform(0.15, 1.6):.3f}"
        f.write(f"s{i},{x:.4f},{y:.4f},{classes[i % 4]},{r}\n")

feats = []
for i in range(30):
    cx, cy = x0 + rng.uniform(5, w * res - 5), y0 - rng.uniform(5, h * res - 5)
    n = int(rng.integers(3, 8))
    ang = np.sort(rng.uniform(0, 2 * np.pi, n))
    rad = rng.uniform(0.5, 4.0, n)
    ring = [[float(cx + r * np.cos(a)), float(cy + r * np.sin(a))] for a, r in zip(ang, rad)]
    ring.append(ring[0])
    feats.append({"type": "Feature", "id": f"plot{i}",
                  "properties": {"cover": classes[i % 4]},
                  "geometry": {"type": "Polygon", "coordinates": [ring]}})
with open(f"{work}/plots.geojson", "w") as f:
    json.dump({"type": "FeatureCollection", "features": feats}, f)
EOF

ts() { "$TERRASTACK" sample --stack "$WORK/stack" "$@"; }
ts --samples "$WORK/points.csv" --out "$WORK/points_table.csv" --folds 4 --keep-nodata > "$WORK/points.log"
ts --samples "$WORK/points.csv" --out "$WORK/points_again.csv" --folds 4 --keep-nodata > /dev/null
ts --samples "$WORK/points.csv" --out "$WORK/points_seed.csv" --folds 4 --keep-nodata --seed 7 > /dev/null
ts --samples "$WORK/points.csv" --out "$WORK/points_blocks.csv" --folds 3 --block-size 25 > /dev/null
ts --samples "$WORK/plots.geojson" --class-field cover --out "$WORK/plots.csv" --folds 3 --keep-nodata > /dev/null
ts --samples "$WORK/plots.geojson" --class-field cover --out "$WORK/plots_mean.csv" --folds 3 --aggregate mean > /dev/null
cmp "$WORK/points_table.csv" "$WORK/points_again.csv"
cat "$WORK/points.log"

WORK="$WORK" python3 - <<'EOF'
import csv, json, os
import numpy as np
import rasterio
from rasterio.features import rasterize

work = os.environ["WORK"]
ds = rasterio.open(f"{work}/stack/stack.tif")
stack = ds.read()                     # small: the whole array for the reference
h, w = ds.height, ds.width
t = ds.transform

def table(name):
    with open(f"{work}/{name}") as f:
        return list(csv.DictReader(f))

def f32(text):
    return np.float32(np.nan) if text == "" else np.float32(text)

def check_values(rows):
    # Source: rasterio's value at the row's coordinates (ds.index, floor rule).
    n = 0
    for r in rows:
        x, y = float(r["x"]), float(r["y"])
        row, col = ds.index(x, y)
        for b, name in enumerate(ds.descriptions):
            want = stack[b, row, col]
            got = f32(r[name])
            assert (np.isnan(want) and np.isnan(got)) or want.tobytes() == got.tobytes(), (r, name, want)
            n += 1
    return n

# Centres of all cells (rasterio's affine, cell centres at +0.5).
cols, rows_ = np.meshgrid(np.arange(w), np.arange(h))
cx, cy = t * (cols + 0.5, rows_ + 0.5)

def cells_of(rows):
    out = {}
    for r in rows:
        out.setdefault(r["sample_id"], set()).add(ds.index(float(r["x"]), float(r["y"])))
    return out

# 1. Points and circles.
pts = table("points_table.csv")
n = check_values(pts)
got = cells_of(pts)
with open(f"{work}/points.csv") as f:
    samples = list(csv.DictReader(f))
for s in samples:
    x, y = float(s["Easting"]), float(s["Northing"])
    if s["radius_m"] == "":
        row, col = ds.index(x, y)
        want = {(row, col)} if 0 <= row < h and 0 <= col < w else set()
    else:
        # Source: numpy brute force over every cell centre, boundary included.
        inside = (cx - x) ** 2 + (cy - y) ** 2 <= float(s["radius_m"]) ** 2
        want = set(zip(*np.nonzero(inside)))
    assert got.get(s["sample_id"], set()) == want, (s, got.get(s["sample_id"]), want)
print(f"points: {len(pts)} rows, {n} values equal to rasterio's, cell sets equal numpy's")

# 2. Polygons: GDAL's rasterisation with the cell-centre rule (all_touched=False).
plots = table("plots.csv")
n = check_values(plots)
got = cells_of(plots)
gj = json.load(open(f"{work}/plots.geojson"))
for feat in gj["features"]:
    mask = rasterize([(feat["geometry"], 1)], out_shape=(h, w), transform=t, fill=0,
                     all_touched=False, dtype="uint8")
    want = set(zip(*np.nonzero(mask)))
    assert got.get(feat["id"], set()) == want, (feat["id"], len(got.get(feat["id"], ())), len(want))
print(f"polygons: {len(plots)} rows, {n} values equal to rasterio's, cell sets equal GDAL rasterize")

# 3. Means: numpy over the polygon's cells that are valid in every band.
means = table("plots_mean.csv")
for m in means:
    cells = sorted(got[m["sample_id"]])
    vals = np.array([stack[:, r, c] for r, c in cells], dtype=np.float64)
    vals = vals[~np.isnan(vals).any(axis=1)]
    want = vals.mean(axis=0)
    for b, name in enumerate(ds.descriptions):
        assert abs(float(m[name]) - want[b]) <= 1e-12 * abs(want[b]), (m, want)
print(f"means: {len(means)} samples equal numpy's mean within 1e-12 relative")

# 4. Folds: one fold per sample; per class counts within one; blocks never split.
def fold_map(rows):
    f = {}
    for r in rows:
        assert f.setdefault(r["sample_id"], r["fold"]) == r["fold"], ("sample split", r)
    return f

for name, k in [("points_table.csv", 4), ("plots.csv", 3)]:
    rows = table(name)
    folds = fold_map(rows)
    cls = {r["sample_id"]: r["class"] for r in rows}
    for c in set(cls.values()):
        counts = np.bincount([int(folds[s]) - 1 for s in folds if cls[s] == c], minlength=k)
        assert counts.max() - counts.min() <= 1, (name, c, counts)
seed_a = fold_map(table("points_table.csv"))
seed_b = fold_map(table("points_seed.csv"))
assert seed_a != seed_b, "another seed gives other folds"

blocks = fold_map(table("points_blocks.csv"))
by_block = {}
x0, y0 = t.c, t.f
for s in samples:
    if s["sample_id"] in blocks:
        key = (int(np.floor((float(s["Easting"]) - x0) / 25.0)),
               int(np.floor((y0 - float(s["Northing"])) / 25.0)))
        assert by_block.setdefault(key, blocks[s["sample_id"]]) == blocks[s["sample_id"]], ("block split", key)
# The block column: one id per block, the same for every row of a sample and of a block.
block_rows = table("points_blocks.csv")
ids = {}
for r in block_rows:
    s = next(x for x in samples if x["sample_id"] == r["sample_id"])
    key = (int(np.floor((float(s["Easting"]) - x0) / 25.0)),
           int(np.floor((y0 - float(s["Northing"])) / 25.0)))
    assert ids.setdefault(key, r["block"]) == r["block"], ("block id", key, r)
assert len(set(ids.values())) == len(ids), "distinct blocks have distinct ids"
print(f"folds: samples whole, classes stratified, {len(by_block)} blocks whole, seed changes folds")
EOF

python3 scripts/sample_forest.py "$WORK/points_table.csv"
python3 scripts/sample_forest.py "$WORK/plots_mean.csv"
# Separability reports against scikit-learn's f_classif and numpy.corrcoef.
python3 scripts/xcheck_separability.py "$WORK/points_table.csv"
python3 scripts/xcheck_separability.py "$WORK/plots_mean.csv"
echo "sample cross-check passed"

//! Cross-checks of spectral indices, band math and resampling against independent
//! libraries: spyndex (Awesome Spectral Indices) for the index formulas, numpy for band
//! math, and GDAL's warper (through rasterio) for resampling a real open DEM (matplotlib's
//! `jacksboro_fault_dem.npz`).
//!
//! The references are written by `python3 scripts/xcheck_spectral.py gen DIR`; run with
//! `TERRASTACK_XCHECK_DIR=DIR cargo test --release --test xcheck_spectral`. The tests are
//! ignored under plain `cargo test`; `scripts/ci/spectral.sh` runs them with `--ignored`.

mod util;

use std::path::Path;

use ndarray::Array2;
use serde_json::Value;

use terrastack::align::{resample_window, MemoryRaster, Resampling};
use terrastack::grid::{Crs, Grid, Window};
use terrastack::spectral::{find_index, BandArrays, Expression, Role};
use util::{read_json, read_raw_f32, xcheck_dir};

fn manifest(dir: &Path) -> Value {
    read_json(&dir.join("manifest.json"))
}

fn usize_of(v: &Value) -> usize {
    v.as_u64().expect("integer") as usize
}

fn transform_of(v: &Value) -> [f64; 6] {
    let t: Vec<f64> = v
        .as_array()
        .expect("array")
        .iter()
        .map(|x| x.as_f64().expect("number"))
        .collect();
    [t[0], t[1], t[2], t[3], t[4], t[5]]
}

/// Compare with the same NaN pattern and |a − b| ≤ rel·|b| + abs. Returns the largest
/// difference seen.
fn assert_close(what: &str, got: &Array2<f32>, want: &Array2<f32>, rel: f64, abs: f64) -> f64 {
    assert_eq!(got.dim(), want.dim(), "{what}: shape");
    let mut worst = 0.0f64;
    for ((idx, g), w) in got.indexed_iter().zip(want.iter()) {
        assert!(!g.is_infinite(), "{what} at {idx:?}: infinite");
        assert_eq!(
            g.is_nan(),
            w.is_nan(),
            "{what} at {idx:?}: {g} vs reference {w}"
        );
        if g.is_nan() {
            continue;
        }
        let d = (*g as f64 - *w as f64).abs();
        worst = worst.max(d);
        assert!(
            d <= rel * (*w as f64).abs() + abs,
            "{what} at {idx:?}: {g} vs reference {w}"
        );
    }
    worst
}

fn bands(dir: &Path, rows: usize, cols: usize) -> BandArrays {
    let mut b = BandArrays::new();
    for role in ["blue", "green", "red", "rededge", "nir"] {
        let data = read_raw_f32(
            &dir.join("spectral").join(format!("{role}.f32")),
            rows,
            cols,
        );
        b.insert(Role::parse(role).unwrap(), data).unwrap();
    }
    b
}

#[test]
#[ignore = "cross-check: needs TERRASTACK_XCHECK_DIR from scripts/xcheck_spectral.py (run by scripts/ci/spectral.sh)"]
fn indices_match_spyndex() {
    let dir = xcheck_dir("python3 scripts/xcheck_spectral.py gen DIR");
    let m = manifest(&dir);
    let shape = &m["spectral"]["shape"];
    let (rows, cols) = (usize_of(&shape[0]), usize_of(&shape[1]));
    let b = bands(&dir, rows, cols);
    let indices = m["spectral"]["indices"].as_object().expect("indices");
    assert_eq!(indices.len(), 13);
    for (name, spec) in indices {
        let want = read_raw_f32(
            &dir.join("spectral").join(spec["file"].as_str().unwrap()),
            rows,
            cols,
        );
        let got = find_index(name).unwrap().compute(&b).unwrap();
        // Source: spyndex (Awesome Spectral Indices) evaluated in f64 on the same f32
        // inputs; both sides round once to f32, so 2 f32 ulps (2·2⁻²⁴ relative) plus 1e-7
        // absolute for values that cancel to near zero.
        let worst = assert_close(name, &got, &want, 2.4e-7, 1e-7);
        eprintln!(
            "{name}: max |terrastack − spyndex {}| = {worst:.2e}",
            spec["spyndex"]
        );
    }
}

#[test]
#[ignore = "cross-check: needs TERRASTACK_XCHECK_DIR from scripts/xcheck_spectral.py (run by scripts/ci/spectral.sh)"]
fn expressions_match_numpy() {
    let dir = xcheck_dir("python3 scripts/xcheck_spectral.py gen DIR");
    let m = manifest(&dir);
    let shape = &m["spectral"]["shape"];
    let (rows, cols) = (usize_of(&shape[0]), usize_of(&shape[1]));
    let b = bands(&dir, rows, cols);
    for spec in m["spectral"]["expressions"].as_array().unwrap() {
        let name = spec["name"].as_str().unwrap();
        let expr = Expression::parse(name, spec["text"].as_str().unwrap()).unwrap();
        let want = read_raw_f32(
            &dir.join("spectral").join(spec["file"].as_str().unwrap()),
            rows,
            cols,
        );
        let got = expr.eval(&b).unwrap();
        // Source: numpy in f64 on the same inputs (scripts/xcheck_spectral.py); f32 rounding
        // of the result as above.
        let worst = assert_close(name, &got, &want, 2.4e-7, 1e-7);
        eprintln!("{name}: max |terrastack − numpy| = {worst:.2e}");
    }
}

#[test]
#[ignore = "cross-check: needs TERRASTACK_XCHECK_DIR from scripts/xcheck_spectral.py (run by scripts/ci/spectral.sh)"]
fn resampling_matches_gdal_warper() {
    let dir = xcheck_dir("python3 scripts/xcheck_spectral.py gen DIR");
    let m = manifest(&dir);
    let rs = &m["resample"];
    let s = &rs["source"];
    let (sw, sh) = (usize_of(&s["width"]), usize_of(&s["height"]));
    let crs = Crs::from_epsg(s["epsg"].as_u64().unwrap() as u32);
    let src_grid = Grid::new(sw, sh, transform_of(&s["transform"]), crs.clone()).unwrap();
    let data = read_raw_f32(
        &dir.join("resample").join(s["file"].as_str().unwrap()),
        sh,
        sw,
    );
    let source = MemoryRaster::new("jacksboro_fault_dem", src_grid, vec![data]).unwrap();
    for case in rs["cases"].as_array().unwrap() {
        let (tw, th) = (usize_of(&case["width"]), usize_of(&case["height"]));
        let target = Grid::new(tw, th, transform_of(&case["transform"]), crs.clone()).unwrap();
        let method = Resampling::parse(case["method"].as_str().unwrap()).unwrap();
        let what = format!("{} {}", case["target"].as_str().unwrap(), method.name());
        let want = read_raw_f32(
            &dir.join("resample").join(case["file"].as_str().unwrap()),
            th,
            tw,
        );
        let got = resample_window(&source, 1, &target, Window::full(&target), method).unwrap();
        let (mut compared, mut gdal_valid, mut worst) = (0usize, 0usize, 0.0f64);
        for ((idx, g), w) in got.indexed_iter().zip(want.iter()) {
            gdal_valid += usize::from(!w.is_nan());
            match method {
                // Source: GDAL's warper, nearest: the same source cell, so bit-identical
                // values and the same nodata cells.
                Resampling::Nearest => {
                    assert_eq!(
                        g.to_bits(),
                        w.to_bits(),
                        "{what} at {idx:?}: {g} vs GDAL {w}"
                    );
                    compared += usize::from(!g.is_nan());
                }
                // Where terrastack gives a value, GDAL must give the same one. terrastack is
                // stricter near holes and edges (NaN if any weighted cell is NaN, or if less
                // than half an average footprint is valid), where GDAL renormalises.
                _ => {
                    if g.is_nan() {
                        continue;
                    }
                    assert!(
                        !w.is_nan(),
                        "{what} at {idx:?}: terrastack {g}, GDAL nodata"
                    );
                    let d = (*g as f64 - *w as f64).abs();
                    worst = worst.max(d);
                    // Elevations 150–750 m: f32 spacing there is at most 6.1e-5 m. GDAL sums
                    // weights in a different order and, on some paths, in f32; 2e-4 m (about
                    // 3 ulps at 750 m) bounds that rounding while any kernel or weight error
                    // (a tap moved by one cell changes values by metres) stays far above it.
                    assert!(d <= 2e-4, "{what} at {idx:?}: {g} vs GDAL {w}");
                    compared += 1;
                }
            }
        }
        // The stricter nodata rule must not lose more than a small share of GDAL's cells
        // (holes: 54 + 40 source cells of 138 632; edges: 1–2 target rows and columns).
        assert!(
            compared as f64 >= 0.97 * gdal_valid as f64,
            "{what}: only {compared} of GDAL's {gdal_valid} valid cells compared"
        );
        eprintln!(
            "{what}: {compared} cells of {gdal_valid}, max |terrastack − GDAL| = {worst:.2e} m"
        );
    }
}

#[test]
#[ignore = "cross-check: needs TERRASTACK_XCHECK_DIR from scripts/xcheck_spectral.py (run by scripts/ci/spectral.sh)"]
fn resampling_from_geotiff_matches_in_memory() {
    // The same DEM written by GDAL as a tiled, compressed GeoTIFF and read through
    // terrastack's reader: grid and values must equal the raw array's, so every comparison
    // above against GDAL's warper holds for files too. Checked bit for bit on a block.
    let dir = xcheck_dir("python3 scripts/xcheck_spectral.py gen DIR");
    let m = manifest(&dir);
    let s = &m["resample"]["source"];
    let (sw, sh) = (usize_of(&s["width"]), usize_of(&s["height"]));
    let path = dir.join("resample").join(s["geotiff"].as_str().unwrap());
    let file = terrastack::raster::open(&path).unwrap();
    let g = file.grid().clone();
    assert_eq!((g.width, g.height), (sw, sh));
    let t = transform_of(&s["transform"]);
    for (a, b) in g.transform.iter().zip(t.iter()) {
        assert!(
            (a - b).abs() <= 1e-12 * b.abs().max(1.0),
            "transform {:?} vs {t:?}",
            g.transform
        );
    }
    assert_eq!(g.crs.epsg, Some(4326));
    let raw = read_raw_f32(
        &dir.join("resample").join(s["file"].as_str().unwrap()),
        sh,
        sw,
    );
    let memory = MemoryRaster::new("raw", g.clone(), vec![raw]).unwrap();
    for case in m["resample"]["cases"].as_array().unwrap() {
        let (tw, th) = (usize_of(&case["width"]), usize_of(&case["height"]));
        let target = Grid::new(tw, th, transform_of(&case["transform"]), g.crs.clone()).unwrap();
        let method = Resampling::parse(case["method"].as_str().unwrap()).unwrap();
        let w = Window::new(37, 11, 150.min(tw - 37), 90.min(th - 11));
        let a = resample_window(file.as_ref(), 1, &target, w, method).unwrap();
        let b = resample_window(&memory, 1, &target, w, method).unwrap();
        for (x, y) in a.iter().zip(b.iter()) {
            assert_eq!(
                x.to_bits(),
                y.to_bits(),
                "{} {}",
                case["target"],
                method.name()
            );
        }
    }
}

//! Shared set-up for the integration tests (every file under `tests/` has `mod util;`):
//! run the binary, temporary folders and paths, small georeferenced rasters from
//! closed-form surfaces, reading bands, JSON files and whole output trees back, and the
//! cross-check folder. A test file keeps only what is its own (its site, its assertions).

#![allow(dead_code)]

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use ndarray::Array2;
use terrastack::grid::{Crs, Grid};
use terrastack::raster::geotiff::{write_geotiff, WriteOptions};

/// The `terrastack` binary built for these tests.
pub const BIN: &str = env!("CARGO_BIN_EXE_terrastack");

/// A command running the `terrastack` binary, to add arguments, pipes or a kill to.
pub fn command() -> Command {
    Command::new(BIN)
}

/// Run `terrastack` with `args`; returns its output.
pub fn run(args: &[&str]) -> Output {
    command()
        .args(args)
        .output()
        .expect("the terrastack binary runs")
}

/// Stderr of an output as text.
pub fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

/// A UTM 33N grid with `cell` metre cells, its north-west corner at (500000, 5000000).
pub fn utm_grid(width: usize, height: usize, cell: f64) -> Grid {
    Grid::new(
        width,
        height,
        [500_000.0, cell, 0.0, 5_000_000.0, 0.0, -cell],
        Crs::from_epsg(32633),
    )
    .unwrap()
}

/// A test surface: a tilted plane plus two sinusoids and a paraboloid (closed form), in
/// metres, sampled at cell centres.
pub fn surface(grid: &Grid) -> Array2<f32> {
    let h = grid.res_x();
    Array2::from_shape_fn((grid.height, grid.width), |(r, c)| {
        let x = (c as f64 + 0.5) * h;
        let y = -(r as f64 + 0.5) * h;
        (200.0 + 0.05 * x - 0.03 * y
            + 0.8 * (x / 3.0).sin() * (y / 5.0).cos()
            + (x * x + y * y) / 4000.0) as f32
    })
}

/// Write a float32 DSM of `surface` on `grid` with nodata -9999 to `path`.
pub fn write_dsm(path: &Path, grid: &Grid, data: &Array2<f32>) {
    let g = grid.clone().with_nodata(Some(-9999.0));
    let d = data.mapv(|v| if v.is_nan() { -9999.0 } else { v });
    write_geotiff(
        path,
        &g,
        &[d.view()],
        &["elevation"],
        &WriteOptions::default(),
    )
    .unwrap();
}

/// Write a 5-band uint16 orthomosaic (reflectance x 10000) of smooth closed-form fields.
pub fn write_ortho(path: &Path, grid: &Grid) {
    let bands: Vec<Array2<u16>> = (0..5)
        .map(|b| {
            Array2::from_shape_fn((grid.height, grid.width), |(r, c)| {
                let v = 1500.0
                    + 600.0 * b as f64
                    + 400.0 * ((r as f64 * 0.05 + b as f64).sin() + (c as f64 * 0.03).cos());
                v as u16
            })
        })
        .collect();
    let views: Vec<_> = bands.iter().map(|b| b.view()).collect();
    let g = grid.clone().with_nodata(Some(0.0));
    let o = WriteOptions {
        sample_type: terrastack::raster::SampleType::U16,
        ..WriteOptions::default()
    };
    write_geotiff(
        path,
        &g,
        &views,
        &["blue", "green", "red", "rededge", "nir"],
        &o,
    )
    .unwrap();
}

/// A fresh temporary folder.
pub fn tempdir() -> tempfile::TempDir {
    tempfile::tempdir().unwrap()
}

/// A path as text for a command line (test paths are UTF-8).
pub fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

/// Path inside a temp folder, as a String for command lines.
pub fn p(dir: &Path, name: &str) -> String {
    let path: PathBuf = dir.join(name);
    path.to_string_lossy().into_owned()
}

/// Every band of a raster as the bit patterns of its f32 values (NaN payloads included),
/// for bit-identity comparisons.
pub fn band_bits(path: &Path) -> Vec<Vec<u32>> {
    let src = terrastack::raster::open(path).unwrap();
    let w = terrastack::Window::full(src.grid());
    (1..=src.band_count())
        .map(|b| {
            src.read_window(b, w)
                .unwrap()
                .iter()
                .map(|v| v.to_bits())
                .collect()
        })
        .collect()
}

/// Band `band` (1-based) of a raster, read whole through terrastack's reader.
pub fn read_band(path: &Path, band: usize) -> Array2<f32> {
    let src = terrastack::raster::open(path).unwrap_or_else(|e| panic!("{e}"));
    let w = terrastack::Window::full(src.grid());
    src.read_window(band, w).unwrap_or_else(|e| panic!("{e}"))
}

/// A JSON file (a `stack.json`, a batch report, a cross-check manifest), parsed as a
/// `serde_json::Value` or a typed record such as `StackMetadata`.
pub fn read_json<T: serde::de::DeserializeOwned>(path: &Path) -> T {
    let text = std::fs::read_to_string(path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    serde_json::from_str(&text).unwrap_or_else(|e| panic!("{}: {e}", path.display()))
}

/// Every file under `root` except the batch reports (whose timings differ from run to
/// run), by path relative to `root`, with its bytes.
pub fn tree(root: &Path) -> BTreeMap<String, Vec<u8>> {
    let mut out = BTreeMap::new();
    let mut todo = vec![root.to_path_buf()];
    while let Some(dir) = todo.pop() {
        for e in std::fs::read_dir(&dir).unwrap() {
            let path = e.unwrap().path();
            if path.is_dir() {
                todo.push(path);
            } else {
                let rel = path
                    .strip_prefix(root)
                    .unwrap()
                    .to_string_lossy()
                    .into_owned();
                if !rel.starts_with("batch-report") {
                    out.insert(rel, std::fs::read(&path).unwrap());
                }
            }
        }
    }
    out
}

/// The folder of references a cross-check script prepared (`TERRASTACK_XCHECK_DIR`);
/// `made_by` is the command that makes it, for the message when it is missing.
pub fn xcheck_dir(made_by: &str) -> PathBuf {
    match std::env::var_os("TERRASTACK_XCHECK_DIR") {
        Some(d) => PathBuf::from(d),
        None => {
            panic!("this cross-check needs TERRASTACK_XCHECK_DIR: a folder made by `{made_by}`")
        }
    }
}

/// A raw little-endian float32 file of `rows` x `cols` values (as the cross-check
/// scripts write their references).
pub fn read_raw_f32(path: &Path, rows: usize, cols: usize) -> Array2<f32> {
    let bytes = std::fs::read(path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    assert_eq!(
        bytes.len(),
        rows * cols * 4,
        "{}: unexpected size",
        path.display()
    );
    let values: Vec<f32> = bytes
        .chunks_exact(4)
        .map(|b| f32::from_le_bytes([b[0], b[1], b[2], b[3]]))
        .collect();
    Array2::from_shape_vec((rows, cols), values).expect("shape")
}

/// Assert that two trees of files (from [`tree`]) hold the same paths with the same bytes,
/// as an interrupted and resumed run must give the uninterrupted run's files.
pub fn assert_same_files(after: &BTreeMap<String, Vec<u8>>, whole: &BTreeMap<String, Vec<u8>>) {
    assert_eq!(
        after.keys().collect::<Vec<_>>(),
        whole.keys().collect::<Vec<_>>(),
        "the resumed output root holds other files"
    );
    for (name, bytes) in whole {
        assert!(
            after[name] == *bytes,
            "{name} differs after kill and resume"
        );
    }
}

/// The record of band `name` in a parsed `stack.json`.
pub fn sidecar_band<'a>(meta: &'a serde_json::Value, name: &str) -> &'a serde_json::Value {
    meta["bands"]
        .as_array()
        .unwrap()
        .iter()
        .find(|b| b["name"] == name)
        .unwrap_or_else(|| panic!("no band {name} in {meta}"))
}

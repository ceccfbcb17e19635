//! Shared helpers for the integration tests: run the binary, make small georeferenced
//! rasters from closed-form surfaces.

#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use ndarray::Array2;
use terrastack::grid::{Crs, Grid};
use terrastack::raster::geotiff::{write_geotiff, WriteOptions};

/// Run `terrastack` with `args`; returns its output.
pub fn run(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_terrastack"))
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

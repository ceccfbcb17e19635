//! Whole-build throughput: `stack::build` with the default recipe (every default terrain
//! feature at radii of 1 m and 5 m, the five reflectances and every index) on a generated
//! 768 x 768 DSM of 0.1 m cells and a 5-band uint16 orthomosaic on a grid shifted by a
//! fraction of a cell, so the orthomosaic is resampled (bilinear). Reading, kernels,
//! compression, statistics, preview and sidecar are all inside the timed call.
//!
//! The inputs are generated surfaces (the same closed-form waves as
//! `scripts/bench_build.py`, without its noise term), written once into a temporary folder.
//! `scripts/bench_build.py` times the release binary against a hand-written
//! numpy/scipy + rasterio pipeline at larger sizes and prints the ratio.

use std::f64::consts::PI;
use std::hint::black_box;
use std::path::Path;
use std::time::Duration;

use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use ndarray::Array2;

use terrastack::grid::{Crs, Grid};
use terrastack::raster::geotiff::{write_geotiff, WriteOptions};
use terrastack::stack::{self, BuildOptions, Progress, Recipe, RecipeFlags};

/// DSM side in cells.
const N: usize = 768;
/// Cell size in metres.
const CELL: f64 = 0.1;
const ORIGIN: (f64, f64) = (500_000.0, 5_200_000.0);
/// Offset of the orthomosaic's grid, metres (a fraction of a cell, as in bench_build.py).
const ORTHO_SHIFT: (f64, f64) = (0.037, -0.061);

fn grid(shift: (f64, f64)) -> Grid {
    Grid::new(
        N,
        N,
        [
            ORIGIN.0 + shift.0,
            CELL,
            0.0,
            ORIGIN.1 + shift.1,
            0.0,
            -CELL,
        ],
        Crs::from_epsg(32632),
    )
    .expect("benchmark grid")
}

/// Local coordinates (metres east, north of the origin) of cell (row, col).
fn xy(row: usize, col: usize, shift: (f64, f64)) -> (f64, f64) {
    (
        shift.0 + (col as f64 + 0.5) * CELL,
        shift.1 - (row as f64 + 0.5) * CELL,
    )
}

/// Gentle plane plus separable waves of 173 m down to 0.9 m wavelength (metres).
fn elevation(x: f64, y: f64) -> f32 {
    let waves = [
        (3.0, 173.0, 0.3, 211.0, 1.1),
        (1.2, 41.0, 2.0, 57.0, 0.4),
        (0.45, 13.0, 0.9, 9.7, 2.5),
        (0.12, 3.1, 1.7, 4.3, 0.2),
        (0.03, 0.9, 0.5, 1.3, 1.9),
    ];
    let mut z = 120.0 + 0.02 * x + 0.015 * y;
    for (a, lx, px, ly, py) in waves {
        z += a * (2.0 * PI * x / lx + px).cos() * (2.0 * PI * y / ly + py).cos();
    }
    z as f32
}

/// Write the DSM and the orthomosaic (reflectance × 10000, uint16) into `dir`.
fn write_inputs(dir: &Path) {
    let dsm = Array2::from_shape_fn((N, N), |(r, c)| {
        let (x, y) = xy(r, c, (0.0, 0.0));
        elevation(x, y)
    });
    write_geotiff(
        &dir.join("dsm.tif"),
        &grid((0.0, 0.0)),
        &[dsm.view()],
        &["elevation"],
        &WriteOptions::default(),
    )
    .expect("write the benchmark DSM");
    let soil = [0.06, 0.09, 0.12, 0.16, 0.22];
    let leaf = [0.03, 0.08, 0.04, 0.22, 0.45];
    let cover = Array2::from_shape_fn((N, N), |(r, c)| {
        let (x, y) = xy(r, c, ORTHO_SHIFT);
        0.5 + 0.5 * (2.0 * PI * x / 37.0).sin() * (2.0 * PI * y / 29.0).cos()
    });
    let bands: Vec<Array2<u16>> = (0..5)
        .map(|b| cover.mapv(|v| ((soil[b] * (1.0 - v) + leaf[b] * v) * 1e4).round() as u16))
        .collect();
    let views: Vec<_> = bands.iter().map(|a| a.view()).collect();
    write_geotiff(
        &dir.join("ortho.tif"),
        &grid(ORTHO_SHIFT),
        &views,
        &["blue", "green", "red", "rededge", "nir"],
        &WriteOptions::default(),
    )
    .expect("write the benchmark orthomosaic");
}

fn bench(c: &mut Criterion) {
    let tmp = tempfile::tempdir().expect("temporary folder");
    write_inputs(tmp.path());
    let flags = RecipeFlags {
        dsm: Some(tmp.path().join("dsm.tif")),
        ortho: Some(tmp.path().join("ortho.tif")),
        bands: Some("blue=1,green=2,red=3,rededge=4,nir=5".into()),
        reflectance_scale: Some("1e-4".into()),
        ..Default::default()
    };
    let recipe = Recipe::resolve(None, &flags).expect("default recipe");
    let mut options = BuildOptions::new(tmp.path().join("stack"));
    options.force = true;
    options.progress = Progress::Quiet;

    let mut group = c.benchmark_group("build");
    group
        .sample_size(10)
        .warm_up_time(Duration::from_secs(1))
        .measurement_time(Duration::from_secs(20))
        .throughput(Throughput::Elements((N * N) as u64));
    group.bench_function("default_recipe_768", |b| {
        b.iter(|| {
            let report = stack::build(recipe.clone(), &options).expect("benchmark build");
            black_box(report.metadata.bands.len())
        })
    });
    group.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);

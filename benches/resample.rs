//! Resampling throughput: a 2000 x 2000 float32 source onto grids of 0.8x and 1.25x its
//! cell size (2500 x 2500 and 1600 x 1600 cells), for each method, over the whole target
//! in one window. `scripts/bench_resample.py` runs this and GDAL's warper (rasterio) on the
//! same grids and prints the ratios.

use std::hint::black_box;
use std::time::Duration;

use criterion::{criterion_group, criterion_main, BenchmarkId, Criterion, Throughput};
use ndarray::Array2;

use terrastack::align::{resample_window, MemoryRaster, Resampling};
use terrastack::grid::{Crs, Grid, Window};

/// Source size in cells per side; the comparison script uses the same numbers.
const N: usize = 2000;
const ORIGIN: (f64, f64) = (500_000.0, 4_000_000.0);

/// The smooth test surface both sides resample (metres): 300 + 100 sin(r/97) + 50 cos(c/61).
fn source() -> MemoryRaster {
    let grid = Grid::new(
        N,
        N,
        [ORIGIN.0, 1.0, 0.0, ORIGIN.1, 0.0, -1.0],
        Crs::from_epsg(32633),
    )
    .expect("grid");
    let data = Array2::from_shape_fn((N, N), |(r, c)| {
        (300.0 + 100.0 * (r as f64 / 97.0).sin() + 50.0 * (c as f64 / 61.0).cos()) as f32
    });
    MemoryRaster::new("bench-source", grid, vec![data]).expect("raster")
}

/// A target of `ratio` source cells per target cell, offset by a third of a source cell.
fn target(ratio: f64) -> Grid {
    let n = ((N as f64 - 1.0) / ratio).floor() as usize;
    Grid::new(
        n,
        n,
        [
            ORIGIN.0 + 1.0 / 3.0,
            ratio,
            0.0,
            ORIGIN.1 - 1.0 / 3.0,
            0.0,
            -ratio,
        ],
        Crs::from_epsg(32633),
    )
    .expect("grid")
}

fn bench(c: &mut Criterion) {
    let src = source();
    let mut group = c.benchmark_group("resample");
    group
        .sample_size(10)
        .warm_up_time(Duration::from_millis(500))
        .measurement_time(Duration::from_secs(3));
    for ratio in [0.8, 1.25] {
        let t = target(ratio);
        group.throughput(Throughput::Elements((t.width * t.height) as u64));
        for method in [
            Resampling::Nearest,
            Resampling::Bilinear,
            Resampling::Cubic,
            Resampling::Average,
        ] {
            let id = BenchmarkId::new(method.name(), format!("x{ratio}"));
            group.bench_with_input(id, &t, |b, t| {
                b.iter(|| {
                    black_box(
                        resample_window(&src, 1, t, Window::full(t), method).expect("resample"),
                    )
                })
            });
        }
    }
    group.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);

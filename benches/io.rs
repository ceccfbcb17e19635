//! GeoTIFF read and write throughput on a generated 4096 x 4096 float32 DSM (64 MiB),
//! tiled 512 x 512 without overviews, Deflate with the floating-point predictor (the
//! stack's default) and uncompressed. Criterion reports bytes of raster per second; `scripts/bench_io.py` runs
//! this benchmark, times rasterio (GDAL) on the same files in the same run and prints
//! the ratios.
//!
//! The files are left in `target/bench-io/` for that comparison. The side can be changed
//! with `TERRASTACK_BENCH_IO_SIZE` (cells per side).
//!
//! The allocator is set up as `terrastack build` sets it with its default `--memory 2G`
//! (`terrastack::allocator::keep_freed_memory`): the throughput of the command's I/O.

use std::hint::black_box;
use std::path::PathBuf;
use std::time::Duration;

use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use ndarray::Array2;

use terrastack::grid::{Crs, Grid, Window};
use terrastack::raster::geotiff::{
    write_geotiff, BigTiff, Compression, GeoTiffReader, Interleave, Layout, WriteOptions,
};
use terrastack::raster::RasterSource;

fn side() -> usize {
    std::env::var("TERRASTACK_BENCH_IO_SIZE")
        .ok()
        .and_then(|s| s.parse().ok())
        .unwrap_or(4096)
}

fn out_dir() -> PathBuf {
    let target = std::env::var_os("CARGO_TARGET_DIR")
        .map(PathBuf::from)
        .unwrap_or_else(|| PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("target"));
    target.join("bench-io")
}

/// A DSM-like surface: rolling terrain plus centimetre-scale texture, stored to the
/// millimetre as photogrammetry exports usually are (common practice).
fn dsm(n: usize) -> Array2<f32> {
    Array2::from_shape_fn((n, n), |(r, c)| {
        let (x, y) = (c as f64, r as f64);
        let hills = 20.0 * (x / 310.0).sin() * (y / 270.0).cos() + 0.002 * x;
        let mut h = (r as u64).wrapping_mul(0x9E37_79B9_7F4A_7C15)
            ^ (c as u64).wrapping_mul(0xC2B2_AE3D_27D4_EB4F);
        h ^= h >> 29;
        let texture = (h % 1000) as f64 / 1000.0 * 0.05;
        ((120.0 + hills + texture) * 1000.0).round() as f32 / 1000.0
    })
}

fn cases() -> [(&'static str, WriteOptions); 2] {
    // Plain tiled GeoTIFFs, as rasterio writes them in scripts/bench_io.py: no overviews
    // (the Cloud Optimized layout with overviews is timed whole in scripts/bench_build.py).
    let tiled = WriteOptions {
        layout: Layout::Tiled { size: 512 },
        interleave: Interleave::Band,
        bigtiff: BigTiff::Auto,
        overviews: false,
        ..WriteOptions::default()
    };
    [
        ("deflate_pred3", tiled.clone()),
        (
            "none",
            WriteOptions {
                compression: Compression::None,
                ..tiled
            },
        ),
    ]
}

fn io(c: &mut Criterion) {
    terrastack::allocator::keep_freed_memory(
        2 << 30,
        terrastack::allocator::threads_or_cores(None),
    );
    let n = side();
    let dir = out_dir();
    std::fs::create_dir_all(&dir).expect("create target/bench-io");
    let grid = Grid::new(
        n,
        n,
        [512_000.0, 0.05, 0.0, 5_300_000.0, 0.0, -0.05],
        Crs::from_epsg(32633),
    )
    .expect("grid")
    .with_nodata(Some(-9999.0));
    let a = dsm(n);
    let bytes = (n * n * 4) as u64;

    let mut g = c.benchmark_group("io_write");
    g.throughput(Throughput::Bytes(bytes));
    g.sample_size(10);
    g.warm_up_time(Duration::from_secs(1));
    for (name, opts) in cases() {
        let path = dir.join(format!("dsm_{name}.tif"));
        g.bench_function(name, |b| {
            b.iter(|| write_geotiff(&path, &grid, &[a.view()], &["dsm"], &opts).expect("write"))
        });
    }
    g.finish();

    let mut g = c.benchmark_group("io_read");
    g.throughput(Throughput::Bytes(bytes));
    g.sample_size(10);
    g.warm_up_time(Duration::from_secs(1));
    for (name, _) in cases() {
        let path = dir.join(format!("dsm_{name}.tif"));
        // Opened anew each time so that nothing comes from the reader's block cache.
        g.bench_function(name, |b| {
            b.iter(|| {
                let r = GeoTiffReader::open(&path).expect("open");
                black_box(r.read_window(1, Window::full(r.grid())).expect("read"))
            })
        });
    }
    g.finish();
}

criterion_group!(benches, io);
criterion_main!(benches);

//! Terrain kernel benchmarks on a deterministic synthetic DSM at 0.05 m cells.
//!
//! - `terrain_3x3/set`: slope, aspect, northness, eastness (Horn), the five curvatures
//!   (Evans–Young) and TRI on a 4000 x 4000 DSM.
//! - `terrain_square/r{0.5,5,25}m`: TPI, roughness and relative elevation on square
//!   windows (O(1) per cell) over a 4000 x 4000 output.
//! - `terrain_disc/r{0.5,5,25}m`: the same on disc windows (O(r/h) per cell) over a
//!   500 x 500 output, because the disc cost grows with the radius.
//!
//! - `terrain_extrema/{disc,square}_r50c`: window minimum and maximum alone
//!   ([`Extrema::compute`]) with a radius of 50 cells over a 2000 x 2000 output (half the
//!   size).
//!
//! `TERRASTACK_BENCH_SIZE` overrides 4000 (the disc size is an eighth of it).
//! `scripts/bench_terrain.py` runs this and times the numpy/scipy way side by side.

use std::time::Duration;

use criterion::{
    criterion_group, criterion_main, BenchmarkId, Criterion, SamplingMode, Throughput,
};
use ndarray::Array2;
use terrastack::grid::CellSizes;
use terrastack::terrain::running_extrema::Extrema;
use terrastack::terrain::window_sums::Layout;
use terrastack::terrain::{
    compute, Quantity, RowSizes, SlopeMethod, TerrainFeature, TerrainParams, WindowShape,
};

const H: f64 = 0.05;

/// The synthetic DSM, a function of the cell position only (metres): gentle hills, a
/// rippled surface and a deterministic high-frequency term standing in for vegetation.
/// `scripts/bench_terrain.py` uses the same formula.
fn dsm(size: usize, halo: usize) -> Array2<f32> {
    let n = size + 2 * halo;
    Array2::from_shape_fn((n, n), |(i, j)| {
        let x = (j as f64 - halo as f64) * H;
        let y = (i as f64 - halo as f64) * H;
        (120.0
            + 3.0 * (x / 37.0).sin() * (y / 23.0).cos()
            + 0.4 * (x / 3.1 + y / 4.3).sin()
            + 0.05 * (x * 12.9898 + y * 78.233).sin()) as f32
    })
}

fn size() -> usize {
    std::env::var("TERRASTACK_BENCH_SIZE")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(4000)
}

fn three_by_three() -> Vec<TerrainFeature> {
    let h = |m| (m, None);
    let (m, s) = h(SlopeMethod::Horn);
    let (e, es) = (SlopeMethod::EvansYoung, None);
    vec![
        TerrainFeature::derivative(Quantity::Slope, m, s),
        TerrainFeature::derivative(Quantity::Aspect, m, s),
        TerrainFeature::derivative(Quantity::Northness, m, s),
        TerrainFeature::derivative(Quantity::Eastness, m, s),
        TerrainFeature::derivative(Quantity::ProfileCurvature, e, es),
        TerrainFeature::derivative(Quantity::PlanCurvature, e, es),
        TerrainFeature::derivative(Quantity::TangentialCurvature, e, es),
        TerrainFeature::derivative(Quantity::MeanCurvature, e, es),
        TerrainFeature::derivative(Quantity::GaussianCurvature, e, es),
        TerrainFeature::new(Quantity::Tri),
    ]
}

fn windowed(r: f64) -> Vec<TerrainFeature> {
    vec![
        TerrainFeature::windowed(Quantity::Tpi, r),
        TerrainFeature::windowed(Quantity::Roughness, r),
        TerrainFeature::windowed(Quantity::RelativeElevation, r),
    ]
}

fn run(feats: &[TerrainFeature], z: &Array2<f32>, halo: usize, params: &TerrainParams) -> usize {
    let cells = CellSizes::uniform(H, H, z.nrows());
    let out = compute(feats, z.view(), &cells, halo, 120.0, params);
    out.iter().map(|a| a.len()).sum()
}

fn bench(c: &mut Criterion) {
    let n = size();
    let params = TerrainParams::default();

    let mut g = c.benchmark_group("terrain_3x3");
    g.sampling_mode(SamplingMode::Flat)
        .sample_size(10)
        .warm_up_time(Duration::from_millis(500))
        .measurement_time(Duration::from_secs(5))
        .throughput(Throughput::Elements((n * n) as u64));
    let z = dsm(n, 1);
    let feats = three_by_three();
    g.bench_function("set", |b| b.iter(|| run(&feats, &z, 1, &params)));
    g.finish();
    drop(z);

    for (shape, out_n, group) in [
        (WindowShape::Square, n, "terrain_square"),
        (WindowShape::Disc, n / 8, "terrain_disc"),
    ] {
        let mut g = c.benchmark_group(group);
        g.sampling_mode(SamplingMode::Flat)
            .sample_size(10)
            .warm_up_time(Duration::from_millis(500))
            .measurement_time(Duration::from_secs(5))
            .throughput(Throughput::Elements((out_n * out_n) as u64));
        let p = TerrainParams {
            shape,
            ..TerrainParams::default()
        };
        for r in [0.5, 5.0, 25.0] {
            let feats = windowed(r);
            let halo = feats.iter().map(|f| f.halo_px(H, H)).max().unwrap_or(0);
            let z = dsm(out_n, halo);
            g.bench_with_input(BenchmarkId::from_parameter(format!("r{r}m")), &z, |b, z| {
                b.iter(|| run(&feats, z, halo, &p))
            });
        }
        g.finish();
    }
}

fn bench_extrema(c: &mut Criterion) {
    let out_n = size() / 2;
    let radius_cells = 50;
    let mut g = c.benchmark_group("terrain_extrema");
    g.sampling_mode(SamplingMode::Flat)
        .sample_size(10)
        .warm_up_time(Duration::from_millis(500))
        .measurement_time(Duration::from_secs(5))
        .throughput(Throughput::Elements((out_n * out_n) as u64));
    let zs = dsm(out_n, radius_cells).mapv(f64::from);
    let cells = CellSizes::uniform(H, H, zs.nrows());
    let r = radius_cells as f64 * H;
    for (shape, name) in [
        (WindowShape::Disc, "disc_r50c"),
        (WindowShape::Square, "square_r50c"),
    ] {
        let layout = Layout::new(shape, r, RowSizes::new(&cells), radius_cells, out_n);
        g.bench_function(name, |b| {
            b.iter(|| {
                Extrema::compute(&zs, &layout, radius_cells, out_n)
                    .min
                    .len()
            })
        });
    }
    g.finish();
}

criterion_group!(benches, bench, bench_extrema);
criterion_main!(benches);

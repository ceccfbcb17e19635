//! Shared fixtures for the terrain tests: a small deterministic PRNG, surface sampling and
//! every feature of the table.

use ndarray::Array2;

pub use crate::random::SplitMix64;

/// Samples `f(x, y)` (x east, y north, metres) on a grid with `h` spacing, centred on
/// the origin, as f32.
pub fn sample(
    rows: usize,
    cols: usize,
    hx: f64,
    hy: f64,
    f: impl Fn(f64, f64) -> f64,
) -> Array2<f32> {
    let r0 = (rows as f64 - 1.0) / 2.0;
    let c0 = (cols as f64 - 1.0) / 2.0;
    Array2::from_shape_fn((rows, cols), |(i, j)| {
        f((j as f64 - c0) * hx, -(i as f64 - r0) * hy) as f32
    })
}

/// A rough random surface with some nodata holes.
pub fn random_dem(rng: &mut SplitMix64, rows: usize, cols: usize, hole_p: f64) -> Array2<f32> {
    Array2::from_shape_fn((rows, cols), |(i, j)| {
        if rng.next_f64() < hole_p {
            f32::NAN
        } else {
            (100.0 + 3.0 * (i as f64 * 0.3).sin() + 2.0 * (j as f64 * 0.2).cos() + rng.next_f64())
                as f32
        }
    })
}

/// Every feature word at radius `r`, plus the other estimators of slope, aspect and
/// curvature.
pub fn all_features(r: f64) -> Vec<super::TerrainFeature> {
    use super::words::{expand, FEATURE_WORDS};
    let words: Vec<String> = FEATURE_WORDS.iter().map(|(w, _)| w.to_string()).collect();
    let mut f = expand(&words, &[r]).unwrap();
    f.extend(
        expand(
            &[
                "slope:zt".into(),
                "aspect:ey".into(),
                "curvature:quadratic".into(),
            ],
            &[r],
        )
        .unwrap(),
    );
    f
}

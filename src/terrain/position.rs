//! Topographic position: TPI, DEV, relative elevation and local relief at radius r metres.
//!
//! - TPI = z − mean of the window (Weiss 2001, poster, ESRI User Conference; Guisan et al.
//!   1999, Plant Ecology 143; from memory), metres, positive on crests.
//! - DEV = (z − mean) / std over the window (Gallant & Wilson 2000, in Terrain Analysis,
//!   Wiley; De Reu et al. 2013, Geomorphology 186; from memory), unitless. Where the window
//!   is flat (std = 0, so z = mean) DEV is 0.
//! - relative elevation = z − window minimum; local relief = window maximum − minimum,
//!   metres.
//!
//! The window includes the centre cell and only valid cells; with fewer than
//! `min_valid_fraction` × window cells valid, or an invalid centre, the result is NaN.
//! Means and standard deviations come from exact integer sums (see [`super::window_sums`]):
//! TPI = (n·zq − Σzq) / (n·2²⁰) and DEV = (n·zq − Σzq) / √(n·Σzq² − (Σzq)²), each a single
//! rounding of exact integers, so values do not depend on the block layout.

use super::running_extrema::Extrema;
use super::window_sums::{CellSums, Z_QUANTUM_M};

/// True when `n` valid cells out of `cells` meet the valid fraction (and n ≥ 1).
pub fn enough(n: i64, cells: u64, min_valid_fraction: f64) -> bool {
    n >= 1 && n as f64 >= min_valid_fraction * cells as f64
}

/// n·Σzq² − (Σzq)² (= n²·variance in quantum² units), exactly when it fits in i128,
/// else from f64 (inputs are exact, so still deterministic).
pub fn variance_numerator(n: i64, s1: i128, s2: i128) -> f64 {
    let n = i128::from(n);
    match (n.checked_mul(s2), s1.checked_mul(s1)) {
        (Some(a), Some(b)) => (a - b).max(0) as f64,
        _ => (n as f64 * s2 as f64 - (s1 as f64).powi(2)).max(0.0),
    }
}

/// TPI in metres from the centre's quantised elevation `zc` and the window sums.
pub fn tpi(zc: Option<i64>, cells: u64, s: &CellSums, min_valid_fraction: f64) -> f64 {
    match zc {
        Some(zc) if enough(s.n, cells, min_valid_fraction) => {
            let num = i128::from(zc) * i128::from(s.n) - s.s[0];
            num as f64 / s.n as f64 * Z_QUANTUM_M
        }
        _ => f64::NAN,
    }
}

/// DEV (unitless) from the centre's quantised elevation and the window sums; 0 on a flat
/// window.
pub fn dev(zc: Option<i64>, cells: u64, s: &CellSums, min_valid_fraction: f64) -> f64 {
    match zc {
        Some(zc) if enough(s.n, cells, min_valid_fraction) => {
            let num = i128::from(zc) * i128::from(s.n) - s.s[0];
            let var = variance_numerator(s.n, s.s[0], s.s2);
            if var == 0.0 {
                0.0
            } else {
                num as f64 / var.sqrt()
            }
        }
        _ => f64::NAN,
    }
}

/// Relative elevation z − min (metres) at output cell (i, j); `zc` the centre elevation.
pub fn relative_elevation(
    zc: f64,
    ex: &Extrema,
    i: usize,
    j: usize,
    cells: u64,
    n: i64,
    frac: f64,
) -> f64 {
    if zc.is_finite() && enough(n, cells, frac) {
        zc - ex.min[[i, j]]
    } else {
        f64::NAN
    }
}

/// Local relief max − min (metres) at output cell (i, j).
pub fn local_relief(ex: &Extrema, i: usize, j: usize, cells: u64, n: i64, frac: f64) -> f64 {
    if enough(n, cells, frac) {
        ex.max[[i, j]] - ex.min[[i, j]]
    } else {
        f64::NAN
    }
}

#[cfg(test)]
mod tests {
    use crate::grid::CellSizes;
    use crate::terrain::test_support::{random_dem, sample, SplitMix64};
    use crate::terrain::{compute, radius_cells, TerrainFeature, TerrainParams, WindowShape};
    use approx::assert_relative_eq;
    use ndarray::Array2;

    /// Naive reference: the disc's cells by distance, statistics in f64 two-pass form.
    fn naive_disc(z: &Array2<f32>, r: f64, h: f64, i: usize, j: usize) -> Vec<f64> {
        let k = radius_cells(r, h) as i64;
        let mut v = Vec::new();
        for dy in -k..=k {
            for dx in -k..=k {
                if ((dx * dx + dy * dy) as f64).sqrt() * h > r * (1.0 + 1e-9) {
                    continue;
                }
                let (a, b) = (i as i64 + dy, j as i64 + dx);
                if a < 0 || b < 0 || a >= z.nrows() as i64 || b >= z.ncols() as i64 {
                    v.push(f64::NAN);
                } else {
                    v.push(z[[a as usize, b as usize]] as f64);
                }
            }
        }
        v
    }

    #[test]
    fn tpi_dev_relief_match_naive_reference() {
        // Fast paths against a naive two-pass reference over random DEMs with holes.
        let mut rng = SplitMix64::new(11);
        for case in 0..12 {
            let dem = random_dem(&mut rng, 16, 18, 0.1);
            let h = 0.5 + rng.next_f64();
            let r = 0.6 + 3.0 * rng.next_f64();
            let feats = [
                TerrainFeature::Tpi { radius_m: r },
                TerrainFeature::Dev { radius_m: r },
                TerrainFeature::RelativeElevation { radius_m: r },
                TerrainFeature::LocalRelief { radius_m: r },
            ];
            let p = TerrainParams {
                min_valid_fraction: 0.6,
                ..TerrainParams::default()
            };
            let out = compute(
                &feats,
                dem.view(),
                &CellSizes::uniform(h, h, 16),
                0,
                100.0,
                &p,
            );
            for i in 0..16 {
                for j in 0..18 {
                    let v = naive_disc(&dem, r, h, i, j);
                    let valid: Vec<f64> = v.iter().copied().filter(|x| x.is_finite()).collect();
                    let zc = dem[[i, j]] as f64;
                    let ok = valid.len() as f64 >= 0.6 * v.len() as f64;
                    let mean = valid.iter().sum::<f64>() / valid.len() as f64;
                    let sd = (valid.iter().map(|x| (x - mean).powi(2)).sum::<f64>()
                        / valid.len() as f64)
                        .sqrt();
                    let mn = valid.iter().copied().fold(f64::INFINITY, f64::min);
                    let mx = valid.iter().copied().fold(f64::NEG_INFINITY, f64::max);
                    let want = [
                        if ok && zc.is_finite() {
                            zc - mean
                        } else {
                            f64::NAN
                        },
                        // Documented rule: DEV is 0 on a flat window.
                        if ok && zc.is_finite() {
                            if sd == 0.0 {
                                0.0
                            } else {
                                (zc - mean) / sd
                            }
                        } else {
                            f64::NAN
                        },
                        if ok && zc.is_finite() {
                            zc - mn
                        } else {
                            f64::NAN
                        },
                        if ok { mx - mn } else { f64::NAN },
                    ];
                    for (k, w) in want.iter().enumerate() {
                        let got = out[k][[i, j]] as f64;
                        if w.is_nan() {
                            assert!(got.is_nan(), "case {case} feature {k} at ({i},{j}): {got}");
                        } else {
                            // Quantisation 2⁻²¹ m plus f32 output rounding.
                            assert_relative_eq!(got, *w, epsilon = 2e-5, max_relative = 1e-5);
                        }
                    }
                }
            }
        }
    }

    #[test]
    fn plane_tpi_is_zero_and_bowl_tpi_closed_form() {
        // TPI of a plane is 0 on a symmetric window (closed form). For the bowl
        // z = (x² + y²)/(2R), TPI = −mean(d²)/(2R) over the window's cell offsets d: with
        // the discrete 3x3 square at h = 1 m, mean(d²) = 12/9 m² (closed form over the
        // nine offsets), so TPI = −(12/9)/200 m.
        let plane = sample(21, 21, 0.5, 0.5, |x, y| 0.3 * x - 0.7 * y + 12.0);
        let out = compute(
            &[TerrainFeature::Tpi { radius_m: 2.0 }],
            plane.view(),
            &CellSizes::uniform(0.5, 0.5, 21),
            4,
            10.0,
            &TerrainParams::default(),
        );
        for v in out[0].iter() {
            assert!(v.abs() < 1e-6, "{v}");
        }
        let bowl = sample(11, 11, 1.0, 1.0, |x, y| (x * x + y * y) / 200.0);
        let p = TerrainParams {
            shape: WindowShape::Square,
            ..TerrainParams::default()
        };
        let out = compute(
            &[TerrainFeature::Tpi { radius_m: 1.0 }],
            bowl.view(),
            &CellSizes::uniform(1.0, 1.0, 11),
            1,
            0.0,
            &p,
        );
        assert_relative_eq!(out[0][[4, 4]] as f64, -(12.0 / 9.0) / 200.0, epsilon = 1e-6);
    }
}

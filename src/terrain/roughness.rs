//! Roughness: standard deviation of elevation, detrended standard deviation, and TRI.
//!
//! - roughness = population standard deviation of the valid elevations in the window,
//!   metres: √(n·Σz² − (Σz)²)/n from exact integer sums (see [`super::window_sums`]).
//! - roughness_detrended = population standard deviation of the residuals from the
//!   least-squares plane z = a + b·dx + c·dy fitted to the window's valid cells, metres
//!   (common practice for separating roughness from slope). The residual variance does not
//!   depend on the scale of the plane's coordinates, so the fit uses cell offsets. With
//!   A = n·Σdx² − (Σdx)², B = n·Σdxdy − ΣdxΣdy, C = n·Σdy² − (Σdy)², U = n·Σdx·z − ΣdxΣz,
//!   V = n·Σdy·z − ΣdyΣz, W = n·Σz² − (Σz)² (all exact integers):
//!   n²·variance = W − (C·U² − 2B·U·V + A·V²)/(A·C − B²). NaN when the valid cells are
//!   collinear (A·C = B²).
//! - TRI (Riley, DeGloria & Elliot 1999, Intermountain Journal of Sciences 5, 23–27)
//!   = √(Σ over the 8 neighbours of (zᵢ − z5)²), metres, on the 3x3 window; all nine cells
//!   must be valid.
//!
//! Windowed results are NaN with fewer than `min_valid_fraction` × window cells valid.
//!
//! Windows cut off by the raster's edge or by nodata: roughness is the standard deviation
//! of the cells present, so on a slope a cut window reads lower than a full one (on a
//! plane it measures the gradient times the spread of the valid cells' offsets); this is
//! documented in the catalogue and in `stack.json`, not corrected. Detrended roughness
//! fits its plane to the valid cells, so it is 0 on every plane, cut or not.

use super::position::{enough, exact_or_f64, variance_numerator};
use super::window_sums::{CellSums, Z_QUANTUM_M};

/// Standard deviation of elevation in the window, metres.
pub fn std_dev(cells: u64, s: &CellSums, min_valid_fraction: f64) -> f64 {
    if !enough(s.n, cells, min_valid_fraction) {
        return f64::NAN;
    }
    variance_numerator(s.n, s.s[0], s.s2).sqrt() / s.n as f64 * Z_QUANTUM_M
}

/// Standard deviation of residuals from the window's least-squares plane, metres.
pub fn detrended_std(cells: u64, s: &CellSums, min_valid_fraction: f64) -> f64 {
    if !enough(s.n, cells, min_valid_fraction) {
        return f64::NAN;
    }
    let Some(p) = s.plane.as_ref() else {
        return f64::NAN;
    };
    let n = i128::from(s.n);
    let sz = s.s[0];
    let a = exact_or_f64(n, p.sxx, p.sx, p.sx);
    let b = exact_or_f64(n, p.sxy, p.sx, p.sy);
    let c = exact_or_f64(n, p.syy, p.sy, p.sy);
    let u = exact_or_f64(n, p.sxz, p.sx, sz);
    let v = exact_or_f64(n, p.syz, p.sy, sz);
    let w = variance_numerator(s.n, sz, s.s2);
    let det = a * c - b * b;
    if det <= 0.0 {
        return f64::NAN;
    }
    let fitted = (c * u * u - 2.0 * b * u * v + a * v * v) / det;
    let var_n2 = (w - fitted).max(0.0);
    var_n2.sqrt() / s.n as f64 * Z_QUANTUM_M
}

/// TRI (metres) of one 3x3 window `w` (row-major from the north-west, all finite).
///
/// Riley et al.'s formula on the window 1..9 (centre 5): Σ(zᵢ − 5)² = 16 + 9 + 4 + 1 + 1 +
/// 4 + 9 + 16 = 60, so TRI = √60 (hand computation); a plane tilted along x by 1 m per
/// cell gives √6:
///
/// ```
/// use terrastack::terrain::roughness::tri_3x3;
///
/// let w: [f64; 9] = std::array::from_fn(|k| (k + 1) as f64);
/// assert!((tri_3x3(&w) - 60f64.sqrt()).abs() < 1e-12);
/// let tilted: [f64; 9] = std::array::from_fn(|k| (k % 3) as f64);
/// assert!((tri_3x3(&tilted) - 6f64.sqrt()).abs() < 1e-12);
/// ```
pub fn tri_3x3(w: &[f64; 9]) -> f64 {
    let z5 = w[4];
    w.iter().map(|v| (v - z5) * (v - z5)).sum::<f64>().sqrt()
}

#[cfg(test)]
mod tests {
    use crate::grid::CellSizes;
    use crate::terrain::test_support::{random_dem, sample, SplitMix64};
    use crate::terrain::{
        compute, radius_cells, Quantity, TerrainFeature, TerrainParams, WindowShape,
    };
    use approx::assert_relative_eq;
    use ndarray::Array2;

    #[test]
    fn tri_worked_value() {
        // Hand computation from Riley et al.'s formula: centre 5 among 1..9 gives
        // Σ(zᵢ − 5)² = 16 + 9 + 4 + 1 + 1 + 4 + 9 + 16 = 60, TRI = √60.
        let z = Array2::from_shape_fn((3, 3), |(i, j)| (i * 3 + j + 1) as f32);
        let out = compute(
            &[TerrainFeature::new(Quantity::Tri)],
            z.view(),
            &CellSizes::uniform(1.0, 1.0, 3),
            1,
            0.0,
            &TerrainParams::default(),
        );
        assert_relative_eq!(out[0][[0, 0]] as f64, 60f64.sqrt(), epsilon = 1e-6);
    }

    #[test]
    fn plane_detrended_roughness_is_zero_plain_is_not() {
        // A plane has zero residuals from its own fitted plane (closed form), at any shape;
        // its plain standard deviation over a square of offsets ±1 cell at slope 1 m/m and
        // h = 1 m is √(6/9) m (closed form: dx ∈ {−1, 0, 1} each thrice, variance 6/9).
        for shape in [WindowShape::Disc, WindowShape::Square] {
            let z = sample(15, 15, 1.0, 1.0, |x, y| x + 0.0 * y + 30.0);
            let p = TerrainParams {
                shape,
                ..TerrainParams::default()
            };
            let feats = [
                TerrainFeature::windowed(Quantity::RoughnessDetrended, 3.0),
                TerrainFeature::windowed(Quantity::Roughness, 1.0),
            ];
            let out = compute(
                &feats,
                z.view(),
                &CellSizes::uniform(1.0, 1.0, 15),
                3,
                25.0,
                &p,
            );
            for v in out[0].iter() {
                assert!(v.abs() < 1e-6, "{v}");
            }
            if shape == WindowShape::Square {
                assert_relative_eq!(out[1][[4, 4]] as f64, (6.0f64 / 9.0).sqrt(), epsilon = 1e-6);
            }
        }
    }

    #[test]
    fn detrended_matches_least_squares_reference() {
        // Against a naive least-squares plane fit (normal equations solved directly in
        // f64 by Cramer's rule) over random DEMs with holes.
        let mut rng = SplitMix64::new(9);
        for _ in 0..6 {
            let dem = random_dem(&mut rng, 14, 14, 0.15);
            let r = 1.5 + 2.0 * rng.next_f64();
            // The reference walks a disc (not the default shape).
            let p = TerrainParams {
                min_valid_fraction: 0.5,
                shape: WindowShape::Disc,
                ..TerrainParams::default()
            };
            let out = compute(
                &[TerrainFeature::windowed(Quantity::RoughnessDetrended, r)],
                dem.view(),
                &CellSizes::uniform(1.0, 1.0, 14),
                0,
                100.0,
                &p,
            );
            let k = radius_cells(r, 1.0) as i64;
            for i in 0..14i64 {
                for j in 0..14i64 {
                    let mut pts = Vec::new();
                    let mut total = 0;
                    for dy in -k..=k {
                        for dx in -k..=k {
                            if ((dx * dx + dy * dy) as f64).sqrt() > r {
                                continue;
                            }
                            total += 1;
                            let (a, b) = (i + dy, j + dx);
                            if a >= 0 && b >= 0 && a < 14 && b < 14 {
                                let v = dem[[a as usize, b as usize]] as f64;
                                if v.is_finite() {
                                    pts.push((dx as f64, dy as f64, v));
                                }
                            }
                        }
                    }
                    let got = out[0][[i as usize, j as usize]] as f64;
                    if (pts.len() as f64) < 0.5 * total as f64 {
                        assert!(got.is_nan());
                        continue;
                    }
                    let n = pts.len() as f64;
                    let m = |f: &dyn Fn(&(f64, f64, f64)) -> f64| pts.iter().map(f).sum::<f64>();
                    let (sx, sy, sz) = (m(&|p| p.0), m(&|p| p.1), m(&|p| p.2));
                    let (sxx, syy, sxy) = (m(&|p| p.0 * p.0), m(&|p| p.1 * p.1), m(&|p| p.0 * p.1));
                    let (sxz, syz) = (m(&|p| p.0 * p.2), m(&|p| p.1 * p.2));
                    let mat = [[n, sx, sy], [sx, sxx, sxy], [sy, sxy, syy]];
                    let rhs = [sz, sxz, syz];
                    let det3 = |a: [[f64; 3]; 3]| {
                        a[0][0] * (a[1][1] * a[2][2] - a[1][2] * a[2][1])
                            - a[0][1] * (a[1][0] * a[2][2] - a[1][2] * a[2][0])
                            + a[0][2] * (a[1][0] * a[2][1] - a[1][1] * a[2][0])
                    };
                    let d = det3(mat);
                    let coef: Vec<f64> = (0..3)
                        .map(|c| {
                            let mut a = mat;
                            for r in 0..3 {
                                a[r][c] = rhs[r];
                            }
                            det3(a) / d
                        })
                        .collect();
                    let var = pts
                        .iter()
                        .map(|p| (p.2 - coef[0] - coef[1] * p.0 - coef[2] * p.1).powi(2))
                        .sum::<f64>()
                        / n;
                    assert_relative_eq!(got, var.sqrt(), epsilon = 1e-4, max_relative = 1e-4);
                }
            }
        }
    }
}

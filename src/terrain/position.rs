//! Topographic position: TPI, DEV, relative elevation and local relief at radius r metres.
//!
//! - TPI = z − the window's local level, metres, positive on crests (Weiss 2001, poster,
//!   ESRI User Conference; Guisan et al. 1999, Plant Ecology 143, 107–122). The local
//!   level is the value at the centre of the least-squares plane z = a + b·dx + c·dy fitted
//!   to the window's valid cells (dx, dy cell offsets from the centre). On a window whose
//!   valid cells are symmetric about the centre (Σdx = Σdy = 0, e.g. every full window of
//!   a projected grid) that value is exactly the mean, so TPI = z − mean, the published
//!   form, bit for bit. On a window that the raster's edge or a nodata hole cuts off, the
//!   mean alone is biased by the local gradient times the offset of the valid cells'
//!   centroid (about −0.13 m next to an edge on an ordinary slope); the plane's value is
//!   not, so TPI is 0 on every plane, cut or not.
//! - DEV = (z − local level) / std over the window's valid cells (Wilson & Gallant 2000,
//!   Terrain Analysis, Wiley; De Reu et al. 2013, Geomorphology 186, 39–49),
//!   unitless, the numerator as TPI's. Where the window is flat (std = 0) DEV is 0.
//! - relative elevation = z − window minimum; local relief = window maximum − minimum,
//!   metres, over the valid cells only: a cut window on a slope reads lower than a full
//!   one (documented in the catalogue and in `stack.json`, not corrected).
//!
//! The window includes the centre cell and only valid cells; with fewer than
//! `min_valid_fraction` × window cells valid, or an invalid centre, the result is NaN; so
//! it is for TPI and DEV when the valid cells of a cut window are collinear (no plane).
//! Means and standard deviations come from exact integer sums (see [`super::window_sums`]);
//! with the plane moments A = n·Σdx² − (Σdx)², B = n·Σdxdy − ΣdxΣdy, C = n·Σdy² − (Σdy)²,
//! U = n·Σdx·zq − ΣdxΣzq, V = n·Σdy·zq − ΣdyΣzq (exact integers), the plane's slopes are
//! b = (C·U − B·V)/D, c = (A·V − B·U)/D with D = A·C − B², and
//! n·(z − level) = (n·zq − Σzq) + b·Σdx + c·Σdy, in units of 2⁻²⁰ m. Every value is a fixed
//! f64 formula of exact integers, so it does not depend on the block layout.

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

/// a·b − c·d exactly when it fits in i128, else in f64 (inputs exact, so deterministic).
pub fn exact_or_f64(a: i128, b: i128, c: i128, d: i128) -> f64 {
    match (a.checked_mul(b), c.checked_mul(d)) {
        (Some(x), Some(y)) => match x.checked_sub(y) {
            Some(v) => v as f64,
            None => x as f64 - y as f64,
        },
        _ => a as f64 * b as f64 - c as f64 * d as f64,
    }
}

/// n·(zc − local level) in quanta (2⁻²⁰ m): the window mean when the sums carry no plane
/// moments or the valid cells' centroid is the centre, else the centre value of the
/// least-squares plane through the valid cells (see the module doc). `None` when the
/// centroid is off the centre and the valid cells are collinear.
pub fn centre_offset_numerator(zc: i64, s: &CellSums) -> Option<f64> {
    let n = i128::from(s.n);
    let num = i128::from(zc) * n - s.s[0];
    let p = match s.plane.as_ref() {
        Some(p) if p.sx != 0 || p.sy != 0 => p,
        _ => return Some(num as f64),
    };
    let sz = s.s[0];
    let a = exact_or_f64(n, p.sxx, p.sx, p.sx);
    let b = exact_or_f64(n, p.sxy, p.sx, p.sy);
    let c = exact_or_f64(n, p.syy, p.sy, p.sy);
    let u = exact_or_f64(n, p.sxz, p.sx, sz);
    let v = exact_or_f64(n, p.syz, p.sy, sz);
    let det = a * c - b * b;
    if det.is_nan() || det <= 0.0 {
        return None;
    }
    let (sx, sy) = (p.sx as f64, p.sy as f64);
    let tilt = (sx * (c * u - b * v) + sy * (a * v - b * u)) / det;
    Some(num as f64 + tilt)
}

/// TPI in metres from the centre's quantised elevation `zc` and the window sums (with
/// plane moments, the edge- and hole-safe form of the module doc).
pub fn tpi(zc: Option<i64>, cells: u64, s: &CellSums, min_valid_fraction: f64) -> f64 {
    match zc {
        Some(zc) if enough(s.n, cells, min_valid_fraction) => {
            match centre_offset_numerator(zc, s) {
                Some(num) => num / s.n as f64 * Z_QUANTUM_M,
                None => f64::NAN,
            }
        }
        _ => f64::NAN,
    }
}

/// DEV (unitless) from the centre's quantised elevation and the window sums; 0 on a flat
/// window.
pub fn dev(zc: Option<i64>, cells: u64, s: &CellSums, min_valid_fraction: f64) -> f64 {
    match zc {
        Some(zc) if enough(s.n, cells, min_valid_fraction) => {
            let Some(num) = centre_offset_numerator(zc, s) else {
                return f64::NAN;
            };
            let var = variance_numerator(s.n, s.s[0], s.s2);
            if var == 0.0 {
                0.0
            } else {
                num / var.sqrt()
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
    use crate::terrain::{
        compute, radius_cells, Quantity, TerrainFeature, TerrainParams, WindowShape,
    };
    use approx::assert_relative_eq;
    use ndarray::Array2;

    /// Naive reference: the disc's cells by distance as (dx, dy, z), NaN beyond the array.
    fn naive_disc(z: &Array2<f32>, r: f64, h: f64, i: usize, j: usize) -> Vec<(f64, f64, f64)> {
        let k = radius_cells(r, h) as i64;
        let mut v = Vec::new();
        for dy in -k..=k {
            for dx in -k..=k {
                if ((dx * dx + dy * dy) as f64).sqrt() * h > r * (1.0 + 1e-9) {
                    continue;
                }
                let (a, b) = (i as i64 + dy, j as i64 + dx);
                let val = if a < 0 || b < 0 || a >= z.nrows() as i64 || b >= z.ncols() as i64 {
                    f64::NAN
                } else {
                    z[[a as usize, b as usize]] as f64
                };
                v.push((dx as f64, dy as f64, val));
            }
        }
        v
    }

    /// Naive reference for the local level: the least-squares plane z = a + b·dx + c·dy
    /// through `pts`, its normal equations solved by Cramer's rule in f64; returns a.
    fn plane_level(pts: &[(f64, f64, f64)]) -> f64 {
        let n = pts.len() as f64;
        let m = |f: &dyn Fn(&(f64, f64, f64)) -> f64| pts.iter().map(f).sum::<f64>();
        let (sx, sy, sz) = (m(&|p| p.0), m(&|p| p.1), m(&|p| p.2));
        let (sxx, syy, sxy) = (m(&|p| p.0 * p.0), m(&|p| p.1 * p.1), m(&|p| p.0 * p.1));
        let (sxz, syz) = (m(&|p| p.0 * p.2), m(&|p| p.1 * p.2));
        let det3 = |a: [[f64; 3]; 3]| {
            a[0][0] * (a[1][1] * a[2][2] - a[1][2] * a[2][1])
                - a[0][1] * (a[1][0] * a[2][2] - a[1][2] * a[2][0])
                + a[0][2] * (a[1][0] * a[2][1] - a[1][1] * a[2][0])
        };
        if sx == 0.0 && sy == 0.0 {
            // Centroid on the centre: the plane's value there is the mean (module doc).
            return sz / n;
        }
        let mat = [[n, sx, sy], [sx, sxx, sxy], [sy, sxy, syy]];
        let mut a = mat;
        for (r, v) in [sz, sxz, syz].iter().enumerate() {
            a[r][0] = *v;
        }
        det3(a) / det3(mat)
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
                TerrainFeature::windowed(Quantity::Tpi, r),
                TerrainFeature::windowed(Quantity::Dev, r),
                TerrainFeature::windowed(Quantity::RelativeElevation, r),
                TerrainFeature::windowed(Quantity::LocalRelief, r),
            ];
            // The reference walks a disc (not the default shape).
            let p = TerrainParams {
                min_valid_fraction: 0.6,
                shape: WindowShape::Disc,
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
                    let pts: Vec<(f64, f64, f64)> =
                        v.iter().copied().filter(|p| p.2.is_finite()).collect();
                    let valid: Vec<f64> = pts.iter().map(|p| p.2).collect();
                    let zc = dem[[i, j]] as f64;
                    let ok = valid.len() as f64 >= 0.6 * v.len() as f64;
                    let mean = valid.iter().sum::<f64>() / valid.len() as f64;
                    // The local level: the plane through the valid cells (module doc).
                    let level = plane_level(&pts);
                    let sd = (valid.iter().map(|x| (x - mean).powi(2)).sum::<f64>()
                        / valid.len() as f64)
                        .sqrt();
                    let mn = valid.iter().copied().fold(f64::INFINITY, f64::min);
                    let mx = valid.iter().copied().fold(f64::NEG_INFINITY, f64::max);
                    let want = [
                        if ok && zc.is_finite() {
                            zc - level
                        } else {
                            f64::NAN
                        },
                        // Documented rule: DEV is 0 on a flat window.
                        if ok && zc.is_finite() {
                            if sd == 0.0 {
                                0.0
                            } else {
                                (zc - level) / sd
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
            &[TerrainFeature::windowed(Quantity::Tpi, 2.0)],
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
            &[TerrainFeature::windowed(Quantity::Tpi, 1.0)],
            bowl.view(),
            &CellSizes::uniform(1.0, 1.0, 11),
            1,
            0.0,
            &p,
        );
        assert_relative_eq!(out[0][[4, 4]] as f64, -(12.0 / 9.0) / 200.0, epsilon = 1e-6);
    }
    #[test]
    fn plane_with_holes_has_no_position() {
        // A plane has no topographic position anywhere (closed form: TPI = DEV = 0), also
        // where the raster's edge or a nodata hole cuts the window off (before the plane
        // rule, TPI there was the gradient times the valid cells' centroid offset). The
        // plane z = 20 + 0.375x − 0.3125y at h = 0.25 m has every sample a multiple of
        // 2⁻⁷ m, exact in f32 and in the 2⁻²⁰ m quantum, so only the method is tested.
        let (nr, nc, h) = (40, 44, 0.25);
        let mut z = sample(nr, nc, h, h, |x, y| 20.0 + 0.375 * x - 0.3125 * y);
        let mut rng = SplitMix64::new(2026);
        for v in z.iter_mut() {
            if rng.next_f64() < 0.06 {
                *v = f32::NAN;
            }
        }
        z.slice_mut(ndarray::s![18..21, 20..24]).fill(f32::NAN);
        let cells = CellSizes::uniform(h, h, nr);
        for shape in [WindowShape::Disc, WindowShape::Square] {
            for r in [0.4, 0.75, 1.3, 2.0] {
                let p = TerrainParams {
                    shape,
                    min_valid_fraction: 0.4,
                    ..TerrainParams::default()
                };
                let feats = [
                    TerrainFeature::windowed(Quantity::Tpi, r),
                    TerrainFeature::windowed(Quantity::Dev, r),
                ];
                // Halo 0: windows reach past the array, i.e. past the raster's edge.
                let out = compute(&feats, z.view(), &cells, 0, 20.0, &p);
                for (f, o) in feats.iter().zip(&out) {
                    let mut edge_cells = 0;
                    for ((i, j), v) in o.indexed_iter() {
                        if v.is_nan() {
                            continue;
                        }
                        assert!(
                            v.abs() < 1e-6,
                            "{} {shape:?} at ({i}, {j}): {v}",
                            f.band_name()
                        );
                        if i == 0 || j == 0 || i == nr - 1 || j == nc - 1 {
                            edge_cells += 1;
                        }
                    }
                    // Cut windows were really evaluated: values on the raster's edge.
                    assert!(edge_cells > 20, "{} {shape:?}: {edge_cells}", f.band_name());
                }
            }
        }
    }
}

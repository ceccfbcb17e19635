//! Relief position: where a cell's elevation lies between its window's lowest and highest
//! valid cells, in percent — 0 at the window's minimum, 100 at its maximum.
//!
//! relief_position = 100 · (z − min) / (max − min) over the window's valid cells: the
//! percent elevation range (PER) of Newman, Lindsay & Cockburn 2018 (docs/methods.md,
//! "Window statistics"). Units percent. NaN where the centre is nodata, where fewer than
//! the minimum valid fraction of the window's cells are valid, or where the window is flat
//! (max = min, no position to give). A window cut by the raster's edge or a hole uses its
//! valid cells only, like relative elevation and local relief. Cost: the exact running
//! extrema of [`super::running_extrema`], O(1) per cell for square windows, O(r/h) for
//! discs, shared with relative elevation and local relief at the same radius.

use super::position::enough;
use super::running_extrema::Extrema;

/// Relief position (percent) at output cell (i, j): `zc` the centre elevation (metres,
/// NaN when nodata), `ex` the block's window extrema, `cells` the window's cells, `n` its
/// valid cells, `frac` the minimum valid fraction.
pub fn relief_position(
    zc: f64,
    ex: &Extrema,
    i: usize,
    j: usize,
    cells: u64,
    n: i64,
    frac: f64,
) -> f64 {
    let (lo, hi) = (ex.min[[i, j]], ex.max[[i, j]]);
    if zc.is_finite() && enough(n, cells, frac) && hi > lo {
        100.0 * (zc - lo) / (hi - lo)
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

    fn run(z: &ndarray::Array2<f32>, r: f64, h: f64, shape: WindowShape) -> ndarray::Array2<f32> {
        let params = TerrainParams {
            shape,
            min_valid_fraction: 0.6,
            ..TerrainParams::default()
        };
        let f = TerrainFeature::windowed(Quantity::ReliefPosition, r);
        compute(
            &[f],
            z.view(),
            &CellSizes::uniform(h, h, z.nrows()),
            0,
            100.0,
            &params,
        )
        .remove(0)
    }

    #[test]
    fn plane_is_midway_peak_is_top_pit_is_bottom() {
        // Closed forms. On a plane a window symmetric about its centre has its minimum and
        // maximum at opposite cells, equally far below and above z: 50 %. A cone's apex is
        // its window's maximum (100 %), an inverted cone's its minimum (0 %).
        let plane = sample(21, 21, 0.5, 0.5, |x, y| 0.3 * x - 0.2 * y + 50.0);
        let peak = sample(21, 21, 0.5, 0.5, |x, y| 80.0 - x.hypot(y));
        let pit = sample(21, 21, 0.5, 0.5, |x, y| 20.0 + x.hypot(y));
        for shape in [WindowShape::Disc, WindowShape::Square] {
            let p = run(&plane, 2.0, 0.5, shape);
            for i in 4..17 {
                for j in 4..17 {
                    assert_relative_eq!(p[[i, j]] as f64, 50.0, epsilon = 1e-3);
                }
            }
            assert_relative_eq!(run(&peak, 2.0, 0.5, shape)[[10, 10]], 100.0);
            assert_eq!(run(&pit, 2.0, 0.5, shape)[[10, 10]], 0.0);
        }
        // Flat: no position (documented rule).
        let flat = ndarray::Array2::from_elem((9, 9), 7.0f32);
        assert!(run(&flat, 1.5, 0.5, WindowShape::Disc)[[4, 4]].is_nan());
    }

    #[test]
    fn matches_naive_reference() {
        // Against a naive enumeration of each disc window's valid cells (centres within r).
        let mut rng = SplitMix64::new(23);
        for case in 0..10 {
            let dem = random_dem(&mut rng, 15, 17, 0.1);
            let h = 0.5 + rng.next_f64();
            let r = 0.8 + 3.0 * rng.next_f64();
            let got = run(&dem, r, h, WindowShape::Disc);
            let k = radius_cells(r, h) as i64;
            for i in 0..15i64 {
                for j in 0..17i64 {
                    let mut cells = 0usize;
                    let mut valid: Vec<f64> = Vec::new();
                    for dy in -k..=k {
                        for dx in -k..=k {
                            if ((dx * dx + dy * dy) as f64).sqrt() * h > r * (1.0 + 1e-9) {
                                continue;
                            }
                            cells += 1;
                            let (a, b) = (i + dy, j + dx);
                            if a >= 0 && b >= 0 && a < 15 && b < 17 {
                                let v = dem[[a as usize, b as usize]] as f64;
                                if v.is_finite() {
                                    valid.push(v);
                                }
                            }
                        }
                    }
                    let zc = dem[[i as usize, j as usize]] as f64;
                    let lo = valid.iter().copied().fold(f64::INFINITY, f64::min);
                    let hi = valid.iter().copied().fold(f64::NEG_INFINITY, f64::max);
                    let ok = valid.len() as f64 >= 0.6 * cells as f64 && zc.is_finite();
                    let want = if ok && hi > lo {
                        100.0 * (zc - lo) / (hi - lo)
                    } else {
                        f64::NAN
                    };
                    let g = got[[i as usize, j as usize]] as f64;
                    if want.is_nan() {
                        assert!(g.is_nan(), "case {case} ({i},{j}): {g}");
                    } else {
                        assert_relative_eq!(g, want, epsilon = 1e-4, max_relative = 1e-6);
                    }
                }
            }
        }
    }
}

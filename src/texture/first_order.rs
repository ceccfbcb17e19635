//! First-order texture: the standard deviation of a band's values in a window of radius r
//! metres (square or disc, the windows of the terrain statistics), from the exact integer
//! window sums of [`crate::terrain::window_sums`].
//!
//! Values are quantised as round(v·2²⁰) (units of 2⁻²⁰ ≈ 9.5·10⁻⁷ of the band's unit,
//! relative to 0; |v| < 2¹⁶), so a reflectance (0–1) or a normalised index (−1 to 1) keeps
//! six decimals and the sums do not depend on the block layout. The result is the
//! population standard deviation √(n·Σv² − (Σv)²)/n of the valid cells, in the band's
//! unit; NaN with fewer than `min_valid_fraction` × window cells valid or a nodata
//! centre (docs/methods.md, "First-order texture").

use ndarray::{Array2, ArrayView2};

use crate::error::Result;
use crate::grid::CellSizes;
use crate::terrain::position::{enough, variance_numerator};
use crate::terrain::window_sums::{
    CellSums, Layout, QuantisedField, SumOptions, WindowSums, Z_QUANTUM_M,
};
use crate::terrain::{RowSizes, WindowShape};

/// Window standard deviation of `values` (NaN = nodata) for the output cells
/// `halo..halo + out_r` × `halo..halo + out_c` of the block, with the block's cell sizes
/// `sizes` (metres, per row).
pub fn window_std(
    values: ArrayView2<f32>,
    sizes: &CellSizes,
    shape: WindowShape,
    radius_m: f64,
    halo: usize,
    (out_r, out_c): (usize, usize),
    min_valid_fraction: f64,
) -> Result<Array2<f64>> {
    let zs = values.mapv(|v| v as f64);
    let field = QuantisedField::new(&zs, 0.0);
    let layout = Layout::new(shape, radius_m, RowSizes::new(sizes), halo, out_r);
    let sums = WindowSums::try_new(
        &field,
        &layout,
        halo,
        out_c,
        SumOptions {
            squares: true,
            plane: false,
        },
    )?;
    let std = |i: usize, j: usize, cells: u64, s: &CellSums| {
        if !field.valid[[halo + i, halo + j]] || !enough(s.n, cells, min_valid_fraction) {
            return f64::NAN;
        }
        variance_numerator(s.n, s.s[0], s.s2).sqrt() / s.n as f64 * Z_QUANTUM_M
    };
    Ok(sums.map(&[&std]).remove(0))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::random::SplitMix64;

    #[test]
    fn equals_numpy_style_population_std() {
        // Against the two-pass population standard deviation of each window's valid cells
        // (the formula numpy.std uses, ddof = 0), written out here.
        let mut rng = SplitMix64::new(5);
        let (h, w) = (14, 19);
        let mut v = Array2::from_shape_fn((h, w), |_| rng.next_f64() as f32);
        v[[6, 6]] = f32::NAN;
        v[[2, 9]] = f32::NAN;
        let sizes = CellSizes::uniform(0.5, 0.5, h);
        for shape in [WindowShape::Square, WindowShape::Disc] {
            let halo = 3;
            let out = window_std(v.view(), &sizes, shape, 1.2, halo, (h - 6, w - 6), 0.0).unwrap();
            for i in 0..h - 6 {
                for j in 0..w - 6 {
                    let (r, c) = (i + halo, j + halo);
                    let mut cells = Vec::new();
                    for dr in -2i64..=2 {
                        for dc in -2i64..=2 {
                            let inside = match shape {
                                WindowShape::Square => true,
                                WindowShape::Disc => {
                                    (((dr * dr + dc * dc) as f64).sqrt() * 0.5) <= 1.2
                                }
                            };
                            let x = v[[(r as i64 + dr) as usize, (c as i64 + dc) as usize]];
                            if inside && !x.is_nan() {
                                cells.push(x as f64);
                            }
                        }
                    }
                    let got = out[[i, j]];
                    if v[[r, c]].is_nan() {
                        assert!(got.is_nan());
                        continue;
                    }
                    let m = cells.iter().sum::<f64>() / cells.len() as f64;
                    let want = (cells.iter().map(|x| (x - m).powi(2)).sum::<f64>()
                        / cells.len() as f64)
                        .sqrt();
                    // Quantisation to 2⁻²⁰ moves each value by at most 2⁻²¹.
                    assert!(
                        (got - want).abs() < 2e-6,
                        "{shape:?} ({i}, {j}): {got} {want}"
                    );
                }
            }
        }
    }
}

//! Vector ruggedness measure (Sappington, Longshore & Thompson 2007, J. Wildlife
//! Management 71(5), 1419–1426, doi:10.2193/2005-723).
//!
//! Each cell's unit normal is n = (−p, −q, 1)/√(1 + p² + q²) from Horn 1981 derivatives
//! (the same vector as (sin S sin A, sin S cos A, cos S) of the paper, and well defined on
//! flat cells). VRM = 1 − |Σ n| / N over the N cells of the window with a normal: 0 for
//! any plane however steep, approaching 1 for rugged terrain. Unitless.
//!
//! Normal components are quantised to integers in units of 2⁻³⁰ (error ≤ 2⁻³¹ per
//! component) and summed exactly (see [`super::window_sums`]), so VRM does not depend on
//! the block layout. A normal needs its full 3x3 window, so VRM needs one more halo cell
//! than its radius. NaN where the centre has no normal or fewer than
//! `min_valid_fraction` × window cells have one. Cost per cell: O(1) for squares, O(r/h)
//! for discs.

use ndarray::{Array2, Zip};

use super::derivatives::horn_pq_region;
use super::position::enough;
use super::window_sums::{CellSums, Layout, QuantisedField, SumOptions, WindowSums};
use super::RowSizes;

const NORMAL_SCALE: f64 = (1u64 << 30) as f64;

/// VRM for the output cells of `layout` (`out_c` columns starting at `halo`).
pub fn vrm(
    zs: &Array2<f64>,
    sizes: RowSizes,
    layout: &Layout,
    halo: usize,
    out_c: usize,
    min_valid_fraction: f64,
) -> Array2<f64> {
    let (nr, nc) = zs.dim();
    let (p, q) = horn_pq_region(zs, sizes, 0..nr, 0..nc);
    let valid = p.mapv(|v| v.is_finite());
    let mut nx = Array2::<i64>::zeros((nr, nc));
    let mut ny = Array2::<i64>::zeros((nr, nc));
    let mut nz = Array2::<i64>::zeros((nr, nc));
    Zip::from(&mut nx)
        .and(&mut ny)
        .and(&mut nz)
        .and(&p)
        .and(&q)
        .par_for_each(|x, y, z, &p, &q| {
            if p.is_finite() && q.is_finite() {
                let norm = (1.0 + p * p + q * q).sqrt();
                *x = (-p / norm * NORMAL_SCALE).round() as i64;
                *y = (-q / norm * NORMAL_SCALE).round() as i64;
                *z = (1.0 / norm * NORMAL_SCALE).round() as i64;
            }
        });
    let field = QuantisedField {
        valid,
        values: vec![nx, ny, nz],
    };
    let sums = WindowSums::new(
        &field,
        layout,
        halo,
        out_c,
        SumOptions {
            squares: false,
            plane: false,
        },
    );
    let centre_valid = &field.valid;
    let stat = |i: usize, j: usize, cells: u64, s: &CellSums| -> f64 {
        if !centre_valid[[halo + i, halo + j]] || !enough(s.n, cells, min_valid_fraction) {
            return f64::NAN;
        }
        let (x, y, z) = (s.s[0] as f64, s.s[1] as f64, s.s[2] as f64);
        let len = (x * x + y * y + z * z).sqrt() / NORMAL_SCALE;
        (1.0 - len / s.n as f64).max(0.0)
    };
    sums.map(&[&stat]).remove(0)
}

#[cfg(test)]
mod tests {
    use crate::grid::CellSizes;
    use crate::terrain::test_support::sample;
    use crate::terrain::{compute, Quantity, TerrainFeature, TerrainParams, WindowShape};
    use approx::assert_relative_eq;
    use ndarray::Array2;

    #[test]
    fn plane_vrm_is_zero_however_steep() {
        // Sappington et al. 2007: all normals of a plane are parallel, so VRM = 0.
        for shape in [WindowShape::Disc, WindowShape::Square] {
            let z = sample(15, 15, 1.0, 1.0, |x, y| 2.5 * x - 1.5 * y + 100.0);
            let p = TerrainParams {
                shape,
                ..TerrainParams::default()
            };
            let out = compute(
                &[TerrainFeature::windowed(Quantity::Vrm, 2.0)],
                z.view(),
                &CellSizes::uniform(1.0, 1.0, 15),
                3,
                100.0,
                &p,
            );
            for v in out[0].iter() {
                assert!(v.abs() < 1e-7, "{v}");
            }
        }
    }

    #[test]
    fn two_facets_closed_form() {
        // A ridge z = |x| (h = 1 m): on the east facet Horn gives p = 1, normal
        // (−1, 0, 1)/√2; on the ridge column Horn gives p = 0, normal (0, 0, 1). The VRM
        // of a window is then 1 − |Σn|/N with Σn summed by hand (closed form).
        let z = Array2::from_shape_fn((9, 9), |(_, j)| (j as f64 - 4.0).abs() as f32);
        let p = TerrainParams {
            shape: WindowShape::Square,
            min_valid_fraction: 0.0,
            ..TerrainParams::default()
        };
        let out = compute(
            &[TerrainFeature::windowed(Quantity::Vrm, 1.0)],
            z.view(),
            &CellSizes::uniform(1.0, 1.0, 9),
            2,
            0.0,
            &p,
        );
        // Output (2, 4) is block cell (4, 6): its window columns 5..=7 are all east facet.
        assert!(out[0][[2, 4]].abs() < 1e-7);
        // Output (2, 3) is block cell (4, 5): columns 4 (ridge, Horn p = 0, normal (0,0,1)),
        // 5 and 6 (east facet, normal (−1, 0, 1)/√2 since p = 1). Three of each column:
        // Σn = (−6/√2, 0, 3 + 6/√2), N = 9.
        let s = 2f64.sqrt();
        let len = ((6.0 / s).powi(2) + (3.0 + 6.0 / s).powi(2)).sqrt();
        assert_relative_eq!(out[0][[2, 3]] as f64, 1.0 - len / 9.0, epsilon = 1e-6);
    }
}

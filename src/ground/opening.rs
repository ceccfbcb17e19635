//! Morphological openings of an elevation raster and the progressive object test of the
//! simple morphological filter (docs/methods.md, *Ground from the DSM*).
//!
//! The opening of z by a flat window B of radius r is the erosion (window minimum) followed
//! by the dilation (window maximum) of the erosion: γ_B(z) = δ_B(ε_B(z)). It removes every
//! raised part of the surface narrower than the window and leaves planes and hollows
//! as they were. Nodata (NaN) cells are skipped in both passes (they count as +∞ in the
//! erosion and −∞ in the dilation); cells beyond the array count as nodata. Where a window
//! holds no valid cell the result is NaN. Window minima and maxima come from
//! [`crate::terrain::running_extrema`] (van Herk/Gil–Werman for squares, sparse tables for
//! discs), so they are exact and a cell's opening depends only on the cells within 2r of
//! it: the same in every block that holds that reach.
//!
//! Progressive filter (Pingel, Clarke & McBride 2013, §2.2): openings of growing radius
//! r₁ < r₂ < … < r_K; a cell is an object where one opening lowers it by more than the
//! slope threshold times the radius, Z_{k−1} − Z_k > s·r_k (Z_0 the minimum surface).
//! terrastack computes Z_k as the opening of Z_0 itself rather than of Z_{k−1}. For square
//! windows the two are identical (a square is open with respect to every smaller square,
//! so γ_{B_k}(γ_{B_(k−1)}(z)) = γ_{B_k}(z): a granulometry, Serra 1982, from memory; a test
//! checks it); for digital discs they can differ by the rounding of the disc's rows. The
//! direct form bounds every cell's reach to 2·r_K (the iterated one would reach Σ 2·r_k),
//! which is what makes the filter computable block by block.
//!
//! Cost per cell and radius: O(1) for squares, O(r/h) for discs; memory four f64 arrays
//! of the block (the minimum surface, two successive openings and the erosion), plus the
//! running extrema's working arrays and the object mask (1 byte a cell).

use ndarray::{Array2, Zip};

use crate::grid::CellSizes;
use crate::terrain::running_extrema::Extrema;
use crate::terrain::window_sums::Layout;
use crate::terrain::{RowSizes, WindowShape};

/// Erosion of `z` (metres, NaN = nodata) by the window of radius `r` metres: the minimum
/// of the valid cells of each cell's window, NaN where there is none. Same shape as `z`.
pub fn erosion(z: &Array2<f64>, cells: &CellSizes, shape: WindowShape, r: f64) -> Array2<f64> {
    let (nr, nc) = z.dim();
    let layout = Layout::new(shape, r, RowSizes::new(cells), 0, nr);
    let ex = Extrema::compute(z, &layout, 0, nc);
    ex.min.mapv(|v| if v.is_finite() { v } else { f64::NAN })
}

/// Dilation of `z` by the window of radius `r` metres: the maximum of the valid cells of
/// each cell's window, NaN where there is none.
pub fn dilation(z: &Array2<f64>, cells: &CellSizes, shape: WindowShape, r: f64) -> Array2<f64> {
    let (nr, nc) = z.dim();
    let layout = Layout::new(shape, r, RowSizes::new(cells), 0, nr);
    let ex = Extrema::compute(z, &layout, 0, nc);
    ex.max.mapv(|v| if v.is_finite() { v } else { f64::NAN })
}

/// Opening of `z` by the window of radius `r` metres: [`dilation`] of the [`erosion`].
/// Never above z where z is valid; equal to z on planes and in hollows wider than the window.
pub fn opening(z: &Array2<f64>, cells: &CellSizes, shape: WindowShape, r: f64) -> Array2<f64> {
    dilation(&erosion(z, cells, shape, r), cells, shape, r)
}

/// Object cells of the progressive filter on the minimum surface `z0` (metres, NaN = not a
/// candidate): true where, for some radius r_k of `radii` (metres, increasing), the
/// opening by r_(k−1) (z0 itself for k = 1) lies more than `slope`·r_k above the opening
/// by r_k. NaN cells of z0 are never objects (they are not candidates at all).
pub fn progressive_objects(
    z0: &Array2<f64>,
    cells: &CellSizes,
    shape: WindowShape,
    radii: &[f64],
    slope: f64,
) -> Array2<bool> {
    let mut object = Array2::from_elem(z0.dim(), false);
    let mut last = z0.clone();
    // A window twice the array's longer side covers the whole array from any centre: a
    // larger radius gives the same opening, so windows are capped there (the threshold
    // keeps the radius asked for).
    let (nr, nc) = z0.dim();
    let h_max = cells
        .hx
        .iter()
        .chain(&cells.hy)
        .copied()
        .fold(0.0f64, f64::max);
    let cap = 2.0 * nr.max(nc) as f64 * h_max.max(f64::MIN_POSITIVE);
    for &r in radii {
        let next = opening(z0, cells, shape, r.min(cap));
        let threshold = slope * r;
        Zip::from(&mut object)
            .and(z0)
            .and(&last)
            .and(&next)
            .for_each(|o, &z, &a, &b| {
                // NaN differences (no valid cell in a window) never flag.
                if z.is_finite() && a - b > threshold {
                    *o = true;
                }
            });
        last = next;
    }
    object
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::random::SplitMix64;

    fn uniform(n: usize, h: f64) -> CellSizes {
        CellSizes::uniform(h, h, n)
    }

    /// Opening by brute force: minimum over the square (or disc) window of valid cells,
    /// then maximum of those minima; the direct definition, independent of the running
    /// extrema.
    fn naive_opening(z: &Array2<f64>, k: i64, disc: bool) -> Array2<f64> {
        let (nr, nc) = z.dim();
        let inside = |di: i64, dj: i64| !disc || ((di * di + dj * dj) as f64) <= (k * k) as f64;
        let pass = |a: &Array2<f64>, take_min: bool| {
            Array2::from_shape_fn((nr, nc), |(i, j)| {
                let mut best = f64::NAN;
                for di in -k..=k {
                    for dj in -k..=k {
                        let (ii, jj) = (i as i64 + di, j as i64 + dj);
                        if ii < 0 || jj < 0 || ii >= nr as i64 || jj >= nc as i64 {
                            continue;
                        }
                        if !inside(di, dj) {
                            continue;
                        }
                        let v = a[[ii as usize, jj as usize]];
                        if v.is_nan() {
                            continue;
                        }
                        if best.is_nan() || (take_min && v < best) || (!take_min && v > best) {
                            best = v;
                        }
                    }
                }
                best
            })
        };
        pass(&pass(z, true), false)
    }

    fn random_field(rng: &mut SplitMix64, n: usize, holes: f64) -> Array2<f64> {
        Array2::from_shape_fn((n, n), |_| {
            if rng.next_f64() < holes {
                f64::NAN
            } else {
                10.0 * rng.next_f64()
            }
        })
    }

    fn same(a: &Array2<f64>, b: &Array2<f64>) -> bool {
        a.iter()
            .zip(b.iter())
            .all(|(x, y)| (x.is_nan() && y.is_nan()) || x == y)
    }

    #[test]
    fn opening_matches_the_direct_definition_on_random_fields() {
        // Reference: the definition of the opening by brute force (above).
        let mut rng = SplitMix64::new(7);
        for &(shape, disc) in &[(WindowShape::Square, false), (WindowShape::Disc, true)] {
            for k in 1..=3i64 {
                let z = random_field(&mut rng, 17, 0.1);
                let got = opening(&z, &uniform(17, 1.0), shape, k as f64);
                assert!(same(&got, &naive_opening(&z, k, disc)), "{shape:?} k={k}");
            }
        }
    }

    #[test]
    fn square_openings_are_a_granulometry() {
        // Opening by a square of radius b of the opening by a square of radius a ≤ b is the
        // opening by b (the square of radius b is open with respect to the smaller square),
        // so the direct and the iterated progressive filters agree exactly for squares.
        let mut rng = SplitMix64::new(11);
        let z = random_field(&mut rng, 40, 0.0);
        let c = uniform(40, 0.5);
        let mut iterated = z.clone();
        for k in 1..=5 {
            let r = 0.5 * k as f64;
            iterated = opening(&iterated, &c, WindowShape::Square, r);
            let direct = opening(&z, &c, WindowShape::Square, r);
            assert!(same(&iterated, &direct), "radius {r}");
        }
    }

    #[test]
    fn openings_keep_planes_and_remove_narrow_bumps() {
        // Closed form: the opening of a plane is the plane; a box 3 cells wide on it is
        // removed by any window wider than the box (radius 2 cells) and kept by radius 1.
        let n = 30;
        let c = uniform(n, 1.0);
        let plane = Array2::from_shape_fn((n, n), |(i, j)| 5.0 + 0.1 * j as f64 - 0.05 * i as f64);
        let mut z = plane.clone();
        for i in 14..17 {
            for j in 14..17 {
                z[[i, j]] += 4.0;
            }
        }
        for shape in [WindowShape::Square, WindowShape::Disc] {
            let o = opening(&plane, &c, shape, 3.0);
            // Away from the array's edges (within 2r the windows are cut by the edge).
            for i in 6..n - 6 {
                for j in 6..n - 6 {
                    assert!((o[[i, j]] - plane[[i, j]]).abs() < 1e-12);
                }
            }
            let removed = opening(&z, &c, shape, 2.0);
            assert!((removed[[15, 15]] - plane[[15, 15]]).abs() < 0.5);
            // The 3x3 square fits the box: its centre keeps the box's lowest cell.
            let kept = opening(&z, &c, WindowShape::Square, 1.0);
            assert_eq!(kept[[15, 15]], z[[16, 14]]);
        }
        let objects = progressive_objects(&z, &c, WindowShape::Disc, &[1.0, 2.0, 3.0], 0.15);
        assert!(objects[[15, 15]] && objects[[14, 16]]);
        assert!(!objects[[10, 10]] && !objects[[20, 15]]);
    }

    #[test]
    fn nodata_is_skipped_and_empty_windows_are_nan() {
        let mut z = Array2::from_elem((9, 9), f64::NAN);
        z[[4, 4]] = 3.0;
        let c = uniform(9, 1.0);
        let e = erosion(&z, &c, WindowShape::Square, 1.0);
        assert_eq!(e[[3, 3]], 3.0);
        assert!(e[[0, 0]].is_nan());
        let o = opening(&z, &c, WindowShape::Square, 1.0);
        assert_eq!(o[[4, 4]], 3.0);
        let objects = progressive_objects(&z, &c, WindowShape::Square, &[1.0], 0.1);
        assert!(objects.iter().all(|&o| !o));
    }
}

//! Ground under removed cells: interpolation from the nearest ground cells along lines,
//! and the distance from each cell to the nearest ground cell (docs/methods.md, *Ground
//! from the DSM*, step 4).
//!
//! Pingel, Clarke & McBride (2013) fill the removed cells of the minimum surface by the
//! spring-metaphor inpainting of D'Errico (a sparse linear system over the whole raster).
//! terrastack uses a local, deterministic alternative that a block can compute from its
//! halo alone: **line-pair interpolation**. From a removed cell, walk both ways along each
//! of four lines (east–west, north–south and the two diagonals) to the first ground cell
//! within the reach D (metres), at distances d₁ and d₂ with elevations z₁ and z₂. A line
//! with ground on both sides gives the linear interpolation z₁·d₂/(d₁ + d₂) +
//! z₂·d₁/(d₁ + d₂), weighted by 1/(d₁ + d₂)²; the estimate is the weighted mean over the
//! lines that have both ends. Each estimate, and so the mean, is exact on a plane. Where
//! no line has both ends (a removed area cut by the raster's edge or by nodata) the cell
//! takes the mean of the one-sided ground elevations weighted by 1/d² (constant
//! extrapolation); where no ground cell lies within D on any of the eight half-lines, the
//! ground is unknown (NaN).
//!
//! Distances along a line use the cell sizes of the removed cell's row. A cell's estimate
//! depends only on the ground mask and elevations within D of it (in cells, ⌈D/h⌉ with h
//! the smaller cell size), so blocks whose halo holds that reach give identical values.
//! Cost: at most 8·D/h steps per removed cell (fewer where ground is near), nothing per
//! ground cell.
//!
//! The distance to the nearest ground cell is the exact Euclidean distance transform of
//! Felzenszwalb & Huttenlocher (2012, Theory of Computing 8, 415–428): the distance along
//! each column to the nearest ground cell in metres, then for each row the lower envelope
//! of the parabolas ((j − j′)·hx)² + g(j′)², with hx the row's east–west cell size. It is
//! exact (for that metric) wherever it is at most D; farther cells report +∞ ("beyond the
//! reach"), which makes it block-independent too. Cost O(1) per cell.

use ndarray::{Array2, Axis};
use rayon::prelude::*;

use crate::grid::CellSizes;
use crate::terrain::RowSizes;

/// The four line directions (row step, column step): east–west, north–south and the two
/// diagonals.
const LINES: [(i64, i64); 4] = [(0, 1), (1, 0), (1, 1), (1, -1)];

/// Ground elevation (metres) at every cell where `wanted` is true: z0 itself on `ground`
/// cells, the line-pair interpolation of z0 from the ground cells within `reach_m` elsewhere
/// (see the module documentation), NaN where no ground cell lies within reach on any line
/// and where `wanted` is false.
pub fn interpolate(
    z0: &Array2<f64>,
    ground: &Array2<bool>,
    wanted: &Array2<bool>,
    cells: &CellSizes,
    reach_m: f64,
) -> Array2<f64> {
    let (nr, nc) = z0.dim();
    let sizes = RowSizes::new(cells);
    let mut out = Array2::from_elem((nr, nc), f64::NAN);
    out.axis_iter_mut(Axis(0))
        .into_par_iter()
        .enumerate()
        .for_each(|(i, mut row)| {
            let (hx, hy) = (sizes.hx(i), sizes.hy(i));
            for j in 0..nc {
                if !wanted[[i, j]] {
                    continue;
                }
                if ground[[i, j]] {
                    row[j] = z0[[i, j]];
                    continue;
                }
                row[j] = estimate(z0, ground, i, j, hx, hy, reach_m);
            }
        });
    out
}

/// The line-pair estimate at removed cell (i, j); see [`interpolate`].
fn estimate(
    z0: &Array2<f64>,
    ground: &Array2<bool>,
    i: usize,
    j: usize,
    hx: f64,
    hy: f64,
    reach_m: f64,
) -> f64 {
    let (nr, nc) = z0.dim();
    // First ground cell from (i, j) stepping by (di, dj): (distance m, elevation).
    let walk = |di: i64, dj: i64| -> Option<(f64, f64)> {
        let step = ((di as f64 * hy).powi(2) + (dj as f64 * hx).powi(2)).sqrt();
        let steps = (reach_m / step * (1.0 + 1e-9)).floor() as i64;
        for n in 1..=steps {
            let (ii, jj) = (i as i64 + n * di, j as i64 + n * dj);
            if ii < 0 || jj < 0 || ii >= nr as i64 || jj >= nc as i64 {
                return None;
            }
            let (ii, jj) = (ii as usize, jj as usize);
            if ground[[ii, jj]] {
                return Some((n as f64 * step, z0[[ii, jj]]));
            }
        }
        None
    };
    let (mut pair_sum, mut pair_w) = (0.0, 0.0);
    let (mut one_sum, mut one_w) = (0.0, 0.0);
    for &(di, dj) in &LINES {
        let a = walk(di, dj);
        let b = walk(-di, -dj);
        match (a, b) {
            (Some((d1, z1)), Some((d2, z2))) => {
                let span = d1 + d2;
                let w = 1.0 / (span * span);
                pair_sum += w * (z1 * d2 + z2 * d1) / span;
                pair_w += w;
            }
            (Some((d, z)), None) | (None, Some((d, z))) => {
                let w = 1.0 / (d * d);
                one_sum += w * z;
                one_w += w;
            }
            (None, None) => {}
        }
    }
    if pair_w > 0.0 {
        pair_sum / pair_w
    } else if one_w > 0.0 {
        one_sum / one_w
    } else {
        f64::NAN
    }
}

/// Euclidean distance in metres from every cell to the nearest `ground` cell, +∞ where it
/// exceeds `reach_m` (see the module documentation). 0 on ground cells.
pub fn distance_to_ground(ground: &Array2<bool>, cells: &CellSizes, reach_m: f64) -> Array2<f64> {
    let (nr, nc) = ground.dim();
    let sizes = RowSizes::new(cells);
    // Column pass: distance along the column (metres), +∞ where the column has no ground.
    // Row offsets use each row's north-south size accumulated from the top of the block.
    let mut north = vec![0.0f64; nr + 1];
    for i in 0..nr {
        north[i + 1] = north[i] + sizes.hy(i);
    }
    let centre = |i: usize| north[i] + 0.5 * sizes.hy(i);
    let mut g = Array2::from_elem((nr, nc), f64::INFINITY);
    g.axis_iter_mut(Axis(1))
        .into_par_iter()
        .enumerate()
        .for_each(|(j, mut col)| {
            let mut last: Option<usize> = None;
            for i in 0..nr {
                if ground[[i, j]] {
                    last = Some(i);
                }
                if let Some(k) = last {
                    col[i] = centre(i) - centre(k);
                }
            }
            let mut next: Option<usize> = None;
            for i in (0..nr).rev() {
                if ground[[i, j]] {
                    next = Some(i);
                }
                if let Some(k) = next {
                    col[i] = col[i].min(centre(k) - centre(i));
                }
            }
        });
    // Row pass: lower envelope of parabolas (Felzenszwalb & Huttenlocher 2012, §2).
    let mut out = Array2::from_elem((nr, nc), f64::INFINITY);
    out.axis_iter_mut(Axis(0))
        .into_par_iter()
        .zip(g.axis_iter(Axis(0)).into_par_iter())
        .enumerate()
        .for_each(|(i, (mut orow, grow))| {
            let hx = sizes.hx(i);
            let f: Vec<f64> = grow.iter().map(|v| v * v).collect();
            let sites: Vec<usize> = (0..nc).filter(|&q| f[q].is_finite()).collect();
            if sites.is_empty() {
                return;
            }
            let x = |q: usize| q as f64 * hx;
            // Envelope: parabola sites v[k], boundaries b[k] .. b[k + 1].
            let mut v: Vec<usize> = Vec::with_capacity(sites.len());
            let mut b: Vec<f64> = Vec::with_capacity(sites.len() + 1);
            for &q in &sites {
                loop {
                    let Some(&p) = v.last() else {
                        v.push(q);
                        b.push(f64::NEG_INFINITY);
                        break;
                    };
                    let s = ((f[q] + x(q) * x(q)) - (f[p] + x(p) * x(p))) / (2.0 * (x(q) - x(p)));
                    if s <= *b.last().expect("one boundary per site") {
                        v.pop();
                        b.pop();
                    } else {
                        v.push(q);
                        b.push(s);
                        break;
                    }
                }
            }
            let mut k = 0;
            for (c, o) in orow.iter_mut().enumerate() {
                let xc = x(c);
                while k + 1 < v.len() && b[k + 1] < xc {
                    k += 1;
                }
                let p = v[k];
                let d = ((xc - x(p)).powi(2) + f[p]).sqrt();
                *o = if d <= reach_m * (1.0 + 1e-12) {
                    d
                } else {
                    f64::INFINITY
                };
            }
        });
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::random::SplitMix64;

    #[test]
    fn line_pairs_are_exact_on_a_plane() {
        // Closed form: linear interpolation along any line reproduces a plane, so the
        // weighted mean does too, whatever the hole's shape.
        let n = 40;
        let plane = |i: usize, j: usize| 12.0 + 0.2 * j as f64 * 0.5 - 0.1 * i as f64 * 0.5;
        let z0 = Array2::from_shape_fn((n, n), |(i, j)| plane(i, j));
        let ground = Array2::from_shape_fn((n, n), |(i, j)| {
            let (di, dj) = (i as f64 - 20.0, j as f64 - 18.0);
            di * di / 49.0 + dj * dj / 100.0 > 1.0 && !(5..9).contains(&i)
        });
        let wanted = Array2::from_elem((n, n), true);
        let cells = CellSizes::uniform(0.5, 0.5, n);
        let dtm = interpolate(&z0, &ground, &wanted, &cells, 30.0);
        for i in 0..n {
            for j in 0..n {
                assert!((dtm[[i, j]] - plane(i, j)).abs() < 1e-9, "{i},{j}");
            }
        }
    }

    #[test]
    fn beyond_the_reach_the_ground_is_unknown() {
        let n = 30;
        let z0 = Array2::from_elem((n, n), 1.0);
        let ground = Array2::from_shape_fn((n, n), |(i, j)| i < 2 || j < 2);
        let wanted = Array2::from_elem((n, n), true);
        let cells = CellSizes::uniform(1.0, 1.0, n);
        let dtm = interpolate(&z0, &ground, &wanted, &cells, 5.0);
        // (5, 5) sees ground 4 cells north and 4 west; (20, 20) sees none within 5 m.
        assert_eq!(dtm[[5, 5]], 1.0);
        assert!(dtm[[20, 20]].is_nan());
        let d = distance_to_ground(&ground, &cells, 5.0);
        assert_eq!(d[[1, 1]], 0.0);
        assert!((d[[5, 5]] - 4.0).abs() < 1e-12);
        assert!(d[[20, 20]].is_infinite());
    }

    #[test]
    fn distance_transform_matches_brute_force() {
        // Reference: the minimum over every ground cell of the Euclidean distance in
        // metres, with unequal cell sizes.
        let mut rng = SplitMix64::new(5);
        let (nr, nc) = (23, 31);
        let ground = Array2::from_shape_fn((nr, nc), |_| rng.next_f64() < 0.04);
        let (hx, hy) = (0.3, 0.5);
        let cells = CellSizes::uniform(hx, hy, nr);
        let reach = 4.0;
        let d = distance_to_ground(&ground, &cells, reach);
        for i in 0..nr {
            for j in 0..nc {
                let mut best = f64::INFINITY;
                for ((a, b), &g) in ground.indexed_iter() {
                    if g {
                        let dx = (j as f64 - b as f64) * hx;
                        let dy = (i as f64 - a as f64) * hy;
                        best = best.min((dx * dx + dy * dy).sqrt());
                    }
                }
                if best <= reach {
                    assert!((d[[i, j]] - best).abs() < 1e-9, "{i},{j}");
                } else {
                    assert!(d[[i, j]].is_infinite());
                }
            }
        }
    }
}

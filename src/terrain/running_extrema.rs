//! Running minimum and maximum over discs and squares (for relative elevation and local
//! relief).
//!
//! The 1D running extremum over a window of L = 2w + 1 cells uses van Herk 1992 (Pattern
//! Recognit. Lett. 13) / Gil & Werman 1993 (IEEE Trans. PAMI 15), citations from memory:
//! split the line into blocks of L cells, take prefix extrema g and suffix extrema h inside
//! each block; the window starting at e spans at most two blocks, so its extremum is
//! extremum(h[e], g[e + 2w]): three comparisons per cell whatever w.
//!
//! - Squares are separable: rows then columns, O(1) per cell whatever the radius.
//! - Discs are a union of row segments of varying half-width (see [`super::window_sums`]
//!   for the membership rule): one 1D pass per window row, O(ry) = O(r/h) per cell.
//!
//! Nodata (NaN) and cells beyond the array are skipped (they count as nodata in the valid
//! fraction, which the callers check). Minimum and maximum are exact, so results do not
//! depend on the block layout or thread count.

use ndarray::{Array2, Axis};
use rayon::prelude::*;

use super::window_sums::Layout;
use super::WindowShape;

/// Window minimum and maximum (metres) for every output cell; ±∞ where no cell is valid.
pub struct Extrema {
    pub min: Array2<f64>,
    pub max: Array2<f64>,
}

/// Running minimum of `a` over windows [c − w, c + w] for centres c = `start` + k,
/// k in 0..out.len(); indices outside `a` count as +∞. NaN in `a` must already be +∞.
pub fn running_min(
    a: &[f64],
    w: usize,
    start: i64,
    out: &mut [f64],
    g: &mut Vec<f64>,
    h: &mut Vec<f64>,
) {
    let n = out.len();
    if n == 0 {
        return;
    }
    let l = 2 * w as i64 + 1;
    // Extended coordinate e = index + w; the window of centre c starts at e = c.
    let e_lo = (start).div_euclid(l) * l;
    let e_hi = (start + n as i64 - 1 + 2 * w as i64).div_euclid(l) * l + l; // exclusive
    let len = (e_hi - e_lo) as usize;
    g.clear();
    h.clear();
    g.resize(len, f64::INFINITY);
    h.resize(len, f64::INFINITY);
    let at = |e: i64| -> f64 {
        let idx = e - w as i64;
        if idx >= 0 && (idx as usize) < a.len() {
            a[idx as usize]
        } else {
            f64::INFINITY
        }
    };
    let mut k = 0usize;
    while k < len {
        let end = (k + l as usize).min(len);
        let mut run = f64::INFINITY;
        for (kk, gv) in g.iter_mut().enumerate().take(end).skip(k) {
            run = run.min(at(e_lo + kk as i64));
            *gv = run;
        }
        let mut run = f64::INFINITY;
        for (kk, hv) in h.iter_mut().enumerate().take(end).skip(k).rev() {
            run = run.min(at(e_lo + kk as i64));
            *hv = run;
        }
        k = end;
    }
    for (kk, o) in out.iter_mut().enumerate() {
        let e0 = (start + kk as i64 - e_lo) as usize;
        *o = h[e0].min(g[e0 + 2 * w]);
    }
}

fn min_prepared(v: f64) -> f64 {
    if v.is_nan() {
        f64::INFINITY
    } else {
        v
    }
}

fn max_prepared(v: f64) -> f64 {
    if v.is_nan() {
        f64::INFINITY
    } else {
        -v
    }
}

impl Extrema {
    /// Window extrema of `zs` (metres, NaN = nodata) for the output cells of `layout`
    /// (`out_c` columns starting at column `halo`).
    pub fn compute(zs: &Array2<f64>, layout: &Layout, halo: usize, out_c: usize) -> Extrema {
        // Both passes are minima: of z for the minimum and of −z for the maximum.
        let lo = zs.mapv(min_prepared);
        let hi = zs.mapv(max_prepared);
        let min = window_min(&lo, layout, halo, out_c);
        let max = window_min(&hi, layout, halo, out_c).mapv(|v| -v);
        Extrema { min, max }
    }
}

fn window_min(a: &Array2<f64>, layout: &Layout, halo: usize, out_c: usize) -> Array2<f64> {
    let out_r = layout.rows.len();
    let nr = a.nrows() as i64;
    let mut out = Array2::from_elem((out_r, out_c), f64::INFINITY);
    match layout.shape {
        WindowShape::Disc => {
            out.axis_iter_mut(Axis(0))
                .into_par_iter()
                .enumerate()
                .for_each(|(i, mut row_out)| {
                    let win = &layout.rows[i];
                    let (mut g, mut h) = (Vec::new(), Vec::new());
                    let mut buf = vec![0.0; out_c];
                    for (k, &w) in win.widths.iter().enumerate() {
                        let row = win.centre as i64 + k as i64 - win.ry as i64;
                        if row < 0 || row >= nr {
                            continue;
                        }
                        let line = a.row(row as usize);
                        let line = line.as_slice().expect("standard layout");
                        running_min(line, w, halo as i64, &mut buf, &mut g, &mut h);
                        for (o, b) in row_out.iter_mut().zip(buf.iter()) {
                            *o = o.min(*b);
                        }
                    }
                });
        }
        WindowShape::Square => {
            // Runs of output rows with the same (kx, ky).
            let mut i = 0;
            while i < out_r {
                let kx = layout.rows[i].widths[0];
                let ky = layout.rows[i].ry;
                let mut end = i;
                while end < out_r && layout.rows[end].widths[0] == kx && layout.rows[end].ry == ky {
                    end += 1;
                }
                let first = layout.rows[i].centre as i64 - ky as i64;
                let last = layout.rows[end - 1].centre as i64 + ky as i64;
                let r0 = first.clamp(0, nr);
                let r1 = (last + 1).clamp(0, nr);
                // Horizontal pass over the rows the run needs.
                let mut horiz = Array2::from_elem(((r1 - r0) as usize, out_c), f64::INFINITY);
                horiz
                    .axis_iter_mut(Axis(0))
                    .into_par_iter()
                    .enumerate()
                    .for_each(|(k, mut hrow)| {
                        let line = a.row(r0 as usize + k);
                        let line = line.as_slice().expect("standard layout");
                        let (mut g, mut h) = (Vec::new(), Vec::new());
                        let hs = hrow.as_slice_mut().expect("standard layout");
                        running_min(line, kx, halo as i64, hs, &mut g, &mut h);
                    });
                // Vertical pass, row-vectorised over strips of columns.
                let centre0 = layout.rows[i].centre as i64 - r0;
                let part = out.slice_mut(ndarray::s![i..end, ..]);
                vertical_min(&horiz, ky, centre0, part);
                i = end;
            }
        }
    }
    out
}

/// Column-wise running minimum of `horiz` over rows [c − ky, c + ky] for centres
/// c = `centre0` + k (rows outside `horiz` count as +∞), written into `out` (one row per
/// centre). Van Herk/Gil–Werman along the rows, whole rows at a time, strips of columns
/// in parallel.
fn vertical_min(
    horiz: &Array2<f64>,
    ky: usize,
    centre0: i64,
    mut out: ndarray::ArrayViewMut2<f64>,
) {
    const STRIP: usize = 256;
    let n_out = out.nrows();
    let rows = horiz.nrows() as i64;
    let l = 2 * ky as i64 + 1;
    let e_lo = centre0.div_euclid(l) * l;
    let e_hi = (centre0 + n_out as i64 - 1 + 2 * ky as i64).div_euclid(l) * l + l;
    let len = (e_hi - e_lo) as usize;
    out.axis_chunks_iter_mut(Axis(1), STRIP)
        .into_par_iter()
        .enumerate()
        .for_each(|(strip, mut o)| {
            let c0 = strip * STRIP;
            let w = o.ncols();
            let mut g = vec![f64::INFINITY; len * w];
            let mut h = vec![f64::INFINITY; len * w];
            let src = |e: i64, dst: &mut [f64]| {
                let idx = e - ky as i64;
                if idx >= 0 && idx < rows {
                    let r = horiz.row(idx as usize);
                    dst.copy_from_slice(&r.as_slice().expect("standard layout")[c0..c0 + w]);
                } else {
                    dst.iter_mut().for_each(|v| *v = f64::INFINITY);
                }
            };
            let mut line = vec![0.0; w];
            let mut k = 0usize;
            while k < len {
                let end = (k + l as usize).min(len);
                for kk in k..end {
                    src(e_lo + kk as i64, &mut line);
                    let (before, cur) = g.split_at_mut(kk * w);
                    let cur = &mut cur[..w];
                    if kk == k {
                        cur.copy_from_slice(&line);
                    } else {
                        let prev = &before[(kk - 1) * w..];
                        for ((c, p), v) in cur.iter_mut().zip(prev.iter()).zip(line.iter()) {
                            *c = p.min(*v);
                        }
                    }
                }
                for kk in (k..end).rev() {
                    src(e_lo + kk as i64, &mut line);
                    let (cur, after) = h.split_at_mut((kk + 1) * w);
                    let cur = &mut cur[kk * w..];
                    if kk + 1 == end {
                        cur.copy_from_slice(&line);
                    } else {
                        for ((c, nx), v) in cur.iter_mut().zip(after[..w].iter()).zip(line.iter()) {
                            *c = nx.min(*v);
                        }
                    }
                }
                k = end;
            }
            for (kk, mut orow) in o.axis_iter_mut(Axis(0)).enumerate() {
                let e0 = (centre0 + kk as i64 - e_lo) as usize;
                let hr = &h[e0 * w..(e0 + 1) * w];
                let gr = &g[(e0 + 2 * ky) * w..(e0 + 2 * ky + 1) * w];
                for ((ov, a), b) in orow.iter_mut().zip(hr.iter()).zip(gr.iter()) {
                    *ov = a.min(*b);
                }
            }
        });
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::grid::CellSizes;
    use crate::terrain::test_support::SplitMix64;
    use crate::terrain::RowSizes;

    #[test]
    fn running_min_matches_naive() {
        // Van Herk/Gil–Werman against direct minima over many random lines and widths.
        let mut rng = SplitMix64::new(3);
        for _ in 0..200 {
            let n = 1 + (rng.next_f64() * 30.0) as usize;
            let a: Vec<f64> = (0..n)
                .map(|_| {
                    if rng.next_f64() < 0.2 {
                        f64::INFINITY
                    } else {
                        rng.next_f64()
                    }
                })
                .collect();
            let w = (rng.next_f64() * 8.0) as usize;
            let start = (rng.next_f64() * 10.0) as i64 - 5;
            let count = 1 + (rng.next_f64() * 20.0) as usize;
            let mut out = vec![0.0; count];
            running_min(&a, w, start, &mut out, &mut Vec::new(), &mut Vec::new());
            for (k, got) in out.iter().enumerate() {
                let c = start + k as i64;
                let want = (c - w as i64..=c + w as i64)
                    .filter(|&x| x >= 0 && (x as usize) < n)
                    .map(|x| a[x as usize])
                    .fold(f64::INFINITY, f64::min);
                assert_eq!(*got, want);
            }
        }
    }

    #[test]
    fn square_and_disc_extrema_match_naive() {
        let mut rng = SplitMix64::new(5);
        for _ in 0..10 {
            let (nr, nc) = (13, 11);
            let zs = Array2::from_shape_fn((nr, nc), |_| {
                if rng.next_f64() < 0.15 {
                    f64::NAN
                } else {
                    rng.next_f64() * 9.0
                }
            });
            let cells = CellSizes::uniform(1.0, 1.0, nr);
            let r = 0.5 + rng.next_f64() * 3.5;
            for shape in [WindowShape::Disc, WindowShape::Square] {
                let layout = Layout::new(shape, r, RowSizes::new(&cells), 2, nr - 4);
                let ex = Extrema::compute(&zs, &layout, 2, nc - 4);
                for i in 0..nr - 4 {
                    for j in 0..nc - 4 {
                        let (ci, cj) = (i as i64 + 2, j as i64 + 2);
                        let k = r.floor() as i64;
                        let (mut mn, mut mx) = (f64::INFINITY, f64::NEG_INFINITY);
                        for dy in -k..=k {
                            for dx in -k..=k {
                                if shape == WindowShape::Disc
                                    && ((dx * dx + dy * dy) as f64).sqrt() > r
                                {
                                    continue;
                                }
                                let (a, b) = (ci + dy, cj + dx);
                                if a < 0 || b < 0 || a >= nr as i64 || b >= nc as i64 {
                                    continue;
                                }
                                let v = zs[[a as usize, b as usize]];
                                if v.is_finite() {
                                    mn = mn.min(v);
                                    mx = mx.max(v);
                                }
                            }
                        }
                        assert_eq!(ex.min[[i, j]], mn, "{shape:?} r={r}");
                        assert_eq!(ex.max[[i, j]], mx, "{shape:?} r={r}");
                    }
                }
            }
        }
    }
}

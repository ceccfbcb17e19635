//! Window minimum and maximum over discs and squares (for relative elevation and local
//! relief), in the elevation units of the input (metres).
//!
//! Both are computed as minima: of z for the minimum and of −z for the maximum. Nodata
//! (NaN) and cells beyond the array are skipped (+∞ in the minimum pass; they count as
//! nodata in the valid fraction, which the callers check). Where a window holds no valid
//! cell the minimum is +∞ and the maximum −∞. A zero result is always +0.0 (−0.0 and +0.0
//! compare equal, so which one a window keeps would otherwise depend on the comparison
//! order). Minimum and maximum are exact, so results do not depend on the block layout or
//! thread count.
//!
//! - Discs (`disc_min`): a disc is a union of row segments of varying half-width (see
//!   [`super::window_sums`] for the membership rule). The minimum over one segment comes
//!   from a sparse table over its input row, the range-minimum structure of Bender &
//!   Farach-Colton 2000 (LATIN, from memory): level k holds `M_k[x] = min(a[x .. x + 2^k))`,
//!   built from level k − 1 as `M_k[x] = min(M_(k−1)[x], M_(k−1)[x + 2^(k−1)])`; the
//!   minimum over `[x − w, x + w]` is `min(M_k[x − w], M_k[x + w + 1 − 2^k])` with
//!   k = ⌊log2(2w + 1)⌋ (two overlapping spans covering the segment). Levels are built
//!   one at a time in place, and each level serves the window rows whose widths use it, so
//!   only one level of the table is held. Cost: O(log2 w) per input cell to build the
//!   levels, plus two loads and two comparisons per output cell and window row, i.e.
//!   O(ry) = O(r/h) per output cell, contiguous along the row (vectorised).
//! - Squares (`square_min`) are separable: a 1D running minimum along the rows, then
//!   along the columns, each by van Herk 1992 (Pattern Recognit. Lett. 13) / Gil & Werman
//!   1993 (IEEE Trans. PAMI 15(5), 504–507): split the line into blocks of
//!   L = 2w + 1 cells, take prefix minima g and suffix minima h inside each block; the
//!   window starting at e spans at most two blocks, so its minimum is `min(h[e], g[e + 2w])`.
//!   Three comparisons per cell whatever the radius: O(1) per cell.
//!
//! Memory, beyond the two outputs (8 bytes per output cell each): discs hold one table
//! level of 8 bytes per cell over the input rows the windows reach and the output columns
//! widened by the largest half-width on each side, i.e. at most 8 bytes per input cell
//! when the windows fit in the block's halo, plus one table row per thread; the minimum
//! and maximum passes run one after the other, so one table is held at a time. Squares hold a prepared copy of the block (8 bytes per input cell), the horizontal
//! minima of the rows a run of output rows needs (8 bytes per row and output column) and
//! g and h arrays per column strip being processed.

use ndarray::{s, Array2, ArrayViewMut2, Axis};
use rayon::prelude::*;

use super::window_sums::Layout;
use super::WindowShape;

/// Window minimum and maximum (metres) for every output cell; ±∞ where no cell is valid.
pub struct Extrema {
    pub min: Array2<f64>,
    pub max: Array2<f64>,
}

/// The smaller of two values that are not NaN (one `minpd`/`minsd` instruction).
#[inline(always)]
fn fmin(a: f64, b: f64) -> f64 {
    if b < a {
        b
    } else {
        a
    }
}

/// Running minimum of `a` over windows [c − w, c + w] for centres c = `start` + k,
/// k in 0..out.len(), by van Herk/Gil–Werman; indices outside `a` count as +∞. NaN in `a`
/// must already be +∞. `g` and `h` are scratch buffers.
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
    let l = 2 * w + 1;
    // Extended coordinate e = index + w; the window of centre c starts at e = c.
    let e_lo = start.div_euclid(l as i64) * l as i64;
    let e_hi = (start + n as i64 - 1 + 2 * w as i64).div_euclid(l as i64) * l as i64 + l as i64;
    let len = (e_hi - e_lo) as usize;
    // The line over [e_lo, e_hi) in g, +∞ beyond `a`; h is then filled from it.
    g.clear();
    g.resize(len, f64::INFINITY);
    let first = e_lo - w as i64; // index into `a` of g[0]
    let lo = (-first).clamp(0, len as i64) as usize;
    let hi = (a.len() as i64 - first).clamp(lo as i64, len as i64) as usize;
    if hi > lo {
        let from = (first + lo as i64) as usize;
        g[lo..hi].copy_from_slice(&a[from..from + hi - lo]);
    }
    h.clear();
    h.extend_from_slice(g);
    for (gb, hb) in g.chunks_exact_mut(l).zip(h.chunks_exact_mut(l)) {
        for k in 1..l {
            gb[k] = fmin(gb[k], gb[k - 1]);
        }
        for k in (0..l - 1).rev() {
            hb[k] = fmin(hb[k], hb[k + 1]);
        }
    }
    let e0 = (start - e_lo) as usize;
    for ((o, hv), gv) in out
        .iter_mut()
        .zip(&h[e0..e0 + n])
        .zip(&g[e0 + 2 * w..e0 + 2 * w + n])
    {
        *o = fmin(*hv, *gv);
    }
}

/// The value entering the minimum pass: z itself, +∞ for NaN.
fn min_prepared(v: f64) -> f64 {
    if v.is_nan() {
        f64::INFINITY
    } else {
        v
    }
}

/// The value entering the maximum pass: −z, +∞ for NaN.
fn max_prepared(v: f64) -> f64 {
    if v.is_nan() {
        f64::INFINITY
    } else {
        -v
    }
}

/// +0.0 for either zero, `v` otherwise.
fn positive_zero(v: f64) -> f64 {
    if v == 0.0 {
        0.0
    } else {
        v
    }
}

impl Extrema {
    /// Window extrema of `zs` (metres, NaN = nodata) for the output cells of `layout`
    /// (`out_c` columns starting at column `halo`).
    pub fn compute(zs: &Array2<f64>, layout: &Layout, halo: usize, out_c: usize) -> Extrema {
        let pass = |prep: fn(f64) -> f64| match layout.shape {
            WindowShape::Disc => disc_min(zs, prep, layout, halo, out_c),
            WindowShape::Square => square_min(&zs.mapv(prep), layout, halo, out_c),
        };
        let min = pass(min_prepared).mapv_into(positive_zero);
        let max = pass(max_prepared).mapv_into(|v| positive_zero(-v));
        Extrema { min, max }
    }
}

/// Output rows handled together by one task (they share the table rows they read).
const BAND_ROWS: usize = 32;
/// Bytes of table one band reads per column strip, sized to stay in a core's L2 cache.
const STRIP_BYTES: usize = 512 << 10;

/// ⌊log2(2w + 1)⌋: the sparse-table level that serves a segment of half-width w.
fn level(w: usize) -> usize {
    (usize::BITS - 1 - (2 * w + 1).leading_zeros()) as usize
}

/// One window row's contribution at the current level: table row and the starts (table
/// columns) of the two spans for output column 0.
#[derive(Clone, Copy)]
struct Span {
    row: usize,
    lo: usize,
    hi: usize,
}

/// Minimum of `prep(zs)` over the disc windows of `layout` for output rows `layout.rows`
/// and output columns `halo..halo + out_c`; +∞ where no cell is valid. Sparse table per
/// input row, one level at a time (see the module documentation).
fn disc_min(
    zs: &Array2<f64>,
    prep: fn(f64) -> f64,
    layout: &Layout,
    halo: usize,
    out_c: usize,
) -> Array2<f64> {
    let out_r = layout.rows.len();
    let mut out = Array2::from_elem((out_r, out_c), f64::INFINITY);
    let (nr, nc) = zs.dim();
    let first = layout
        .rows
        .iter()
        .map(|w| w.centre as i64 - w.ry as i64)
        .min();
    let last = layout
        .rows
        .iter()
        .map(|w| w.centre as i64 + w.ry as i64)
        .max();
    let (Some(first), Some(last)) = (first, last) else {
        return out;
    };
    let r0 = first.clamp(0, nr as i64) as usize;
    let r1 = (last + 1).clamp(0, nr as i64) as usize;
    if out_c == 0 || r0 >= r1 {
        return out;
    }
    let w_max = layout
        .rows
        .iter()
        .flat_map(|w| w.widths.iter().copied())
        .max()
        .unwrap_or(0);
    let ry_max = layout.rows.iter().map(|w| w.ry).max().unwrap_or(0);

    // Table row t is input row r0 + t; table column x is input column col0 + x.
    let len = out_c + 2 * w_max;
    let col0 = halo as i64 - w_max as i64;
    let mut table = Array2::from_elem((r1 - r0, len), f64::INFINITY);
    let x_lo = (-col0).clamp(0, len as i64) as usize;
    let x_hi = (nc as i64 - col0).clamp(x_lo as i64, len as i64) as usize;
    table
        .axis_iter_mut(Axis(0))
        .into_par_iter()
        .enumerate()
        .for_each(|(t, mut trow)| {
            if x_hi == x_lo {
                return;
            }
            let src = zs.slice(s![r0 + t, (col0 + x_lo as i64) as usize..]);
            for (d, v) in trow.slice_mut(s![x_lo..x_hi]).iter_mut().zip(src.iter()) {
                *d = prep(*v);
            }
        });

    let band = BAND_ROWS
        .min(out_r.div_ceil(2 * rayon::current_num_threads()))
        .max(1);
    let strip = (STRIP_BYTES / (16 * (2 * ry_max + 1))).clamp(64, out_c.max(64)) / 16 * 16;
    for k in 0..=level(w_max) {
        if k > 0 {
            // Level k from level k − 1, in place (a copy of the row as the source).
            let step = 1usize << (k - 1);
            table.axis_iter_mut(Axis(0)).into_par_iter().for_each_init(
                Vec::new,
                |prev: &mut Vec<f64>, mut trow| {
                    let row = trow.as_slice_mut().expect("standard layout");
                    prev.clear();
                    prev.extend_from_slice(row);
                    if len > step {
                        for ((d, a), b) in row.iter_mut().zip(prev.iter()).zip(&prev[step..]) {
                            *d = fmin(*a, *b);
                        }
                    }
                },
            );
        }
        let span = 1usize << k;
        let table = &table;
        out.axis_chunks_iter_mut(Axis(0), band)
            .into_par_iter()
            .enumerate()
            .for_each(|(b, mut ob)| {
                // The window rows of each output row of the band served by level k.
                let spans: Vec<Vec<Span>> = (0..ob.nrows())
                    .map(|di| {
                        let win = &layout.rows[b * band + di];
                        win.widths
                            .iter()
                            .enumerate()
                            .filter(|&(_, &w)| level(w) == k)
                            .filter_map(|(kk, &w)| {
                                let row = win.centre as i64 + kk as i64 - win.ry as i64;
                                (row >= r0 as i64 && row < r1 as i64).then(|| Span {
                                    row: row as usize - r0,
                                    lo: w_max - w,
                                    hi: w_max + w + 1 - span,
                                })
                            })
                            .collect()
                    })
                    .collect();
                if spans.iter().all(Vec::is_empty) {
                    return;
                }
                for c0 in (0..out_c).step_by(strip) {
                    let n = strip.min(out_c - c0);
                    for (mut orow, row_spans) in ob.axis_iter_mut(Axis(0)).zip(&spans) {
                        let o = &mut orow.as_slice_mut().expect("standard layout")[c0..c0 + n];
                        for sp in row_spans {
                            let trow = table.row(sp.row);
                            let trow = trow.as_slice().expect("standard layout");
                            let a = &trow[sp.lo + c0..sp.lo + c0 + n];
                            let b = &trow[sp.hi + c0..sp.hi + c0 + n];
                            for ((o, a), b) in o.iter_mut().zip(a).zip(b) {
                                *o = fmin(*o, fmin(*a, *b));
                            }
                        }
                    }
                }
            });
    }
    out
}

/// Minimum of the prepared array `a` over the square windows of `layout` (van Herk/Gil–
/// Werman along the rows, then along the columns).
fn square_min(a: &Array2<f64>, layout: &Layout, halo: usize, out_c: usize) -> Array2<f64> {
    let out_r = layout.rows.len();
    let nr = a.nrows() as i64;
    let mut out = Array2::from_elem((out_r, out_c), f64::INFINITY);
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
            .for_each_init(
                || (Vec::new(), Vec::new()),
                |(g, h), (k, mut hrow)| {
                    let line = a.row(r0 as usize + k);
                    let line = line.as_slice().expect("standard layout");
                    let hs = hrow.as_slice_mut().expect("standard layout");
                    running_min(line, kx, halo as i64, hs, g, h);
                },
            );
        // Vertical pass, row-vectorised over strips of columns.
        let centre0 = layout.rows[i].centre as i64 - r0;
        let part = out.slice_mut(s![i..end, ..]);
        vertical_min(&horiz, ky, centre0, part);
        i = end;
    }
    out
}

/// Column-wise running minimum of `horiz` over rows [c − ky, c + ky] for centres
/// c = `centre0` + k (rows outside `horiz` count as +∞), written into `out` (one row per
/// centre). Van Herk/Gil–Werman along the rows, whole rows at a time, strips of columns
/// in parallel.
fn vertical_min(horiz: &Array2<f64>, ky: usize, centre0: i64, mut out: ArrayViewMut2<f64>) {
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
                            *c = fmin(*p, *v);
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
                            *c = fmin(*nx, *v);
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
                    *ov = fmin(*a, *b);
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

    /// Naive reference: enumerate the window's cells one by one (disc: cells whose centre
    /// lies within r, the north-south offset measured with the centre row's hy and the
    /// east-west offset with each row's own hx, the centre row by ⌊r/hx⌋; square:
    /// (2⌊r/hx⌋ + 1) x (2⌊r/hy⌋ + 1) cells at the centre row's sizes) and take the
    /// smallest and largest finite elevation; +∞ and −∞ when there is none.
    fn naive_extrema(
        zs: &Array2<f64>,
        shape: WindowShape,
        r: f64,
        cells: &CellSizes,
        centre: (usize, usize),
    ) -> (f64, f64) {
        let (nr, nc) = (zs.nrows() as i64, zs.ncols() as i64);
        let (r0, c0) = (centre.0 as i64, centre.1 as i64);
        let hy = cells.hy[centre.0];
        let tol = 1.0 + 1e-9;
        let ry = (r / hy * tol).floor() as i64;
        let kx = (r / cells.hx[centre.0] * tol).floor() as i64;
        let (mut mn, mut mx) = (f64::INFINITY, f64::NEG_INFINITY);
        for dy in -ry..=ry {
            let row = r0 + dy;
            let hx = cells.hx[row.clamp(0, nr - 1) as usize];
            let reach = (r / hx).ceil() as i64 + 1;
            for dx in -reach..=reach {
                let inside = match shape {
                    WindowShape::Square => dx.abs() <= kx,
                    WindowShape::Disc if dy == 0 => dx.abs() <= kx,
                    WindowShape::Disc => {
                        let d2 = (dx as f64 * hx).powi(2) + (dy as f64 * hy).powi(2);
                        d2.sqrt() <= r * tol
                    }
                };
                let col = c0 + dx;
                if !inside || row < 0 || row >= nr || col < 0 || col >= nc {
                    continue;
                }
                let v = zs[[row as usize, col as usize]];
                if !v.is_nan() {
                    mn = mn.min(v);
                    mx = mx.max(v);
                }
            }
        }
        (mn, mx)
    }

    /// Checks every output cell of `Extrema::compute` against [`naive_extrema`].
    fn check_against_naive(
        zs: &Array2<f64>,
        shape: WindowShape,
        r: f64,
        cells: &CellSizes,
        halo: usize,
        what: &str,
    ) {
        let (nr, nc) = zs.dim();
        let (out_r, out_c) = (nr - 2 * halo, nc - 2 * halo);
        let layout = Layout::new(shape, r, RowSizes::new(cells), halo, out_r);
        let ex = Extrema::compute(zs, &layout, halo, out_c);
        assert_eq!(ex.min.dim(), (out_r, out_c));
        for i in 0..out_r {
            for j in 0..out_c {
                let (mn, mx) = naive_extrema(zs, shape, r, cells, (halo + i, halo + j));
                let at = format!("{what} {shape:?} r={r} at ({i}, {j})");
                assert_eq!(ex.min[[i, j]].to_bits(), mn.to_bits(), "min {at}");
                assert_eq!(ex.max[[i, j]].to_bits(), mx.to_bits(), "max {at}");
            }
        }
    }

    /// A random DEM with a fraction `holes` of NaN cells.
    fn random_dem(rng: &mut SplitMix64, nr: usize, nc: usize, holes: f64) -> Array2<f64> {
        Array2::from_shape_fn((nr, nc), |_| {
            if rng.next_f64() < holes {
                f64::NAN
            } else {
                rng.next_f64() * 60.0 - 20.0
            }
        })
    }

    #[test]
    fn extrema_match_naive_enumeration_with_holes_and_edges() {
        // Source: the naive enumeration above. Random DEMs with NaN holes; halos from 0 (every
        // window leaves the array) to larger than the radius; radii from below one cell
        // (half-width 0) to larger than the array.
        let mut rng = SplitMix64::new(11);
        for case in 0..40 {
            let nr = 3 + (rng.next_f64() * 20.0) as usize;
            let nc = 3 + (rng.next_f64() * 20.0) as usize;
            let zs = random_dem(&mut rng, nr, nc, 0.25);
            let h = 0.5 + rng.next_f64();
            let cells = CellSizes::uniform(h, h * (0.7 + 0.6 * rng.next_f64()), nr);
            let halo = ((rng.next_f64() * 5.0) as usize).min((nr.min(nc) - 1) / 2);
            let r = match case % 4 {
                0 => 0.2 * h,
                1 => h * (1.0 + rng.next_f64()),
                2 => h * (2.0 + 6.0 * rng.next_f64()),
                _ => h * 30.0,
            };
            for shape in [WindowShape::Disc, WindowShape::Square] {
                check_against_naive(&zs, shape, r, &cells, halo, &format!("case {case}"));
            }
        }
    }

    #[test]
    fn geographic_disc_extrema_match_naive_enumeration() {
        // Source: the naive enumeration above. Per-row east-west cell sizes (a geographic
        // grid spanning a wide latitude range), so half-widths differ from row to row and
        // are not symmetric about the centre row.
        let mut rng = SplitMix64::new(23);
        for case in 0..12 {
            let (nr, nc) = (18, 21);
            let zs = random_dem(&mut rng, nr, nc, 0.15);
            let hx0 = 0.4 + 0.4 * rng.next_f64();
            let cells = CellSizes {
                hx: (0..nr).map(|i| hx0 * (1.0 + 0.08 * i as f64)).collect(),
                hy: (0..nr).map(|i| 0.6 * (1.0 + 0.01 * i as f64)).collect(),
            };
            let r = 0.5 + 4.5 * rng.next_f64();
            for shape in [WindowShape::Disc, WindowShape::Square] {
                check_against_naive(&zs, shape, r, &cells, 3, &format!("case {case}"));
            }
        }
    }

    #[test]
    fn all_nodata_rows_and_blocks_give_infinities() {
        // Source: the naive enumeration above; and by definition, a window without a valid
        // cell has minimum +∞ and maximum −∞.
        let mut rng = SplitMix64::new(31);
        let mut zs = random_dem(&mut rng, 16, 19, 0.1);
        for row in [0, 5, 6, 7, 15] {
            zs.row_mut(row).fill(f64::NAN);
        }
        let cells = CellSizes::uniform(1.0, 1.0, 16);
        for r in [0.5, 1.5, 3.2] {
            for shape in [WindowShape::Disc, WindowShape::Square] {
                check_against_naive(&zs, shape, r, &cells, 2, "NaN rows");
            }
        }
        let nan = Array2::from_elem((9, 9), f64::NAN);
        let cells = CellSizes::uniform(1.0, 1.0, 9);
        for shape in [WindowShape::Disc, WindowShape::Square] {
            let layout = Layout::new(shape, 2.5, RowSizes::new(&cells), 2, 5);
            let ex = Extrema::compute(&nan, &layout, 2, 5);
            assert!(ex.min.iter().all(|&v| v == f64::INFINITY));
            assert!(ex.max.iter().all(|&v| v == f64::NEG_INFINITY));
        }
    }

    #[test]
    fn large_disc_matches_naive_enumeration() {
        // Source: the naive enumeration above. A disc of radius 40 cells (sparse-table
        // levels up to 2^6 = 64) inside a 100 x 90 block with a 40-cell halo, and the same
        // radius with a 10-cell halo (windows leave the block).
        let mut rng = SplitMix64::new(47);
        let zs = random_dem(&mut rng, 100, 90, 0.05);
        let cells = CellSizes::uniform(0.1, 0.1, 100);
        check_against_naive(&zs, WindowShape::Disc, 4.0, &cells, 40, "halo 40");
        check_against_naive(&zs, WindowShape::Disc, 4.0, &cells, 10, "halo 10");
    }

    #[test]
    fn zero_extrema_are_positive_zero() {
        // By the module's rule: −0.0 and +0.0 compare equal, and a window holding either
        // reports +0.0 as its extremum (bit pattern 0), whatever the comparison order.
        let zs = Array2::from_shape_fn((5, 7), |(i, j)| if (i + j) % 2 == 0 { -0.0 } else { 0.0 });
        let cells = CellSizes::uniform(1.0, 1.0, 5);
        for shape in [WindowShape::Disc, WindowShape::Square] {
            let layout = Layout::new(shape, 1.5, RowSizes::new(&cells), 1, 3);
            let ex = Extrema::compute(&zs, &layout, 1, 5);
            assert!(ex.min.iter().all(|v| v.to_bits() == 0), "{shape:?}");
            assert!(ex.max.iter().all(|v| v.to_bits() == 0), "{shape:?}");
        }
    }

    #[test]
    fn level_is_floor_log2_of_segment_length() {
        // Closed form: ⌊log2(2w + 1)⌋ for w = 0, 1, 3, 4, 500 (lengths 1, 3, 7, 9, 1001).
        assert_eq!([0, 1, 3, 4, 500].map(level), [0, 1, 2, 3, 9]);
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

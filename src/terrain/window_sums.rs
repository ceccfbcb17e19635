//! Exact window sums of quantised values over discs and squares of radius r metres.
//!
//! Windowed statistics (TPI, DEV, roughness, detrended roughness, VRM) need, for every
//! cell, sums over its window of a validity mask, of values, of squared values and of
//! coordinate moments. Summed-area tables in floating point give sums whose rounding
//! depends on where the table starts, i.e. on the block's origin; terrastack must give
//! bit-identical results whatever the block layout. So sums are exact integers:
//!
//! - Elevations are quantised as zq = round((z·z_factor − reference_z)·2²⁰), integers in
//!   units of 2⁻²⁰ m (≈ 0.95 µm). The quantisation error is at most 2⁻²¹ m ≈ 0.48 µm per
//!   cell, far below the resolution of an f32 elevation of a real DSM (the f32 spacing at
//!   100 m is 7.6 µm). Cells with |z·z_factor − reference_z| ≥ 2¹⁶ m = 65 536 m are
//!   treated as nodata (no terrain spans that range above a sensible reference).
//! - Row prefix sums are kept in i64 (|zq| < 2³⁶, rows < 2²² cells: sums < 2⁵⁸) or i128
//!   (squares and column-weighted moments); window sums are accumulated in i128. Integer
//!   sums are exact, so any block layout and any thread count give identical sums; every
//!   statistic is then a fixed f64 formula of exact integers.
//!
//! Window membership ([`Layout`]): a disc holds the cells whose centres lie within r of the
//! centre cell's centre (centre included), measuring the north-south offset with the centre
//! row's hy and each row's east-west offset with that row's own hx (geographic grids); a
//! square holds (2kx+1) x (2ky+1) cells with kx = ⌊r/hx⌋, ky = ⌊r/hy⌋ at the centre row.
//! Cells beyond the array count as nodata.
//!
//! Cost per output cell: square windows O(1) whatever the radius (row-prefix differences,
//! then sums sliding down the rows, exact in integers: the idea of summed-area tables used
//! for multi-scale position by Lindsay, Cockburn & Russell 2015, Geomorphology 245, from
//! memory); discs O(ry) = O(r/h): one row-prefix difference per window row. Row prefixes
//! and quantisation cost O(1) per *input* cell, halo included, so a block whose halo is
//! large next to its interior pays for the halo too. Memory: 32 bytes per input cell for
//! the prefixes of count, Σz and Σz² (more with plane moments).

use ndarray::{Array2, Array3, Axis};
use rayon::prelude::*;

use super::{radius_cells, RowSizes, WindowShape};

/// Elevation quantum: 2⁻²⁰ m.
pub const Z_QUANTUM_M: f64 = 1.0 / (1u64 << 20) as f64;
/// Largest |z·z_factor − reference_z| kept, metres (2¹⁶).
pub const Z_RANGE_M: f64 = 65_536.0;

/// Quantises an elevation offset (metres) to units of 2⁻²⁰ m; `None` when not finite or
/// out of range.
pub fn quantise(v: f64) -> Option<i64> {
    if v.is_finite() && v.abs() < Z_RANGE_M {
        Some((v * (1u64 << 20) as f64).round() as i64)
    } else {
        None
    }
}

/// Most value channels a [`QuantisedField`] may carry.
pub const MAX_CHANNELS: usize = 3;

/// Integer channels of a block: a validity mask and zero or more value channels (0 where
/// invalid).
pub struct QuantisedField {
    pub valid: Array2<bool>,
    pub values: Vec<Array2<i64>>,
}

impl QuantisedField {
    /// Elevations `zs` (metres, NaN = nodata) quantised relative to `reference_z`.
    pub fn new(zs: &Array2<f64>, reference_z: f64) -> QuantisedField {
        let q = zs.mapv(|v| quantise(v - reference_z));
        QuantisedField {
            valid: q.mapv(|v| v.is_some()),
            values: vec![q.mapv(|v| v.unwrap_or(0))],
        }
    }

    /// Block size (rows, cols).
    pub fn dim(&self) -> (usize, usize) {
        self.valid.dim()
    }
}

/// The window of one output row: its vertical radius and the half-width of each window
/// row (index dy + ry for dy in −ry..=ry).
#[derive(Clone, Debug, PartialEq)]
pub struct RowWindow {
    /// Row of the centre within the block.
    pub centre: usize,
    pub ry: usize,
    pub widths: Vec<usize>,
    /// Number of cells in the window (valid or not).
    pub cells: u64,
}

/// Window geometry for every output row of a block.
#[derive(Clone, Debug, PartialEq)]
pub struct Layout {
    pub shape: WindowShape,
    pub rows: Vec<RowWindow>,
}

impl Layout {
    /// Windows of radius `r` metres for output rows `halo..halo + out_r` of a block with
    /// per-row cell sizes `sizes`.
    pub fn new(shape: WindowShape, r: f64, sizes: RowSizes, halo: usize, out_r: usize) -> Layout {
        let rows = (0..out_r)
            .map(|i| {
                let centre = halo + i;
                let hy = sizes.hy(centre);
                let ry = radius_cells(r, hy);
                let widths: Vec<usize> = (0..2 * ry + 1)
                    .map(|k| {
                        let dy = k as i64 - ry as i64;
                        match shape {
                            WindowShape::Square => radius_cells(r, sizes.hx(centre)),
                            WindowShape::Disc => {
                                let row = (centre as i64 + dy).max(0) as usize;
                                let dist_y = dy.unsigned_abs() as f64 * hy;
                                let half = (r * r - dist_y * dist_y).max(0.0).sqrt();
                                if dy == 0 {
                                    radius_cells(r, sizes.hx(centre))
                                } else {
                                    radius_cells(half, sizes.hx(row))
                                }
                            }
                        }
                    })
                    .collect();
                let cells = widths.iter().map(|&w| 2 * w as u64 + 1).sum();
                RowWindow {
                    centre,
                    ry,
                    widths,
                    cells,
                }
            })
            .collect();
        Layout { shape, rows }
    }
}

/// Coordinate moments of the valid cells of a window and of channel 0 against them, in
/// cell units: dx = col − centre col (east), dy = row − centre row (south).
#[derive(Clone, Debug, Default, PartialEq)]
pub struct PlaneMoments {
    pub sx: i128,
    pub sy: i128,
    pub sxx: i128,
    pub syy: i128,
    pub sxy: i128,
    pub sxz: i128,
    pub syz: i128,
}

/// Sums over one cell's window.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct CellSums {
    /// Valid cells.
    pub n: i64,
    /// Σ of each value channel (up to [`MAX_CHANNELS`]; unused entries 0).
    pub s: [i128; MAX_CHANNELS],
    /// Σ of channel 0 squared (when asked for).
    pub s2: i128,
    pub plane: Option<PlaneMoments>,
}

/// What to sum besides the count and the channel sums.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct SumOptions {
    pub squares: bool,
    pub plane: bool,
}

/// Prefix sums along one row (index c holds the sum of columns < c).
struct RowPrefix {
    m: Vec<i64>,
    v: Vec<Vec<i64>>,
    v2: Vec<i128>,
    cm: Vec<i128>,
    c2m: Vec<i128>,
    cv: Vec<i128>,
}

fn row_prefix(field: &QuantisedField, row: usize, opt: SumOptions) -> RowPrefix {
    let nc = field.dim().1;
    let k = field.values.len();
    let mut p = RowPrefix {
        m: Vec::with_capacity(nc + 1),
        v: vec![Vec::with_capacity(nc + 1); k],
        v2: Vec::new(),
        cm: Vec::new(),
        c2m: Vec::new(),
        cv: Vec::new(),
    };
    let valid = field.valid.row(row);
    let mut acc = 0i64;
    p.m.push(0);
    for &ok in valid.iter() {
        acc += i64::from(ok);
        p.m.push(acc);
    }
    for (ch, out) in field.values.iter().zip(p.v.iter_mut()) {
        let mut acc = 0i64;
        out.push(0);
        for &v in ch.row(row).iter() {
            acc += v;
            out.push(acc);
        }
    }
    if opt.squares || opt.plane {
        let z = field.values[0].row(row);
        let mut a2 = 0i128;
        p.v2.push(0);
        for &v in z.iter() {
            a2 += i128::from(v) * i128::from(v);
            p.v2.push(a2);
        }
    }
    if opt.plane {
        let z = field.values[0].row(row);
        let (mut a, mut b, mut c) = (0i128, 0i128, 0i128);
        p.cm.push(0);
        p.c2m.push(0);
        p.cv.push(0);
        for (col, (&ok, &v)) in valid.iter().zip(z.iter()).enumerate() {
            let col = col as i128;
            if ok {
                a += col;
                b += col * col;
            }
            c += col * i128::from(v);
            p.cm.push(a);
            p.c2m.push(b);
            p.cv.push(c);
        }
    }
    p
}

/// Horizontal sums of one row for a window of half-width w centred on a column.
#[derive(Clone, Copy, Default)]
struct Segment {
    m: i64,
    v2: i128,
    // Centred on the window's column: Σ dx·m, Σ dx²·m, Σ dx·v.
    xm: i128,
    x2m: i128,
    xv: i128,
}

#[inline]
fn segment(p: &RowPrefix, centre: usize, w: usize, v: &mut [i128], opt: SumOptions) -> Segment {
    let nc = p.m.len() - 1;
    let a = centre.saturating_sub(w);
    let b = (centre + w + 1).min(nc);
    let mut s = Segment {
        m: p.m[b] - p.m[a],
        ..Segment::default()
    };
    for (acc, ch) in v.iter_mut().zip(p.v.iter()) {
        *acc = i128::from(ch[b] - ch[a]);
    }
    if opt.squares || opt.plane {
        s.v2 = p.v2[b] - p.v2[a];
    }
    if opt.plane {
        let c0 = centre as i128;
        let m = i128::from(s.m);
        let cm = p.cm[b] - p.cm[a];
        let c2m = p.c2m[b] - p.c2m[a];
        let cv = p.cv[b] - p.cv[a];
        s.xm = cm - c0 * m;
        s.x2m = c2m - 2 * c0 * cm + c0 * c0 * m;
        s.xv = cv - c0 * v[0];
    }
    s
}

/// A per-cell statistic of window sums: (output row, output col, window cells, sums).
pub type CellStat<'f> = &'f (dyn Fn(usize, usize, u64, &CellSums) -> f64 + Sync);

/// Window sums for every output cell of a block.
pub struct WindowSums<'a> {
    layout: &'a Layout,
    halo: usize,
    out_c: usize,
    opt: SumOptions,
    channels: usize,
    prefixes: Vec<RowPrefix>,
}

/// Columns per parallel task of the square-window sweep.
const SQUARE_CHUNK: usize = 128;

impl<'a> WindowSums<'a> {
    /// Prepares the row prefix sums of `field` for `layout`; `out_c` output columns start
    /// at column `halo`.
    pub fn new(
        field: &QuantisedField,
        layout: &'a Layout,
        halo: usize,
        out_c: usize,
        opt: SumOptions,
    ) -> Self {
        let (nr, _) = field.dim();
        let prefixes: Vec<RowPrefix> = (0..nr)
            .into_par_iter()
            .map(|r| row_prefix(field, r, opt))
            .collect();
        WindowSums {
            layout,
            halo,
            out_c,
            opt,
            channels: field.values.len().min(MAX_CHANNELS),
            prefixes,
        }
    }

    /// Evaluates each statistic in `stats` at every output cell; one array per statistic,
    /// shape (output rows, `out_c`). Parallel over rows (discs) or column strips (squares).
    pub fn map(&self, stats: &[CellStat]) -> Vec<Array2<f64>> {
        let out_r = self.layout.rows.len();
        let k = stats.len();
        let mut buf = Array3::<f64>::zeros((out_r, self.out_c, k));
        match self.layout.shape {
            WindowShape::Disc => {
                buf.axis_iter_mut(Axis(0))
                    .into_par_iter()
                    .enumerate()
                    .for_each(|(i, mut row)| {
                        let win = &self.layout.rows[i];
                        let sums = self.row_disc(win);
                        for (j, cs) in sums.iter().enumerate() {
                            for (f, stat) in stats.iter().enumerate() {
                                row[[j, f]] = stat(i, j, win.cells, cs);
                            }
                        }
                    });
            }
            WindowShape::Square => {
                buf.axis_chunks_iter_mut(Axis(1), SQUARE_CHUNK)
                    .into_par_iter()
                    .enumerate()
                    .for_each(|(chunk, mut part)| {
                        let j0 = chunk * SQUARE_CHUNK;
                        self.sweep_square(j0, part.dim().1, |i, jj, cells, cs| {
                            for (f, stat) in stats.iter().enumerate() {
                                part[[i, jj, f]] = stat(i, j0 + jj, cells, cs);
                            }
                        });
                    });
            }
        }
        (0..k)
            .map(|f| buf.index_axis(Axis(2), f).to_owned())
            .collect()
    }

    /// Sums for every cell of output row `i` (used by tests and small callers).
    pub fn row(&self, i: usize) -> Vec<CellSums> {
        let win = &self.layout.rows[i];
        match self.layout.shape {
            WindowShape::Disc => self.row_disc(win),
            WindowShape::Square => {
                let mut out = self.empty_row();
                self.sweep_square(0, self.out_c, |ii, j, _, cs| {
                    if ii == i {
                        out[j] = cs.clone();
                    }
                });
                out
            }
        }
    }

    fn empty_row(&self) -> Vec<CellSums> {
        vec![
            CellSums {
                n: 0,
                s: [0; MAX_CHANNELS],
                s2: 0,
                plane: self.opt.plane.then(PlaneMoments::default),
            };
            self.out_c
        ]
    }

    fn row_disc(&self, win: &RowWindow) -> Vec<CellSums> {
        let nr = self.prefixes.len() as i64;
        let mut out = self.empty_row();
        let mut v = vec![0i128; self.channels];
        for (k, &w) in win.widths.iter().enumerate() {
            let dy = k as i64 - win.ry as i64;
            let row = win.centre as i64 + dy;
            if row < 0 || row >= nr {
                continue;
            }
            let p = &self.prefixes[row as usize];
            let dyi = i128::from(dy);
            let nc = p.m.len() - 1;
            if !self.opt.plane && self.halo >= w && self.halo + self.out_c + w <= nc {
                // Fast path: the segment never leaves the row, no moments needed.
                let lo = self.halo - w;
                let span = 2 * w + 1;
                for (j, cell) in out.iter_mut().enumerate() {
                    let (a, b) = (lo + j, lo + j + span);
                    cell.n += p.m[b] - p.m[a];
                    for (c, ch) in p.v.iter().enumerate().take(self.channels) {
                        cell.s[c] += i128::from(ch[b] - ch[a]);
                    }
                    if self.opt.squares {
                        cell.s2 += p.v2[b] - p.v2[a];
                    }
                }
                continue;
            }
            for (j, cell) in out.iter_mut().enumerate() {
                let seg = segment(p, self.halo + j, w, &mut v, self.opt);
                cell.n += seg.m;
                for (a, b) in cell.s.iter_mut().zip(v.iter()) {
                    *a += *b;
                }
                cell.s2 += seg.v2;
                if let Some(pl) = cell.plane.as_mut() {
                    let m = i128::from(seg.m);
                    pl.sx += seg.xm;
                    pl.sy += dyi * m;
                    pl.sxx += seg.x2m;
                    pl.syy += dyi * dyi * m;
                    pl.sxy += dyi * seg.xm;
                    pl.sxz += seg.xv;
                    pl.syz += dyi * v[0];
                }
            }
        }
        out
    }

    /// Square windows over output columns j0..j0+width: the window sums slide down the
    /// rows (add the row entering, subtract the row leaving; exact in integers), so the
    /// cost per cell is O(1) whatever the radius. Runs of output rows with the same
    /// horizontal half-width share one sweep.
    fn sweep_square(
        &self,
        j0: usize,
        width: usize,
        mut emit: impl FnMut(usize, usize, u64, &CellSums),
    ) {
        let nr = self.prefixes.len() as i64;
        let ch = self.channels;
        // Accumulators per column: m, m·ρ, m·ρ², v_k.., v0·ρ, v2, xm, xm·ρ, x2m, xv.
        let nt = 3 + ch + 5 + 4;
        let squares = self.opt.squares || self.opt.plane;
        let plane = self.opt.plane;
        let mut acc = vec![0i128; width * nt];
        let mut v = vec![0i128; ch];
        let rows = &self.layout.rows;
        let mut i = 0;
        while i < rows.len() {
            let kx = rows[i].widths[0];
            acc.iter_mut().for_each(|a| *a = 0);
            let (mut top, mut bottom) = (0i64, 0i64); // rows in [top, bottom)
            let add = |acc: &mut [i128], row: i64, sign: i128, v: &mut [i128]| {
                let p = &self.prefixes[row as usize];
                let rho = i128::from(row);
                for jj in 0..width {
                    let s = segment(p, self.halo + j0 + jj, kx, v, self.opt);
                    let a = &mut acc[jj * nt..(jj + 1) * nt];
                    let m = i128::from(s.m);
                    a[0] += sign * m;
                    for c in 0..ch {
                        a[3 + c] += sign * v[c];
                    }
                    if squares {
                        a[4 + ch] += sign * s.v2;
                    }
                    if plane {
                        a[1] += sign * m * rho;
                        a[2] += sign * m * rho * rho;
                        a[3 + ch] += sign * v[0] * rho;
                        a[5 + ch] += sign * s.xm;
                        a[6 + ch] += sign * s.xm * rho;
                        a[7 + ch] += sign * s.x2m;
                        a[8 + ch] += sign * s.xv;
                    }
                }
            };
            while i < rows.len() && rows[i].widths[0] == kx {
                let win = &rows[i];
                let want_top = (win.centre as i64 - win.ry as i64).clamp(0, nr);
                let want_bottom = (win.centre as i64 + win.ry as i64 + 1).clamp(0, nr);
                if want_top >= bottom || want_bottom <= top {
                    acc.iter_mut().for_each(|a| *a = 0);
                    top = want_top;
                    bottom = want_top;
                }
                while bottom < want_bottom {
                    add(&mut acc, bottom, 1, &mut v);
                    bottom += 1;
                }
                while bottom > want_bottom {
                    bottom -= 1;
                    add(&mut acc, bottom, -1, &mut v);
                }
                while top > want_top {
                    top -= 1;
                    add(&mut acc, top, 1, &mut v);
                }
                while top < want_top {
                    add(&mut acc, top, -1, &mut v);
                    top += 1;
                }
                let r0 = win.centre as i128;
                for jj in 0..width {
                    let a = &acc[jj * nt..(jj + 1) * nt];
                    let (m, mr, mr2) = (a[0], a[1], a[2]);
                    let mut s = [0i128; MAX_CHANNELS];
                    s[..ch].copy_from_slice(&a[3..3 + ch]);
                    let plane = self.opt.plane.then(|| PlaneMoments {
                        sx: a[5 + ch],
                        sy: mr - r0 * m,
                        sxx: a[7 + ch],
                        syy: mr2 - 2 * r0 * mr + r0 * r0 * m,
                        sxy: a[6 + ch] - r0 * a[5 + ch],
                        sxz: a[8 + ch],
                        syz: a[3 + ch] - r0 * s[0],
                    });
                    let cs = CellSums {
                        n: m as i64,
                        s,
                        s2: a[4 + ch],
                        plane,
                    };
                    emit(i, jj, win.cells, &cs);
                }
                i += 1;
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::grid::CellSizes;
    use crate::terrain::test_support::SplitMix64;

    /// Naive reference: enumerate the window cells by their distance (disc) or box.
    fn naive(
        field: &QuantisedField,
        shape: WindowShape,
        r: f64,
        sizes: RowSizes,
        r0: usize,
        c0: usize,
    ) -> (u64, CellSums) {
        let (nr, nc) = field.dim();
        let hy = sizes.hy(r0);
        let mut cells = 0u64;
        let mut out = CellSums {
            n: 0,
            s: [0; MAX_CHANNELS],
            s2: 0,
            plane: Some(PlaneMoments::default()),
        };
        let ry = radius_cells(r, hy) as i64;
        for dy in -ry..=ry {
            let row = r0 as i64 + dy;
            let hx = sizes.hx(row.max(0) as usize);
            let kx = radius_cells(r, sizes.hx(r0)) as i64;
            let reach = (r / hx).ceil() as i64 + 1;
            for dx in -reach..=reach {
                let inside = match shape {
                    WindowShape::Square => dx.abs() <= kx,
                    WindowShape::Disc => {
                        if dy == 0 {
                            dx.abs() <= kx
                        } else {
                            let d2 = (dx as f64 * hx).powi(2) + (dy as f64 * hy).powi(2);
                            d2.sqrt() <= r * (1.0 + 1e-9) + 1e-12
                        }
                    }
                };
                if !inside {
                    continue;
                }
                cells += 1;
                let col = c0 as i64 + dx;
                if row < 0 || row >= nr as i64 || col < 0 || col >= nc as i64 {
                    continue;
                }
                let (ru, cu) = (row as usize, col as usize);
                if !field.valid[[ru, cu]] {
                    continue;
                }
                let v = i128::from(field.values[0][[ru, cu]]);
                let (x, y) = (i128::from(dx), i128::from(dy));
                out.n += 1;
                out.s[0] += v;
                out.s2 += v * v;
                let p = out.plane.as_mut().unwrap();
                p.sx += x;
                p.sy += y;
                p.sxx += x * x;
                p.syy += y * y;
                p.sxy += x * y;
                p.sxz += x * v;
                p.syz += y * v;
            }
        }
        (cells, out)
    }

    #[test]
    fn quantisation_bounds() {
        // 2⁻²⁰ m quantum: 1 m is 1048576 units exactly; rounding error ≤ 2⁻²¹ m.
        assert_eq!(quantise(1.0), Some(1 << 20));
        assert_eq!(quantise(-0.5), Some(-(1 << 19)));
        let v = 0.123_456_789;
        let q = quantise(v).unwrap() as f64 * Z_QUANTUM_M;
        assert!((q - v).abs() <= Z_QUANTUM_M / 2.0);
        assert_eq!(quantise(70_000.0), None);
        assert_eq!(quantise(f64::NAN), None);
    }

    #[test]
    fn fast_sums_match_naive_enumeration() {
        // Fast paths against a naive reference over many small random inputs, radii,
        // shapes and unequal, row-varying cell sizes.
        let mut rng = SplitMix64::new(42);
        for case in 0..40 {
            let nr = 6 + (rng.next_f64() * 14.0) as usize;
            let nc = 6 + (rng.next_f64() * 14.0) as usize;
            let zs = Array2::from_shape_fn((nr, nc), |_| {
                if rng.next_f64() < 0.2 {
                    f64::NAN
                } else {
                    rng.next_f64() * 50.0 - 20.0
                }
            });
            let field = QuantisedField::new(&zs, 3.0);
            let hx0 = 0.5 + rng.next_f64();
            let cells = CellSizes {
                hx: (0..nr).map(|i| hx0 * (1.0 + 0.02 * i as f64)).collect(),
                hy: vec![0.5 + rng.next_f64(); nr],
            };
            let sizes = RowSizes::new(&cells);
            let r = 0.3 + rng.next_f64() * 4.0;
            let halo = 2.min(nr / 3);
            let out_r = nr - 2 * halo;
            let out_c = nc - 2 * halo;
            for shape in [WindowShape::Disc, WindowShape::Square] {
                let layout = Layout::new(shape, r, sizes, halo, out_r);
                let opt = SumOptions {
                    squares: true,
                    plane: true,
                };
                let ws = WindowSums::new(&field, &layout, halo, out_c, opt);
                for i in 0..out_r {
                    let row = ws.row(i);
                    for (j, got) in row.iter().enumerate() {
                        let (cells_n, want) = naive(&field, shape, r, sizes, halo + i, halo + j);
                        assert_eq!(layout.rows[i].cells, cells_n, "case {case} {shape:?} cells");
                        assert_eq!(got, &want, "case {case} {shape:?} at ({i}, {j})");
                    }
                }
            }
        }
    }

    #[test]
    fn interior_fast_path_matches_naive_enumeration() {
        // Windows that stay inside the block take the interior fast path (no moments).
        let mut rng = SplitMix64::new(77);
        let zs = Array2::from_shape_fn((24, 26), |_| {
            if rng.next_f64() < 0.1 {
                f64::NAN
            } else {
                rng.next_f64() * 30.0
            }
        });
        let field = QuantisedField::new(&zs, 10.0);
        let cells = CellSizes::uniform(1.0, 0.8, 24);
        let sizes = RowSizes::new(&cells);
        for r in [1.0, 2.5, 4.2] {
            for shape in [WindowShape::Disc, WindowShape::Square] {
                let layout = Layout::new(shape, r, sizes, 6, 12);
                let opt = SumOptions {
                    squares: true,
                    plane: false,
                };
                let ws = WindowSums::new(&field, &layout, 6, 14, opt);
                for i in 0..12 {
                    for (j, got) in ws.row(i).iter().enumerate() {
                        let (_, want) = naive(&field, shape, r, sizes, 6 + i, 6 + j);
                        assert_eq!((got.n, got.s[0], got.s2), (want.n, want.s[0], want.s2));
                    }
                }
            }
        }
    }
}

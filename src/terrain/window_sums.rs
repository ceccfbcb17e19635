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
//!   treated as nodata (no terrain spans that range above a sensible reference), so
//!   |zq| ≤ 2³⁶ ([`MAX_ABS_VALUE`], checked for every channel).
//! - Row prefix sums (index c holds the sum over columns < c) of the mask and of each
//!   channel are i64: rows have at most 2²⁶ cells ([`MAX_ROW_CELLS`]), so |prefix| ≤
//!   2²⁶·2³⁶ = 2⁶². The prefix P of zq² (P ≤ 2²⁶·2⁷² = 2⁹⁸) is kept as two i64 limbs,
//!   P = hi·2³⁶ + lo with 0 ≤ lo < 2³⁶ and 0 ≤ hi ≤ 2⁶² ([`LIMB_BITS`]).
//! - Window sums ([`WindowSums::map`]) are accumulated in i64 whenever every window has at
//!   most 2²⁶ cells ([`MAX_I64_WINDOW_CELLS`]; a 0.05 m grid at r = 25 m has 2²⁰). Each
//!   accumulator is at every step the sum over a set of whole row segments lying inside one
//!   window, so with C ≤ 2²⁶ cells and R ≤ C rows in that set: |count| ≤ 2²⁶,
//!   |Σzq| ≤ C·2³⁶ ≤ 2⁶²; the hi-limb differences of one segment are ≥ 0 and at most
//!   (its Σzq²)/2³⁶ + 1, so 0 ≤ Σhi ≤ C·2⁷²/2³⁶ + R ≤ 2⁶² + 2²⁶; each lo-limb difference
//!   lies in (−2³⁶, 2³⁶), so |Σlo| < R·2³⁶ ≤ 2⁶². All below 2⁶³: no i64 overflows.
//!   Σzq² = Σhi·2³⁶ + Σlo is formed in i128 once per cell. Larger windows, and plane
//!   moments (detrended roughness), take a general path that accumulates in i128.
//!
//! Integer sums are exact, so any block layout, thread count or summation order gives
//! identical sums; every statistic is then a fixed f64 formula of exact integers.
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
//! memory); discs O(ry) = O(r/h): one row-prefix difference per window row, done for a
//! whole output row at a time as i64 slice arithmetic. Row prefixes and quantisation cost
//! O(1) per *input* cell, halo included, so a block whose halo is large next to its
//! interior pays for the halo too. Memory: 32 bytes per input cell for the prefixes of
//! count, Σz and Σz² (more with plane moments).

use ndarray::{Array2, ArrayViewMut2, Axis, Zip};
use rayon::prelude::*;

use super::{radius_cells, RowSizes, WindowShape};

/// Elevation quantum: 2⁻²⁰ m.
pub const Z_QUANTUM_M: f64 = 1.0 / (1u64 << 20) as f64;
/// Largest |z·z_factor − reference_z| kept, metres (2¹⁶).
pub const Z_RANGE_M: f64 = 65_536.0;
/// Largest |value| of a channel of a [`QuantisedField`] (2³⁶; [`quantise`] stays within).
pub const MAX_ABS_VALUE: i64 = 1 << 36;
/// Most cells in a block row (2²⁶), so that i64 row prefixes cannot overflow.
pub const MAX_ROW_CELLS: usize = 1 << 26;
/// Most cells in a window (2²⁶) for window sums accumulated in i64.
pub const MAX_I64_WINDOW_CELLS: u64 = 1 << 26;
/// Bits of the low limb of the prefixes of squared values.
pub const LIMB_BITS: u32 = 36;
const LIMB_MASK: i128 = (1 << LIMB_BITS) - 1;

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
/// invalid, |value| ≤ [`MAX_ABS_VALUE`]).
pub struct QuantisedField {
    pub valid: Array2<bool>,
    pub values: Vec<Array2<i64>>,
}

impl QuantisedField {
    /// Elevations `zs` (metres, NaN = nodata) quantised relative to `reference_z`.
    pub fn new(zs: &Array2<f64>, reference_z: f64) -> QuantisedField {
        let mut valid = Array2::from_elem(zs.dim(), false);
        let mut values = Array2::<i64>::zeros(zs.dim());
        Zip::from(&mut valid)
            .and(&mut values)
            .and(zs)
            .par_for_each(|ok, q, &z| {
                if let Some(v) = quantise(z - reference_z) {
                    *ok = true;
                    *q = v;
                }
            });
        QuantisedField {
            valid,
            values: vec![values],
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
    /// Valid cells.
    m: Vec<i64>,
    /// Each channel.
    v: Vec<Vec<i64>>,
    /// Channel 0 squared, as hi·2^LIMB_BITS + lo with 0 ≤ lo < 2^LIMB_BITS.
    v2_hi: Vec<i64>,
    v2_lo: Vec<i64>,
    /// Plane moments: Σ col over valid cells, Σ col², Σ col·v.
    cm: Vec<i128>,
    c2m: Vec<i128>,
    cv: Vec<i128>,
}

impl RowPrefix {
    /// Σ of channel 0 squared over columns a..b.
    #[inline]
    fn v2(&self, a: usize, b: usize) -> i128 {
        join_limbs(self.v2_hi[b] - self.v2_hi[a], self.v2_lo[b] - self.v2_lo[a])
    }
}

/// hi·2^LIMB_BITS + lo in i128.
#[inline]
fn join_limbs(hi: i64, lo: i64) -> i128 {
    (i128::from(hi) << LIMB_BITS) + i128::from(lo)
}

fn row_prefix(field: &QuantisedField, row: usize, opt: SumOptions) -> RowPrefix {
    let nc = field.dim().1;
    let k = field.values.len();
    let mut p = RowPrefix {
        m: Vec::with_capacity(nc + 1),
        v: vec![Vec::with_capacity(nc + 1); k],
        v2_hi: Vec::new(),
        v2_lo: Vec::new(),
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
        let mut big = 0i64;
        out.push(0);
        for &v in ch.row(row).iter() {
            big = big.max(v.abs());
            acc += v;
            out.push(acc);
        }
        assert!(
            big <= MAX_ABS_VALUE,
            "window sums: a channel value exceeds 2^36 in magnitude"
        );
    }
    if opt.squares || opt.plane {
        let z = field.values[0].row(row);
        let mut a2 = 0i128;
        p.v2_hi.reserve(nc + 1);
        p.v2_lo.reserve(nc + 1);
        p.v2_hi.push(0);
        p.v2_lo.push(0);
        for &v in z.iter() {
            a2 += i128::from(v) * i128::from(v);
            p.v2_hi.push((a2 >> LIMB_BITS) as i64);
            p.v2_lo.push((a2 & LIMB_MASK) as i64);
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
        s.v2 = p.v2(a, b);
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

/// Adds (or with `NEG`, subtracts) to `acc[j]` the sum over columns
/// `c0 + j − w ..= c0 + j + w` (clipped to the row) from the row prefix `p`: one prefix
/// difference per cell, as slice arithmetic where the segments stay inside the row.
#[inline]
fn add_segments<const NEG: bool>(acc: &mut [i64], p: &[i64], c0: usize, w: usize) {
    let nc = p.len() - 1;
    let len = acc.len();
    // Columns j with c0 + j − w ≥ 0 and c0 + j + w + 1 ≤ nc: [j_lo, j_hi).
    let j_hi = nc.saturating_sub(c0 + w).min(len);
    let j_lo = w.saturating_sub(c0).min(j_hi);
    let edge = |acc: &mut [i64], j: usize| {
        let a = (c0 + j).saturating_sub(w).min(nc);
        let b = (c0 + j + w + 1).min(nc);
        let d = p[b] - p[a];
        if NEG {
            acc[j] -= d;
        } else {
            acc[j] += d;
        }
    };
    for j in (0..j_lo).chain(j_hi..len) {
        edge(acc, j);
    }
    if j_lo < j_hi {
        let a0 = c0 + j_lo - w;
        let span = 2 * w + 1;
        let n = j_hi - j_lo;
        let left = &p[a0..a0 + n];
        let right = &p[a0 + span..a0 + span + n];
        for ((x, &l), &r) in acc[j_lo..j_hi].iter_mut().zip(left).zip(right) {
            if NEG {
                *x -= r - l;
            } else {
                *x += r - l;
            }
        }
    }
}

/// Exact window sums of a run of adjacent output cells of one row, accumulated in i64
/// (structure of arrays; see the module doc for the bounds): valid count, each channel,
/// and channel 0 squared as two limbs.
struct Limbs {
    n: Vec<i64>,
    s: Vec<Vec<i64>>,
    s2_hi: Vec<i64>,
    s2_lo: Vec<i64>,
}

impl Limbs {
    fn new(len: usize, channels: usize, squares: bool) -> Limbs {
        let sq = if squares { len } else { 0 };
        Limbs {
            n: vec![0; len],
            s: vec![vec![0; len]; channels],
            s2_hi: vec![0; sq],
            s2_lo: vec![0; sq],
        }
    }

    fn clear(&mut self) {
        self.n.fill(0);
        self.s.iter_mut().for_each(|a| a.fill(0));
        self.s2_hi.fill(0);
        self.s2_lo.fill(0);
    }

    /// Adds (or with `NEG`, subtracts) the row segments of half-width `w` of row prefix
    /// `p`, the run's first cell at column `c0`.
    fn add_row<const NEG: bool>(&mut self, p: &RowPrefix, c0: usize, w: usize) {
        add_segments::<NEG>(&mut self.n, &p.m, c0, w);
        for (acc, ch) in self.s.iter_mut().zip(&p.v) {
            add_segments::<NEG>(acc, ch, c0, w);
        }
        if !self.s2_hi.is_empty() {
            add_segments::<NEG>(&mut self.s2_hi, &p.v2_hi, c0, w);
            add_segments::<NEG>(&mut self.s2_lo, &p.v2_lo, c0, w);
        }
    }

    /// The sums of cell `j` of the run.
    #[inline]
    fn cell(&self, j: usize) -> CellSums {
        let mut s = [0i128; MAX_CHANNELS];
        for (out, ch) in s.iter_mut().zip(&self.s) {
            *out = i128::from(ch[j]);
        }
        let s2 = if self.s2_hi.is_empty() {
            0
        } else {
            join_limbs(self.s2_hi[j], self.s2_lo[j])
        };
        CellSums {
            n: self.n[j],
            s,
            s2,
            plane: None,
        }
    }
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
    /// Whether sums accumulate in i64 (no plane moments, every window ≤ 2²⁶ cells).
    limbs: bool,
    prefixes: Vec<RowPrefix>,
}

/// Columns per parallel task of the square-window sweep.
const SQUARE_CHUNK: usize = 128;

impl<'a> WindowSums<'a> {
    /// [`WindowSums::new`] for callers outside the kernels, whose fields were not built by
    /// [`QuantisedField::new`]: a row longer than [`MAX_ROW_CELLS`], more than
    /// [`MAX_CHANNELS`] channels or a value past [`MAX_ABS_VALUE`] is an error, not a panic.
    pub fn try_new(
        field: &QuantisedField,
        layout: &'a Layout,
        halo: usize,
        out_c: usize,
        opt: SumOptions,
    ) -> crate::error::Result<Self> {
        let limit = |what: String| {
            crate::error::Error::usage(format!("window sums: {what}"))
                .with_fix("split the block, or quantise values with QuantisedField::new")
        };
        let nc = field.dim().1;
        if nc > MAX_ROW_CELLS {
            return Err(limit(format!(
                "block rows of {nc} cells are longer than 2^26"
            )));
        }
        if field.values.len() > MAX_CHANNELS {
            let n = field.values.len();
            return Err(limit(format!(
                "{n} value channels, more than {MAX_CHANNELS}"
            )));
        }
        if field
            .values
            .iter()
            .flatten()
            .any(|v| v.unsigned_abs() > MAX_ABS_VALUE as u64)
        {
            return Err(limit("a channel value exceeds 2^36 in magnitude".into()));
        }
        Ok(Self::new(field, layout, halo, out_c, opt))
    }

    /// Prepares the row prefix sums of `field` for `layout`; `out_c` output columns start
    /// at column `halo`. Panics when a row is longer than [`MAX_ROW_CELLS`], there are more
    /// than [`MAX_CHANNELS`] channels or a value exceeds [`MAX_ABS_VALUE`] in magnitude.
    pub fn new(
        field: &QuantisedField,
        layout: &'a Layout,
        halo: usize,
        out_c: usize,
        opt: SumOptions,
    ) -> Self {
        let (nr, nc) = field.dim();
        assert!(
            nc <= MAX_ROW_CELLS,
            "window sums: block rows longer than 2^26"
        );
        assert!(
            field.values.len() <= MAX_CHANNELS,
            "window sums: too many channels"
        );
        let prefixes: Vec<RowPrefix> = (0..nr)
            .into_par_iter()
            .map(|r| row_prefix(field, r, opt))
            .collect();
        let limbs = !opt.plane && layout.rows.iter().all(|w| w.cells <= MAX_I64_WINDOW_CELLS);
        WindowSums {
            layout,
            halo,
            out_c,
            opt,
            channels: field.values.len(),
            limbs,
            prefixes,
        }
    }

    /// Evaluates each statistic in `stats` at every output cell; one array per statistic,
    /// shape (output rows, `out_c`), each written in place. Parallel over rows (discs) or
    /// column strips (squares).
    pub fn map(&self, stats: &[CellStat]) -> Vec<Array2<f64>> {
        let out_r = self.layout.rows.len();
        let out_c = self.out_c;
        let mut outs: Vec<Array2<f64>> = stats
            .iter()
            .map(|_| Array2::zeros((out_r, out_c)))
            .collect();
        if out_r == 0 || out_c == 0 || stats.is_empty() {
            return outs;
        }
        match self.layout.shape {
            WindowShape::Disc => {
                // Row i of every output array, grouped by i.
                let mut rows: Vec<Vec<&mut [f64]>> = (0..out_r)
                    .map(|_| Vec::with_capacity(stats.len()))
                    .collect();
                for o in outs.iter_mut() {
                    let flat = o.as_slice_mut().expect("standard layout");
                    for (dst, r) in rows.iter_mut().zip(flat.chunks_mut(out_c)) {
                        dst.push(r);
                    }
                }
                rows.into_par_iter().enumerate().for_each_init(
                    || self.new_limbs(out_c),
                    |acc, (i, mut dst)| {
                        let win = &self.layout.rows[i];
                        if self.limbs {
                            self.disc_limbs(win, acc);
                            for j in 0..out_c {
                                let cs = acc.cell(j);
                                for (d, stat) in dst.iter_mut().zip(stats) {
                                    d[j] = stat(i, j, win.cells, &cs);
                                }
                            }
                        } else {
                            for (j, cs) in self.row_disc(win).iter().enumerate() {
                                for (d, stat) in dst.iter_mut().zip(stats) {
                                    d[j] = stat(i, j, win.cells, cs);
                                }
                            }
                        }
                    },
                );
            }
            WindowShape::Square => {
                // Column strip c of every output array, grouped by c.
                let mut strips: Vec<Vec<ArrayViewMut2<f64>>> = Vec::new();
                for o in outs.iter_mut() {
                    for (c, part) in o.axis_chunks_iter_mut(Axis(1), SQUARE_CHUNK).enumerate() {
                        if strips.len() <= c {
                            strips.push(Vec::with_capacity(stats.len()));
                        }
                        strips[c].push(part);
                    }
                }
                strips
                    .into_par_iter()
                    .enumerate()
                    .for_each(|(chunk, mut parts)| {
                        let j0 = chunk * SQUARE_CHUNK;
                        let width = parts[0].ncols();
                        if self.limbs {
                            self.sweep_square_limbs(j0, width, |i, cells, acc| {
                                for jj in 0..width {
                                    let cs = acc.cell(jj);
                                    for (part, stat) in parts.iter_mut().zip(stats) {
                                        part[[i, jj]] = stat(i, j0 + jj, cells, &cs);
                                    }
                                }
                            });
                        } else {
                            self.sweep_square(j0, width, |i, jj, cells, cs| {
                                for (part, stat) in parts.iter_mut().zip(stats) {
                                    part[[i, jj]] = stat(i, j0 + jj, cells, cs);
                                }
                            });
                        }
                    });
            }
        }
        outs
    }

    /// Sums for every cell of output row `i` (used by tests and small callers).
    pub fn row(&self, i: usize) -> Vec<CellSums> {
        let win = &self.layout.rows[i];
        match (self.layout.shape, self.limbs) {
            (WindowShape::Disc, true) => {
                let mut acc = self.new_limbs(self.out_c);
                self.disc_limbs(win, &mut acc);
                (0..self.out_c).map(|j| acc.cell(j)).collect()
            }
            (WindowShape::Disc, false) => self.row_disc(win),
            (WindowShape::Square, true) => {
                let mut out = Vec::new();
                self.sweep_square_limbs(0, self.out_c, |ii, _, acc| {
                    if ii == i {
                        out = (0..self.out_c).map(|j| acc.cell(j)).collect();
                    }
                });
                out
            }
            (WindowShape::Square, false) => {
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

    fn new_limbs(&self, len: usize) -> Limbs {
        Limbs::new(len, self.channels, self.opt.squares)
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

    /// Disc sums of one output row in i64: every window row's segments added to the whole
    /// row of accumulators at once.
    fn disc_limbs(&self, win: &RowWindow, acc: &mut Limbs) {
        acc.clear();
        let nr = self.prefixes.len() as i64;
        for (k, &w) in win.widths.iter().enumerate() {
            let row = win.centre as i64 + k as i64 - win.ry as i64;
            if (0..nr).contains(&row) {
                acc.add_row::<false>(&self.prefixes[row as usize], self.halo, w);
            }
        }
    }

    /// Disc sums of one output row in i128, with plane moments when asked for.
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

    /// Square windows over output columns j0..j0+width, summed in i64: the column
    /// accumulators slide down the rows, first dropping the rows that leave the window,
    /// then adding the rows that enter it, so they always hold whole rows of one window
    /// (the bound of the module doc). Runs of output rows with the same horizontal
    /// half-width share one sweep. `emit(i, window cells, sums)` once per output row.
    fn sweep_square_limbs(
        &self,
        j0: usize,
        width: usize,
        mut emit: impl FnMut(usize, u64, &Limbs),
    ) {
        let nr = self.prefixes.len() as i64;
        let c0 = self.halo + j0;
        let mut acc = self.new_limbs(width);
        let rows = &self.layout.rows;
        let mut i = 0;
        while i < rows.len() {
            let kx = rows[i].widths[0];
            acc.clear();
            let (mut top, mut bottom) = (0i64, 0i64); // rows in [top, bottom)
            while i < rows.len() && rows[i].widths[0] == kx {
                let win = &rows[i];
                let want_top = (win.centre as i64 - win.ry as i64).clamp(0, nr);
                let want_bottom = (win.centre as i64 + win.ry as i64 + 1).clamp(0, nr);
                if want_top >= bottom || want_bottom <= top {
                    acc.clear();
                    top = want_top;
                    bottom = want_top;
                }
                while top < want_top {
                    acc.add_row::<true>(&self.prefixes[top as usize], c0, kx);
                    top += 1;
                }
                while bottom > want_bottom {
                    bottom -= 1;
                    acc.add_row::<true>(&self.prefixes[bottom as usize], c0, kx);
                }
                while top > want_top {
                    top -= 1;
                    acc.add_row::<false>(&self.prefixes[top as usize], c0, kx);
                }
                while bottom < want_bottom {
                    acc.add_row::<false>(&self.prefixes[bottom as usize], c0, kx);
                    bottom += 1;
                }
                emit(i, win.cells, &acc);
                i += 1;
            }
        }
    }

    /// Square windows over output columns j0..j0+width, summed in i128 (plane moments or
    /// windows over 2²⁶ cells): the window sums slide down the
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
            // Squares span ±kx of the centre row whatever this row's hx.
            let reach = ((r / hx).ceil() as i64 + 1).max(kx);
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
                let v = field
                    .values
                    .first()
                    .map_or(0, |ch| i128::from(ch[[ru, cu]]));
                let (x, y) = (i128::from(dx), i128::from(dy));
                out.n += 1;
                out.s[0] += v;
                for (c, ch) in field.values.iter().enumerate().skip(1) {
                    out.s[c] += i128::from(ch[[ru, cu]]);
                }
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

    /// A random field of `channels` channels: values uniform in ±`amp` quanta (channel 0
    /// near ±`amp` with probability 1/2 when `edge`), invalid with probability `holes`.
    fn random_field(
        rng: &mut SplitMix64,
        nr: usize,
        nc: usize,
        channels: usize,
        amp: i64,
        holes: f64,
        edge: bool,
    ) -> QuantisedField {
        let valid = Array2::from_shape_fn((nr, nc), |_| rng.next_f64() >= holes);
        let values = (0..channels)
            .map(|c| {
                Array2::from_shape_fn((nr, nc), |(i, j)| {
                    if !valid[[i, j]] {
                        return 0;
                    }
                    let sign = if rng.next_f64() < 0.5 { -1 } else { 1 };
                    let mag = if edge && c == 0 && rng.next_f64() < 0.5 {
                        amp - rng.below(1000) as i64
                    } else {
                        rng.below(amp as u64 + 1) as i64
                    };
                    sign * mag
                })
            })
            .collect();
        QuantisedField { valid, values }
    }

    /// Every output cell (`out_c` = columns − 2·halo) of the window sums (both the i64 path and, forced, the i128 path) against
    /// the naive enumeration; `plane` compares the moments too.
    fn check_against_naive(
        field: &QuantisedField,
        layout: &Layout,
        r: f64,
        sizes: RowSizes,
        halo: usize,
        opt: SumOptions,
        label: &str,
    ) {
        let out_c = field.dim().1 - 2 * halo;
        let mut ws = WindowSums::new(field, layout, halo, out_c, opt);
        assert_eq!(ws.limbs, !opt.plane, "{label}: path choice");
        for limbs in [ws.limbs, false] {
            ws.limbs = limbs;
            for i in 0..layout.rows.len() {
                for (j, got) in ws.row(i).iter().enumerate() {
                    let (cells, mut want) =
                        naive(field, layout.shape, r, sizes, halo + i, halo + j);
                    assert_eq!(layout.rows[i].cells, cells, "{label}: window cells");
                    if !opt.squares && !opt.plane {
                        want.s2 = 0;
                    }
                    if !opt.plane {
                        want.plane = None;
                    }
                    assert_eq!(got, &want, "{label} limbs={limbs} at ({i}, {j})");
                }
            }
        }
    }

    #[test]
    fn limb_sums_match_naive_enumeration() {
        // Reference: the naive enumeration of each window's cells. Random fields with
        // holes and up to three channels (as VRM uses), discs and squares, radii reaching
        // past the block (so segments leave the row), halos smaller than the radius, and
        // per-row east-west cell sizes (geographic grids).
        let mut rng = SplitMix64::new(314);
        for case in 0..30 {
            let nr = 5 + rng.below(16) as usize;
            let nc = 5 + rng.below(16) as usize;
            let channels = rng.below(4) as usize;
            let field = random_field(&mut rng, nr, nc, channels, 1 << 30, 0.25, false);
            let hx0 = 0.4 + rng.next_f64();
            let cells = CellSizes {
                hx: (0..nr).map(|i| hx0 * (1.0 + 0.05 * i as f64)).collect(),
                hy: vec![0.4 + rng.next_f64(); nr],
            };
            let sizes = RowSizes::new(&cells);
            let r = 0.2 + rng.next_f64() * 6.0;
            let halo = rng.below(1 + nr.min(nc) as u64 / 3) as usize;
            let out_r = nr - 2 * halo;
            let squares = channels > 0 && rng.next_f64() < 0.7;
            let opt = SumOptions {
                squares,
                plane: false,
            };
            for shape in [WindowShape::Disc, WindowShape::Square] {
                let layout = Layout::new(shape, r, sizes, halo, out_r);
                let label = format!("case {case} {shape:?} r={r:.2} halo={halo} ch={channels}");
                check_against_naive(&field, &layout, r, sizes, halo, opt, &label);
            }
        }
    }

    #[test]
    fn limb_sums_near_quantisation_limits_match_naive() {
        // Values within 1000 quanta of ±2³⁶ (|z − reference| just under 65 536 m), where
        // zq² ≈ 2⁷² and the prefixes of squares need both limbs; windows up to 25 x 25
        // cells. Reference: the naive enumeration in i128. Plane moments (the i128 path)
        // are checked on the same fields.
        let mut rng = SplitMix64::new(2718);
        for case in 0..8 {
            let (nr, nc) = (30, 34);
            let field = random_field(&mut rng, nr, nc, 1, MAX_ABS_VALUE, 0.1, true);
            let cells = CellSizes {
                hx: (0..nr).map(|i| 1.0 - 0.01 * i as f64).collect(),
                hy: vec![1.0; nr],
            };
            let sizes = RowSizes::new(&cells);
            let r = [3.0, 12.5][case % 2];
            let halo = 4;
            for shape in [WindowShape::Disc, WindowShape::Square] {
                let layout = Layout::new(shape, r, sizes, halo, nr - 2 * halo);
                for plane in [false, true] {
                    let opt = SumOptions {
                        squares: true,
                        plane,
                    };
                    let label = format!("case {case} {shape:?} plane={plane}");
                    check_against_naive(&field, &layout, r, sizes, halo, opt, &label);
                }
            }
        }
        // The extreme prefix: a row of 64 cells of 2³⁶ has Σzq² = 2⁷⁸ (closed form), which
        // splits into hi = 2⁴², lo = 0.
        let valid = Array2::from_elem((1, 64), true);
        let field = QuantisedField {
            valid,
            values: vec![Array2::from_elem((1, 64), MAX_ABS_VALUE)],
        };
        let opt = SumOptions {
            squares: true,
            plane: false,
        };
        let p = row_prefix(&field, 0, opt);
        assert_eq!((p.v2_hi[64], p.v2_lo[64]), (1 << 42, 0));
        assert_eq!(p.v2(0, 64), 1i128 << 78);
    }

    #[test]
    fn invariants_are_errors_through_try_new() {
        let mut rng = SplitMix64::new(9);
        let mut field = random_field(&mut rng, 5, 6, 1, 1 << 20, 0.2, false);
        let cells = CellSizes::uniform(1.0, 1.0, 5);
        let layout = Layout::new(WindowShape::Square, 1.0, RowSizes::new(&cells), 1, 3);
        let opt = SumOptions {
            squares: false,
            plane: false,
        };
        assert!(WindowSums::try_new(&field, &layout, 1, 4, opt).is_ok());
        field.values[0][[2, 2]] = MAX_ABS_VALUE + 1;
        let e = WindowSums::try_new(&field, &layout, 1, 4, opt)
            .err()
            .unwrap();
        assert!(e.to_string().contains("exceeds 2^36"), "{e}");
        field.values[0][[2, 2]] = i64::MIN;
        assert!(WindowSums::try_new(&field, &layout, 1, 4, opt).is_err());
        field.values[0][[2, 2]] = 0;
        field.values = vec![field.values[0].clone(); MAX_CHANNELS + 1];
        let e = WindowSums::try_new(&field, &layout, 1, 4, opt)
            .err()
            .unwrap();
        assert!(e.to_string().contains("channels"), "{e}");
    }

    #[test]
    fn oversized_windows_take_the_i128_path() {
        // A 500 m radius at 0.1 m cells gives windows of about 7.9e7 (disc) and 1e8
        // (square) cells, over the 2²⁶ limit of i64 accumulation. Every window covers the
        // whole 9 x 11 block, so the reference is the sum over the whole block (naive).
        let mut rng = SplitMix64::new(5);
        let field = random_field(&mut rng, 9, 11, 2, 1 << 36, 0.2, true);
        let cells = CellSizes::uniform(0.1, 0.1, 9);
        let sizes = RowSizes::new(&cells);
        let mut want = CellSums::default();
        for ((i, j), &ok) in field.valid.indexed_iter() {
            if ok {
                let v = i128::from(field.values[0][[i, j]]);
                want.n += 1;
                want.s[0] += v;
                want.s[1] += i128::from(field.values[1][[i, j]]);
                want.s2 += v * v;
            }
        }
        let opt = SumOptions {
            squares: true,
            plane: false,
        };
        for shape in [WindowShape::Disc, WindowShape::Square] {
            let layout = Layout::new(shape, 500.0, sizes, 2, 5);
            assert!(layout.rows[0].cells > MAX_I64_WINDOW_CELLS);
            let ws = WindowSums::new(&field, &layout, 2, 7, opt);
            assert!(!ws.limbs, "{shape:?} must not accumulate in i64");
            for i in 0..5 {
                for got in ws.row(i) {
                    assert_eq!(got, want, "{shape:?} row {i}");
                }
            }
        }
    }

    #[test]
    fn map_writes_each_statistic_at_its_cell() {
        // Three statistics over 300 output columns (three column strips for squares)
        // against the naive enumeration: the count, the channel sum and the cell's own
        // position, for both shapes and both paths.
        let mut rng = SplitMix64::new(11);
        let (nr, nc, halo) = (14, 306, 3);
        let field = random_field(&mut rng, nr, nc, 1, 1 << 20, 0.2, false);
        let cells = CellSizes::uniform(1.0, 1.0, nr);
        let sizes = RowSizes::new(&cells);
        let opt = SumOptions {
            squares: true,
            plane: false,
        };
        let count = |_: usize, _: usize, _: u64, s: &CellSums| s.n as f64;
        let total = |_: usize, _: usize, _: u64, s: &CellSums| (s.s[0] + s.s2) as f64;
        let place =
            |i: usize, j: usize, c: u64, _: &CellSums| (i * 1000 + j) as f64 + c as f64 * 1e6;
        for shape in [WindowShape::Disc, WindowShape::Square] {
            let layout = Layout::new(shape, 2.5, sizes, halo, nr - 2 * halo);
            let mut ws = WindowSums::new(&field, &layout, halo, nc - 2 * halo, opt);
            for limbs in [true, false] {
                ws.limbs = limbs;
                let out = ws.map(&[&count, &total, &place]);
                for ((i, j), &n) in out[0].indexed_iter() {
                    let (c, want) = naive(&field, shape, 2.5, sizes, halo + i, halo + j);
                    let at = format!("{shape:?} limbs={limbs} ({i}, {j})");
                    assert_eq!(n, want.n as f64, "{at}");
                    assert_eq!(out[1][[i, j]], (want.s[0] + want.s2) as f64, "{at}");
                    assert_eq!(
                        out[2][[i, j]],
                        (i * 1000 + j) as f64 + c as f64 * 1e6,
                        "{at}"
                    );
                }
            }
        }
    }
}

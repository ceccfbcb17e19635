//! Grey-level co-occurrence texture (Haralick, Shanmugam & Dinstein 1973, IEEE Trans.
//! Systems, Man, and Cybernetics SMC-3(6), 610–621, doi:10.1109/TSMC.1973.4309314):
//! contrast, homogeneity, entropy and correlation of a quantised band over a square
//! window, averaged over the four directions 0°, 45°, 90° and 135°.
//!
//! Definitions (docs/methods.md, "Grey-level co-occurrence texture"):
//!
//! - Quantisation ([`Quantiser`]): level q = ⌊(v − lo)·N / (hi − lo)⌋ clamped to
//!   0..N−1, over a range [lo, hi] fixed before any block is read, so a cell's level never
//!   depends on the block it is in. Non-finite values are nodata.
//! - Offsets at distance d cells: (row, col) = (0, d), (−d, d), (d, 0), (d, d) — east,
//!   north-east, south and south-east (the last two stand for north and north-west, the
//!   matrix being symmetric). Diagonal offsets are d cells on each axis (chessboard
//!   distance, as in Haralick et al.'s nearest-neighbour definition).
//! - A pair counts when both cells lie in the window and both are valid; each pair adds
//!   (i, j) and (j, i) (symmetric matrix). P = counts / T, T their total.
//! - contrast = Σ P(i,j)(i − j)²; homogeneity = Σ P(i,j) / (1 + (i − j)²); entropy =
//!   −Σ P ln P (natural log); correlation = Σ P (i − μ)(j − μ) / σ² (μ, σ² of the
//!   marginal, equal for both axes of a symmetric matrix), 1 when σ = 0 (a window of one
//!   level), as scikit-image's `graycoprops` defines it.
//! - Each feature is computed per direction and averaged over the directions that have at
//!   least one pair (Haralick et al. average the four angular values); NaN when none has,
//!   or when the centre cell is nodata.
//!
//! Cost: each output row starts from its first window (O(kx·ky) pairs per direction),
//! then slides one column at a time, removing the pairs of the column that leaves and
//! adding those of the column that enters: O(ky) per cell and direction. The features
//! come from integer state (pair counts per level difference, Σi, Σi², Σij, all exact),
//! except entropy, which sums over the levels present in the window: O(L²) for L distinct
//! levels. Every result is a fixed formula of integer counts, so it does not depend on the
//! block layout or thread count.

use ndarray::{Array2, ArrayView2};
use rayon::prelude::*;

use crate::error::{Error, Result};

/// Quantisation levels when none are given: 32 (common practice: 16–64 levels keep the
/// matrix populated in windows of a few hundred cells).
pub const DEFAULT_LEVELS: usize = 32;
/// Most levels accepted.
pub const MAX_LEVELS: usize = 256;
/// Level stored for nodata cells.
pub const NODATA_LEVEL: u16 = u16::MAX;

/// Maps values to grey levels 0..levels−1 over a fixed range.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Quantiser {
    pub lo: f64,
    pub hi: f64,
    pub levels: usize,
}

impl Quantiser {
    /// A quantiser of `levels` levels (2 to [`MAX_LEVELS`]) over [lo, hi] (lo < hi,
    /// finite).
    pub fn new(lo: f64, hi: f64, levels: usize) -> Result<Quantiser> {
        if !(lo.is_finite() && hi.is_finite() && lo < hi) {
            return Err(Error::usage(format!(
                "texture range {lo} to {hi} is not an increasing pair of numbers"
            ))
            .with_fix("give the range as LOW..HIGH with LOW < HIGH, e.g. -1..1 for an index"));
        }
        if !(2..=MAX_LEVELS).contains(&levels) {
            return Err(Error::usage(format!(
                "{levels} grey levels: texture needs 2 to {MAX_LEVELS}"
            ))
            .with_fix(format!(
                "give 2 to {MAX_LEVELS} levels ({DEFAULT_LEVELS} is usual)"
            )));
        }
        Ok(Quantiser { lo, hi, levels })
    }

    /// Level of `v`: ⌊(v − lo)·N / (hi − lo)⌋ clamped to 0..N−1; [`NODATA_LEVEL`] when
    /// `v` is not finite.
    pub fn level(&self, v: f32) -> u16 {
        if !v.is_finite() {
            return NODATA_LEVEL;
        }
        let n = self.levels as f64;
        let q = ((v as f64 - self.lo) * n / (self.hi - self.lo)).floor();
        q.clamp(0.0, n - 1.0) as u16
    }

    /// Levels of every cell of `values`.
    pub fn quantise(&self, values: ArrayView2<f32>) -> Array2<u16> {
        values.map(|&v| self.level(v))
    }
}

/// Window and offset of the co-occurrence features, in cells.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct GlcmWindow {
    /// Half-width of the window in columns: 2·kx + 1 columns.
    pub kx: usize,
    /// Half-height in rows: 2·ky + 1 rows.
    pub ky: usize,
    /// Offset distance d, cells (≥ 1).
    pub distance: usize,
}

impl GlcmWindow {
    /// Offsets (row, col) of the four directions at distance d, col ≥ 0.
    pub fn offsets(&self) -> [(i64, i64); 4] {
        let d = self.distance as i64;
        [(0, d), (-d, d), (d, 0), (d, d)]
    }
}

/// The four features of one cell, in the order contrast, homogeneity, entropy,
/// correlation.
pub type CellFeatures = [f64; 4];

/// Names of the features, in [`CellFeatures`] order.
pub const FEATURE_NAMES: [&str; 4] = ["contrast", "homogeneity", "entropy", "correlation"];

/// Co-occurrence state of one direction in one window (all counts of ordered pairs).
#[derive(Clone)]
struct DirState {
    levels: usize,
    counts: Vec<u32>,
    /// Ordered pairs per level difference |i − j|.
    diff: Vec<u64>,
    /// Occurrences of each level among the pair ends (the marginal × T).
    marginal: Vec<u64>,
    total: u64,
    sum_i: u64,
    sum_i2: u64,
    sum_ij: u64,
}

impl DirState {
    fn new(levels: usize) -> DirState {
        DirState {
            levels,
            counts: vec![0; levels * levels],
            diff: vec![0; levels],
            marginal: vec![0; levels],
            total: 0,
            sum_i: 0,
            sum_i2: 0,
            sum_ij: 0,
        }
    }

    /// Adds (`add`) or removes the symmetric pair of levels (a, b).
    fn update(&mut self, a: u16, b: u16, add: bool) {
        let (a, b) = (a as usize, b as usize);
        let n = self.levels;
        let (ai, bi) = (a as u64, b as u64);
        if add {
            self.counts[a * n + b] += 1;
            self.counts[b * n + a] += 1;
            self.diff[a.abs_diff(b)] += 2;
            self.marginal[a] += 1;
            self.marginal[b] += 1;
            self.total += 2;
            self.sum_i += ai + bi;
            self.sum_i2 += ai * ai + bi * bi;
            self.sum_ij += 2 * ai * bi;
        } else {
            self.counts[a * n + b] -= 1;
            self.counts[b * n + a] -= 1;
            self.diff[a.abs_diff(b)] -= 2;
            self.marginal[a] -= 1;
            self.marginal[b] -= 1;
            self.total -= 2;
            self.sum_i -= ai + bi;
            self.sum_i2 -= ai * ai + bi * bi;
            self.sum_ij -= 2 * ai * bi;
        }
    }

    /// The four features of this direction; `None` without pairs.
    fn features(&self, present: &mut Vec<usize>) -> Option<CellFeatures> {
        if self.total == 0 {
            return None;
        }
        let t = self.total as f64;
        let (mut contrast, mut homogeneity) = (0.0, 0.0);
        for (d, &c) in self.diff.iter().enumerate() {
            if c > 0 {
                let d2 = (d * d) as f64;
                contrast += c as f64 * d2;
                homogeneity += c as f64 / (1.0 + d2);
            }
        }
        present.clear();
        present.extend((0..self.levels).filter(|&i| self.marginal[i] > 0));
        let mut c_ln_c = 0.0;
        for &i in present.iter() {
            let row = &self.counts[i * self.levels..(i + 1) * self.levels];
            for &j in present.iter() {
                let c = row[j];
                if c > 1 {
                    let c = c as f64;
                    c_ln_c += c * c.ln();
                }
            }
        }
        let entropy = (t.ln() - c_ln_c / t).max(0.0);
        let tt = self.total as i128;
        let si = self.sum_i as i128;
        let var = tt * self.sum_i2 as i128 - si * si;
        let cov = tt * self.sum_ij as i128 - si * si;
        let correlation = if var == 0 {
            1.0
        } else {
            cov as f64 / var as f64
        };
        Some([contrast / t, homogeneity / t, entropy, correlation])
    }
}

/// Visits the valid pairs of direction (dr, dc) whose first cell lies in column `col`,
/// both cells in rows `r0..=r1` and in columns `c_min..=c_max`.
#[allow(clippy::too_many_arguments)]
fn column_pairs(
    levels: &ArrayView2<u16>,
    (dr, dc): (i64, i64),
    col: i64,
    (c_min, c_max): (i64, i64),
    r0: i64,
    r1: i64,
    mut f: impl FnMut(u16, u16),
) {
    let (nr, nc) = (levels.nrows() as i64, levels.ncols() as i64);
    let cb = col + dc;
    if col < 0 || col >= nc || cb < 0 || cb >= nc || col < c_min || cb > c_max {
        return;
    }
    let lo = r0.max(0).max(r0 - dr);
    let hi = r1.min(nr - 1).min(r1 - dr);
    for ra in lo..=hi {
        let rb = ra + dr;
        if rb < 0 || rb >= nr {
            continue;
        }
        let a = levels[[ra as usize, col as usize]];
        let b = levels[[rb as usize, cb as usize]];
        if a != NODATA_LEVEL && b != NODATA_LEVEL {
            f(a, b);
        }
    }
}

/// Averages the directions' features; NaN when no direction has a pair.
fn average(states: &[DirState], present: &mut Vec<usize>) -> CellFeatures {
    let mut sum = [0.0; 4];
    let mut n = 0;
    for s in states {
        if let Some(f) = s.features(present) {
            for k in 0..4 {
                sum[k] += f[k];
            }
            n += 1;
        }
    }
    if n == 0 {
        return [f64::NAN; 4];
    }
    sum.map(|v| v / n as f64)
}

/// Features (f64) of output row `row` of `levels` for columns `c0..c0 + width` (sliding
/// window). Cells beyond the array are nodata.
fn row_features(
    levels: &ArrayView2<u16>,
    n_levels: usize,
    win: GlcmWindow,
    row: usize,
    c0: usize,
    width: usize,
) -> Vec<CellFeatures> {
    let offsets = win.offsets();
    let (kx, ky) = (win.kx as i64, win.ky as i64);
    let (r0, r1) = (row as i64 - ky, row as i64 + ky);
    let mut states: Vec<DirState> = (0..4).map(|_| DirState::new(n_levels)).collect();
    let mut present = Vec::with_capacity(n_levels);
    let mut out = Vec::with_capacity(width);
    let first = c0 as i64;
    for (s, &off) in states.iter_mut().zip(&offsets) {
        for col in first - kx..=first + kx {
            column_pairs(
                levels,
                off,
                col,
                (first - kx, first + kx),
                r0,
                r1,
                |a, b| s.update(a, b, true),
            );
        }
    }
    for i in 0..width {
        let c = first + i as i64;
        if i > 0 {
            // The window moved from columns c−1−kx..=c−1+kx to c−kx..=c+kx.
            let (left, right) = (c - 1 - kx, c + kx);
            for (s, &off) in states.iter_mut().zip(&offsets) {
                column_pairs(levels, off, left, (left, c - 1 + kx), r0, r1, |a, b| {
                    s.update(a, b, false)
                });
                column_pairs(
                    levels,
                    off,
                    right - off.1,
                    (c - kx, right),
                    r0,
                    r1,
                    |a, b| s.update(a, b, true),
                );
            }
        }
        let centre = levels[[row, c as usize]];
        out.push(if centre == NODATA_LEVEL {
            [f64::NAN; 4]
        } else {
            average(&states, &mut present)
        });
    }
    out
}

/// Co-occurrence features of `levels` (from [`Quantiser::quantise`], `n_levels` levels)
/// for the output region rows `rows`, columns `cols` of the array: one f64 array per
/// feature in [`FEATURE_NAMES`] order, each of the region's shape. The caller provides a
/// halo of at least (ky, kx) cells around the region for results independent of the
/// block; cells beyond the array count as nodata. Parallel over rows.
pub fn glcm_features(
    levels: ArrayView2<u16>,
    n_levels: usize,
    win: GlcmWindow,
    rows: std::ops::Range<usize>,
    cols: std::ops::Range<usize>,
) -> [Array2<f64>; 4] {
    let (h, w) = (rows.len(), cols.len());
    let per_row: Vec<Vec<CellFeatures>> = rows
        .clone()
        .into_par_iter()
        .map(|r| row_features(&levels, n_levels, win, r, cols.start, w))
        .collect();
    std::array::from_fn(|k| Array2::from_shape_fn((h, w), |(i, j)| per_row[i][j][k]))
}

/// The features of the window centred on (`row`, `col`) built pair by pair, with the
/// normalised matrix P of each direction: the slow reference of the tests.
#[cfg(test)]
pub(crate) fn brute_force(
    levels: &Array2<u16>,
    n_levels: usize,
    win: GlcmWindow,
    row: usize,
    col: usize,
) -> CellFeatures {
    if levels[[row, col]] == NODATA_LEVEL {
        return [f64::NAN; 4];
    }
    let (nr, nc) = (levels.nrows() as i64, levels.ncols() as i64);
    let (r, c) = (row as i64, col as i64);
    let (kx, ky) = (win.kx as i64, win.ky as i64);
    let inside = |rr: i64, cc: i64| {
        (r - ky..=r + ky).contains(&rr)
            && (c - kx..=c + kx).contains(&cc)
            && rr >= 0
            && cc >= 0
            && rr < nr
            && cc < nc
    };
    let mut sum = [0.0; 4];
    let mut dirs = 0;
    for (dr, dc) in win.offsets() {
        let n = n_levels;
        let mut m = vec![0.0f64; n * n];
        for ra in r - ky..=r + ky {
            for ca in c - kx..=c + kx {
                let (rb, cb) = (ra + dr, ca + dc);
                if !(inside(ra, ca) && inside(rb, cb)) {
                    continue;
                }
                let a = levels[[ra as usize, ca as usize]];
                let b = levels[[rb as usize, cb as usize]];
                if a == NODATA_LEVEL || b == NODATA_LEVEL {
                    continue;
                }
                m[a as usize * n + b as usize] += 1.0;
                m[b as usize * n + a as usize] += 1.0;
            }
        }
        let t: f64 = m.iter().sum();
        if t == 0.0 {
            continue;
        }
        let p: Vec<f64> = m.iter().map(|v| v / t).collect();
        let (mut con, mut hom, mut ent, mut mu) = (0.0, 0.0, 0.0, 0.0);
        for i in 0..n {
            for j in 0..n {
                let pij = p[i * n + j];
                let d = i as f64 - j as f64;
                con += pij * d * d;
                hom += pij / (1.0 + d * d);
                if pij > 0.0 {
                    ent -= pij * pij.ln();
                }
                mu += pij * i as f64;
            }
        }
        let (mut var, mut cov) = (0.0, 0.0);
        for i in 0..n {
            for j in 0..n {
                let pij = p[i * n + j];
                var += pij * (i as f64 - mu).powi(2);
                cov += pij * (i as f64 - mu) * (j as f64 - mu);
            }
        }
        let corr = if var.sqrt() < 1e-15 { 1.0 } else { cov / var };
        for (s, v) in sum.iter_mut().zip([con, hom, ent, corr]) {
            *s += v;
        }
        dirs += 1;
    }
    if dirs == 0 {
        return [f64::NAN; 4];
    }
    sum.map(|v| v / dirs as f64)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::random::SplitMix64;

    #[test]
    fn quantiser_levels_and_errors() {
        let q = Quantiser::new(-1.0, 1.0, 4).unwrap();
        // Width 0.5 per level: [-1, -0.5) → 0, [-0.5, 0) → 1, [0, 0.5) → 2, [0.5, 1] → 3.
        assert_eq!(q.level(-1.0), 0);
        assert_eq!(q.level(-0.5), 1);
        assert_eq!(q.level(0.0), 2);
        assert_eq!(q.level(0.49), 2);
        assert_eq!(q.level(1.0), 3);
        assert_eq!(q.level(7.0), 3);
        assert_eq!(q.level(-7.0), 0);
        assert_eq!(q.level(f32::NAN), NODATA_LEVEL);
        assert!(Quantiser::new(1.0, 1.0, 8).is_err());
        assert!(Quantiser::new(0.0, 1.0, 1).is_err());
        assert!(Quantiser::new(0.0, 1.0, 257).is_err());
    }

    #[test]
    fn haralick_worked_matrix() {
        // The 4 x 4 image with levels 0–3 of Haralick et al. (1973), Fig. 2 (from memory;
        // also the example of scikit-image's graycomatrix docstring):
        //   0 0 1 1 / 0 0 1 1 / 0 2 2 2 / 2 2 3 3.
        // Its symmetric horizontal matrix at d = 1 is [[4,2,1,0],[2,4,0,0],[1,0,6,1],
        // [0,0,1,2]] (T = 24, hand count): contrast = (2·2·1 + 2·1·4 + 2·1·1)/24 = 14/24.
        let img = Array2::from_shape_vec(
            (4, 4),
            vec![0u16, 0, 1, 1, 0, 0, 1, 1, 0, 2, 2, 2, 2, 2, 3, 3],
        )
        .unwrap();
        let mut s = DirState::new(4);
        let v = img.view();
        for col in 0..4 {
            column_pairs(&v, (0, 1), col, (0, 3), 0, 3, |a, b| s.update(a, b, true));
        }
        let want = [4, 2, 1, 0, 2, 4, 0, 0, 1, 0, 6, 1, 0, 0, 1, 2];
        assert_eq!(s.counts, want);
        let f = s.features(&mut Vec::new()).unwrap();
        assert!((f[0] - 14.0 / 24.0).abs() < 1e-15, "{f:?}");
    }

    #[test]
    fn sliding_equals_brute_force_with_nodata() {
        let mut rng = SplitMix64::new(41);
        for case in 0..6 {
            let (h, w) = (17, 23);
            let n = [2usize, 5, 8, 16, 3, 32][case];
            let mut img = Array2::from_shape_fn((h, w), |_| (rng.next_f64() * n as f64) as u16);
            for _ in 0..30 {
                let (r, c) = (rng.next_f64() * h as f64, rng.next_f64() * w as f64);
                img[[r as usize, c as usize]] = NODATA_LEVEL;
            }
            let win = GlcmWindow {
                kx: 1 + case % 3,
                ky: 1 + (case + 1) % 3,
                distance: [1, 2, 1, 2, 5, 1][case],
            };
            let out = glcm_features(img.view(), n, win, 0..h, 0..w);
            for r in 0..h {
                for c in 0..w {
                    let want = brute_force(&img, n, win, r, c);
                    for k in 0..4 {
                        let got = out[k][[r, c]];
                        assert!(
                            (got.is_nan() && want[k].is_nan()) || (got - want[k]).abs() < 1e-12,
                            "case {case} ({r}, {c}) {}: {got} vs {}",
                            FEATURE_NAMES[k],
                            want[k]
                        );
                    }
                }
            }
            // A sub-region with its halo gives the same bits as the whole array.
            let sub = glcm_features(img.view(), n, win, 5..12, 7..19);
            for k in 0..4 {
                for (i, r) in (5..12).enumerate() {
                    for (j, c) in (7..19).enumerate() {
                        assert_eq!(sub[k][[i, j]].to_bits(), out[k][[r, c]].to_bits());
                    }
                }
            }
        }
    }

    #[test]
    fn constant_and_checkerboard_closed_forms() {
        // One level everywhere: contrast 0, homogeneity 1, entropy 0, correlation 1.
        let img = Array2::from_elem((7, 7), 3u16);
        let win = GlcmWindow {
            kx: 2,
            ky: 2,
            distance: 1,
        };
        let f = glcm_features(img.view(), 8, win, 3..4, 3..4);
        assert_eq!(
            [f[0][[0, 0]], f[1][[0, 0]], f[2][[0, 0]], f[3][[0, 0]]],
            [0.0, 1.0, 0.0, 1.0]
        );
        // A checkerboard of levels 0 and 1: horizontal and vertical neighbours always
        // differ (contrast 1, homogeneity ½, correlation −1, entropy ln 2: P = ½ on the
        // two off-diagonal cells), diagonal neighbours never (contrast 0, homogeneity 1,
        // correlation 1, entropy ln 2). Averages: contrast ½, homogeneity ¾, entropy ln 2,
        // correlation 0.
        let img = Array2::from_shape_fn((9, 9), |(r, c)| ((r + c) % 2) as u16);
        let f = glcm_features(img.view(), 2, win, 4..5, 4..5);
        let got = [f[0][[0, 0]], f[1][[0, 0]], f[2][[0, 0]], f[3][[0, 0]]];
        let want = [0.5, 0.75, std::f64::consts::LN_2, 0.0];
        for k in 0..4 {
            assert!((got[k] - want[k]).abs() < 1e-15, "{got:?}");
        }
    }
}

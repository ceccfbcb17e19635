//! Cross-validation folds that never split a sample, stratified by class and seeded.
//!
//! **Per-sample folds.** Classes are taken in name order; the samples of each class are
//! shuffled (Fisher–Yates with a SplitMix64 generator seeded by the user's seed) and dealt
//! to folds round-robin, the deal continuing where the previous class stopped. Each class's
//! samples are therefore spread over the folds with counts differing by at most one, and
//! so are the fold totals.
//!
//! **Spatial-block folds.** The plane is cut into square blocks of the given side in
//! metres, aligned to the stack's origin (the corner of cell (0, 0)); a sample belongs to
//! the block holding its anchor (the point, or the polygon's centroid). Each block takes
//! the class most of its samples have (ties: the class first in name order) and the blocks
//! are dealt to folds exactly as samples are above, stratified by that majority class. All
//! samples of a block share its fold; minority-class samples follow their block, so
//! per-class *sample* counts per fold are only as balanced as the blocks allow. On
//! geographic grids the block side is converted to degrees with WGS84 metres per degree at
//! the stack's central latitude (docs/methods.md "Metres per degree").
//!
//! Fold numbers are 0-based here; the table writes them 1-based.

use std::collections::BTreeMap;

use crate::error::{Error, Result};
use crate::grid::Grid;
use crate::random::SplitMix64;

use super::cells::metres_per_unit;

/// Stratified folds for units labelled `labels[i]` (class indices, `0..n_classes`, in the
/// order classes are dealt): returns each unit's fold in `0..k`.
pub fn stratified_folds(labels: &[usize], n_classes: usize, k: usize, seed: u64) -> Vec<usize> {
    assert!(k > 0, "fold count is checked by the caller");
    let mut rng = SplitMix64::new(seed);
    let mut by_class: Vec<Vec<usize>> = vec![Vec::new(); n_classes];
    for (unit, &c) in labels.iter().enumerate() {
        by_class[c].push(unit);
    }
    let mut folds = vec![0; labels.len()];
    let mut next = 0usize;
    for units in &mut by_class {
        rng.shuffle(units);
        for &unit in units.iter() {
            folds[unit] = next;
            next = (next + 1) % k;
        }
    }
    folds
}

/// Square blocks of a side in metres, aligned to a grid's origin.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct BlockLayout {
    /// Block side in cells of the grid, east-west and north-south (may be fractional).
    pub cells_x: f64,
    pub cells_y: f64,
}

impl BlockLayout {
    /// Blocks `side_m` metres square on `grid` (see the module docs for geographic grids).
    pub fn new(grid: &Grid, side_m: f64) -> Result<BlockLayout> {
        if !(side_m.is_finite() && side_m > 0.0) {
            return Err(Error::usage(format!(
                "block size {side_m} m is not a positive number of metres"
            ))
            .with_fix("give --block-size a side in metres above 0, e.g. --block-size 50"));
        }
        let (_, mid_y) = grid.cell_centre(0.0, grid.height as f64 / 2.0 - 0.5);
        let (mx, my) = metres_per_unit(grid, mid_y)?;
        let layout = BlockLayout {
            cells_x: side_m / mx / grid.res_x(),
            cells_y: side_m / my / grid.res_y(),
        };
        // A block narrower than a cell would put each sample in a block of its own, and
        // block numbers past 2^63 would saturate into one block (`block_of` converts with
        // `as i64`): refuse it. A side of at least one cell keeps block numbers of points
        // on the grid within its cell count.
        if !(layout.cells_x >= 1.0 && layout.cells_y >= 1.0) {
            let cell = (grid.res_x() * mx).max(grid.res_y() * my);
            let side = if (1e-3..1e7).contains(&side_m) {
                format!("{side_m}")
            } else {
                format!("{side_m:e}")
            };
            return Err(Error::usage(format!(
                "--block-size {side} m is smaller than one cell of the stack ({cell:.4} m)"
            ))
            .with_fix(format!(
                "give a block side of at least {cell:.4} m; spatial blocks are usually many times the correlation range (tens of metres)"
            )));
        }
        Ok(layout)
    }

    /// Block (column, row) holding CRS point (x, y), counted from the grid's origin.
    pub fn block_of(&self, grid: &Grid, x: f64, y: f64) -> (i64, i64) {
        let (fc, fr) = grid.to_cell(x, y);
        (
            (fc / self.cells_x).floor() as i64,
            (fr / self.cells_y).floor() as i64,
        )
    }
}

/// Folds per sample from spatial blocks: `blocks[i]` is sample i's block, `labels[i]` its
/// class index. Returns each sample's fold in `0..k` and the number of distinct blocks.
pub fn block_folds(
    blocks: &[(i64, i64)],
    labels: &[usize],
    n_classes: usize,
    k: usize,
    seed: u64,
) -> (Vec<usize>, usize) {
    // Blocks in key order, so the result does not depend on the order of the samples.
    let mut members: BTreeMap<(i64, i64), Vec<usize>> = BTreeMap::new();
    for (i, b) in blocks.iter().enumerate() {
        members.entry(*b).or_default().push(i);
    }
    let majority: Vec<usize> = members
        .values()
        .map(|samples| {
            let mut counts = vec![0usize; n_classes];
            for &s in samples {
                counts[labels[s]] += 1;
            }
            // Most samples; ties go to the lowest class index (first in name order).
            let best = counts.iter().copied().max().unwrap_or(0);
            counts.iter().position(|&c| c == best).unwrap_or(0)
        })
        .collect();
    let block_fold = stratified_folds(&majority, n_classes, k, seed);
    let mut folds = vec![0; blocks.len()];
    for (samples, fold) in members.values().zip(block_fold) {
        for &s in samples {
            folds[s] = fold;
        }
    }
    (folds, members.len())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::grid::Crs;

    fn labels(counts: &[usize]) -> Vec<usize> {
        // Interleave classes so that input order is not grouped by class.
        let mut out = Vec::new();
        let max = counts.iter().copied().max().unwrap_or(0);
        for i in 0..max {
            for (c, &n) in counts.iter().enumerate() {
                if i < n {
                    out.push(c);
                }
            }
        }
        out
    }

    #[test]
    fn stratified_counts_differ_by_at_most_one() {
        for k in [2usize, 3, 5, 10] {
            for seed in [0u64, 1, 99] {
                let lab = labels(&[23, 7, 1, 40, 12]);
                let folds = stratified_folds(&lab, 5, k, seed);
                assert_eq!(folds.len(), lab.len());
                assert!(folds.iter().all(|&f| f < k));
                for c in 0..5 {
                    let mut per = vec![0usize; k];
                    for (i, &f) in folds.iter().enumerate() {
                        if lab[i] == c {
                            per[f] += 1;
                        }
                    }
                    let (lo, hi) = (per.iter().min().unwrap(), per.iter().max().unwrap());
                    assert!(hi - lo <= 1, "class {c} k {k}: {per:?}");
                }
                let mut tot = vec![0usize; k];
                folds.iter().for_each(|&f| tot[f] += 1);
                let (lo, hi) = (tot.iter().min().unwrap(), tot.iter().max().unwrap());
                assert!(hi - lo <= 1, "totals {tot:?}");
            }
        }
    }

    #[test]
    fn folds_are_deterministic_and_seed_dependent() {
        let lab = labels(&[50, 50]);
        let a = stratified_folds(&lab, 2, 5, 7);
        assert_eq!(a, stratified_folds(&lab, 2, 5, 7));
        assert_ne!(a, stratified_folds(&lab, 2, 5, 8));
    }

    #[test]
    fn blocks_are_never_split_and_follow_majority() {
        let g = Grid::new(
            100,
            100,
            [500.0, 0.5, 0.0, 900.0, 0.0, -0.5],
            Crs::from_epsg(32633),
        )
        .unwrap();
        // 10 m blocks = 20 cells of 0.5 m.
        let layout = BlockLayout::new(&g, 10.0).unwrap();
        assert_eq!(layout.cells_x, 20.0);
        assert_eq!(layout.block_of(&g, 500.0, 900.0), (0, 0));
        assert_eq!(layout.block_of(&g, 509.99, 890.01), (0, 0));
        assert_eq!(layout.block_of(&g, 510.0, 890.0), (1, 1));
        let mut rng = SplitMix64::new(3);
        let mut blocks = Vec::new();
        let mut lab = Vec::new();
        for _ in 0..300 {
            let x = 500.0 + rng.below(5000) as f64 / 100.0;
            let y = 900.0 - rng.below(5000) as f64 / 100.0;
            blocks.push(layout.block_of(&g, x, y));
            lab.push(((x - 500.0) / 17.0) as usize % 3);
        }
        let (folds, n_blocks) = block_folds(&blocks, &lab, 3, 4, 11);
        assert_eq!(n_blocks, 25);
        let mut block_fold: BTreeMap<(i64, i64), usize> = BTreeMap::new();
        for (b, f) in blocks.iter().zip(&folds) {
            assert_eq!(*block_fold.entry(*b).or_insert(*f), *f, "block {b:?} split");
        }
        let mut per = [0usize; 4];
        block_fold.values().for_each(|&f| per[f] += 1);
        assert!(per.iter().max().unwrap() - per.iter().min().unwrap() <= 1);
        // Independent of the samples' order.
        let rev_b: Vec<_> = blocks.iter().rev().copied().collect();
        let rev_l: Vec<_> = lab.iter().rev().copied().collect();
        let (rev_f, _) = block_folds(&rev_b, &rev_l, 3, 4, 11);
        let back: Vec<_> = rev_f.into_iter().rev().collect();
        assert_eq!(back, folds);
    }

    #[test]
    fn bad_block_size_refused() {
        let g = Grid::new(4, 4, [0.0, 1.0, 0.0, 4.0, 0.0, -1.0], Crs::from_epsg(32633)).unwrap();
        assert!(BlockLayout::new(&g, 0.0).is_err());
        assert!(BlockLayout::new(&g, f64::NAN).is_err());
        // 1e-300 m once saturated every block number to i64::MAX: "1 spatial block".
        let e = BlockLayout::new(&g, 1e-300).unwrap_err().to_string();
        assert!(
            e.contains("--block-size 1e-300 m is smaller than one cell"),
            "{e}"
        );
        assert!(BlockLayout::new(&g, 0.999).is_err());
        assert_eq!(BlockLayout::new(&g, 1.0).unwrap().cells_x, 1.0);
        // A block larger than the grid is one block (cells_x infinite at the extreme).
        let huge = BlockLayout::new(&g, 1e308).unwrap();
        assert_eq!(huge.block_of(&g, 3.5, 0.5), (0, 0));
    }
}

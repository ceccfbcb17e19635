//! Checks on a sample set before any pixel is read: samples outside the stack, overlapping
//! samples of different classes, and classes too small to appear in every fold.
//!
//! Each finding names the samples by id. The findings are warnings by default; the caller
//! turns them into a failure (`Error::CheckFailed`, exit code 3) when asked to be strict.

use std::collections::BTreeSet;
use std::fmt;

use super::cells::Footprint;
use super::inputs::Sample;

/// Findings of [`check_samples`].
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct CheckReport {
    /// Ids of samples with no cell centre inside the stack, lying outside or across its
    /// edge.
    pub outside: Vec<String>,
    /// Ids of samples inside the stack too small to hold any cell centre.
    pub no_cells: Vec<String>,
    /// Pairs of samples of different classes sharing at least one cell:
    /// (id, class, id, class), the earlier sample in the file first.
    pub overlaps: Vec<(String, String, String, String)>,
    /// Classes with fewer samples inside the stack than folds: (class, samples).
    pub small_classes: Vec<(String, usize)>,
    /// With spatial blocks: classes inside the stack in fewer blocks than folds:
    /// (class, blocks).
    pub thin_block_classes: Vec<(String, usize)>,
    /// The fold count the classes were checked against.
    pub folds: usize,
}

impl CheckReport {
    /// True when nothing was found.
    pub fn is_clean(&self) -> bool {
        self.outside.is_empty()
            && self.no_cells.is_empty()
            && self.overlaps.is_empty()
            && self.small_classes.is_empty()
            && self.thin_block_classes.is_empty()
    }
}

/// Up to `max` items joined with ", ", then "… and N more".
pub(crate) fn list(items: &[String], max: usize) -> String {
    let mut s = items
        .iter()
        .take(max)
        .cloned()
        .collect::<Vec<_>>()
        .join(", ");
    if items.len() > max {
        s.push_str(&format!(" … and {} more", items.len() - max));
    }
    s
}

impl fmt::Display for CheckReport {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        if !self.outside.is_empty() {
            writeln!(
                f,
                "check: {} sample(s) outside the stack: {}",
                self.outside.len(),
                list(&self.outside, 20)
            )?;
        }
        if !self.no_cells.is_empty() {
            writeln!(
                f,
                "check: {} sample(s) holding no cell centre (smaller than a cell): {}",
                self.no_cells.len(),
                list(&self.no_cells, 20)
            )?;
        }
        if !self.overlaps.is_empty() {
            let pairs: Vec<String> = self
                .overlaps
                .iter()
                .map(|(a, ca, b, cb)| format!("{a} ({ca}) / {b} ({cb})"))
                .collect();
            writeln!(
                f,
                "check: {} overlapping pair(s) of different classes: {}",
                pairs.len(),
                list(&pairs, 20)
            )?;
        }
        if !self.small_classes.is_empty() {
            let c: Vec<String> = self
                .small_classes
                .iter()
                .map(|(c, n)| format!("{c} ({n})"))
                .collect();
            writeln!(
                f,
                "check: class(es) with fewer samples inside the stack than the {} folds: {}",
                self.folds,
                list(&c, 20)
            )?;
        }
        if !self.thin_block_classes.is_empty() {
            let c: Vec<String> = self
                .thin_block_classes
                .iter()
                .map(|(c, n)| format!("{c} ({n} block(s))"))
                .collect();
            writeln!(
                f,
                "check: class(es) found in fewer spatial blocks than the {} folds: {}",
                self.folds,
                list(&c, 20)
            )?;
        }
        Ok(())
    }
}

/// Check `samples` with their `footprints` (cells inside the stack), class indices
/// `labels` into `classes`, against `folds` folds; `blocks` gives each sample's spatial
/// block when folds are assigned by blocks.
pub fn check_samples(
    samples: &[Sample],
    footprints: &[Footprint],
    labels: &[usize],
    classes: &[String],
    folds: usize,
    blocks: Option<&[(i64, i64)]>,
) -> CheckReport {
    let empty = |clipped: bool| {
        samples
            .iter()
            .zip(footprints)
            .filter(|(_, fp)| fp.cells.is_empty() && fp.clipped == clipped)
            .map(|(s, _)| s.id.clone())
            .collect::<Vec<_>>()
    };
    let outside = empty(true);
    let no_cells = empty(false);

    // Every (cell, sample) pair, sorted by cell: samples sharing a cell are adjacent.
    let mut owners: Vec<((i64, i64), usize)> = footprints
        .iter()
        .enumerate()
        .flat_map(|(i, fp)| fp.cells.iter().map(move |&c| (c, i)))
        .collect();
    owners.sort_unstable();
    let mut pairs: BTreeSet<(usize, usize)> = BTreeSet::new();
    for group in owners.chunk_by(|a, b| a.0 == b.0) {
        if group.len() < 2 {
            continue;
        }
        for (n, &(_, a)) in group.iter().enumerate() {
            for &(_, b) in &group[n + 1..] {
                if labels[a] != labels[b] {
                    pairs.insert((a.min(b), a.max(b)));
                }
            }
        }
    }
    let overlaps = pairs
        .into_iter()
        .map(|(a, b)| {
            (
                samples[a].id.clone(),
                samples[a].class.clone(),
                samples[b].id.clone(),
                samples[b].class.clone(),
            )
        })
        .collect();

    let inside = |i: usize| !footprints[i].cells.is_empty();
    let mut per_class = vec![0usize; classes.len()];
    for (i, &c) in labels.iter().enumerate() {
        if inside(i) {
            per_class[c] += 1;
        }
    }
    let small_classes = classes
        .iter()
        .zip(&per_class)
        .filter(|(_, &n)| n < folds)
        .map(|(c, &n)| (c.clone(), n))
        .collect();

    let thin_block_classes = match blocks {
        None => Vec::new(),
        Some(blocks) => {
            let mut seen: BTreeSet<(usize, (i64, i64))> = BTreeSet::new();
            for (i, (&c, &b)) in labels.iter().zip(blocks).enumerate() {
                if inside(i) {
                    seen.insert((c, b));
                }
            }
            let mut per = vec![0usize; classes.len()];
            seen.iter().for_each(|&(c, _)| per[c] += 1);
            classes
                .iter()
                .zip(per)
                .filter(|(_, n)| *n < folds)
                .map(|(c, n)| (c.clone(), n))
                .collect()
        }
    };

    CheckReport {
        outside,
        no_cells,
        overlaps,
        small_classes,
        thin_block_classes,
        folds,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::sample::inputs::Shape;

    fn sample(id: &str, class: &str) -> Sample {
        Sample {
            id: id.into(),
            class: class.into(),
            shape: Shape::Point {
                x: 0.0,
                y: 0.0,
                radius_m: None,
            },
        }
    }

    fn fp(cells: &[(i64, i64)]) -> Footprint {
        Footprint {
            cells: cells.to_vec(),
            clipped: cells.is_empty(),
        }
    }

    #[test]
    fn findings_name_the_samples() {
        let samples = vec![
            sample("a", "fen"),
            sample("b", "bog"),
            sample("c", "fen"),
            sample("d", "fen"),
            sample("e", "bog"),
        ];
        let footprints = vec![
            fp(&[(1, 1), (2, 1)]),
            fp(&[(2, 1), (3, 1)]), // shares (2, 1) with a: different class
            fp(&[(3, 1)]),         // shares (3, 1) with b: different class
            fp(&[(1, 1)]),         // shares (1, 1) with a: same class, not reported
            fp(&[]),               // outside
        ];
        let classes = vec!["bog".to_string(), "fen".to_string()];
        let labels = vec![1, 0, 1, 1, 0];
        let r = check_samples(&samples, &footprints, &labels, &classes, 3, None);
        assert_eq!(r.outside, vec!["e".to_string()]);
        assert_eq!(
            r.overlaps,
            vec![
                ("a".into(), "fen".into(), "b".into(), "bog".into()),
                ("b".into(), "bog".into(), "c".into(), "fen".into()),
            ]
        );
        // bog has 2 samples but only b inside the stack.
        assert_eq!(r.small_classes, vec![("bog".to_string(), 1)]);
        assert!(!r.is_clean());
        let text = r.to_string();
        assert!(text.contains("outside the stack: e"), "{text}");
        assert!(text.contains("a (fen) / b (bog)"), "{text}");
        assert!(text.contains("bog (1)"), "{text}");

        // Blocks: fen inside in blocks (0,0) and (1,0); bog inside only in (0,0).
        let blocks = vec![(0, 0), (0, 0), (0, 0), (1, 0), (1, 0)];
        let r = check_samples(&samples, &footprints, &labels, &classes, 2, Some(&blocks));
        assert_eq!(r.thin_block_classes, vec![("bog".to_string(), 1)]);
        let r = check_samples(&samples, &footprints, &labels, &classes, 3, Some(&blocks));
        assert_eq!(
            r.thin_block_classes,
            vec![("bog".to_string(), 1), ("fen".to_string(), 2)]
        );
    }

    #[test]
    fn tiny_sample_inside_is_not_called_outside() {
        let samples = vec![sample("tiny", "fen")];
        let footprints = vec![Footprint {
            cells: vec![],
            clipped: false,
        }];
        let r = check_samples(&samples, &footprints, &[0], &["fen".into()], 1, None);
        assert!(r.outside.is_empty());
        assert_eq!(r.no_cells, vec!["tiny".to_string()]);
        assert!(r.to_string().contains("smaller than a cell): tiny"));
    }

    #[test]
    fn empty_set_is_clean() {
        let r = check_samples(&[], &[], &[], &[], 5, None);
        assert!(r.is_clean());
        assert_eq!(r.to_string(), "");
    }
}

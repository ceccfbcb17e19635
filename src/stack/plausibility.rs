//! Values that cannot be elevations or reflectances, counted while the build streams.
//!
//! Every block the executor computes counts, on the cells it owns (not its halo), the
//! valid DSM cells and those outside [`ELEVATION_RANGE_M`] (after the z-factor), and for
//! each mapped band the valid cells and those outside [`REFLECTANCE_RANGE`] (after scale
//! and offset). Counts merge in block order, so the verdict does not depend on threads or
//! blocks, and no second pass over the inputs is needed. A build is refused (unless the
//! matching `allow_any_…` recipe key or flag is set) when:
//!
//! - the DSM holds no valid cell at all over the stack's grid;
//! - any valid DSM cell lies outside [`ELEVATION_RANGE_M`];
//! - more than [`REFLECTANCE_MAX_OUTSIDE`] of a band's valid cells lie outside
//!   [`REFLECTANCE_RANGE`] (almost always a forgotten `--reflectance-scale`).
//!
//! The executor stops at the first wave of blocks whose counts already prove the verdict
//! (for reflectance: more cells outside than the share allows of the whole grid), and the
//! output folder's temporary files are removed, so a refused build leaves no output.
//! Indices are not refused: cells outside an index's valid range are counted and recorded
//! per band in `stack.json` (`outside_valid_range`, with the range from the index's
//! definition, `spectral::SpectralIndex::valid_range`).

use std::path::Path;

use crate::error::{Error, Result};

/// Plausible elevations in metres (after the z-factor): −500 m to 9000 m. Common
/// practice: the lowest land surface on Earth, the Dead Sea shore, lies about 430 m below
/// sea level and the highest, Mount Everest, 8849 m above it; a margin covers geoid and
/// ellipsoid height differences (tens of metres) and surface objects.
pub const ELEVATION_RANGE_M: (f64, f64) = (-500.0, 9000.0);

/// Plausible surface reflectance (after scale and offset): −0.05 to 1.5. Common practice:
/// atmospheric correction and calibration noise give slightly negative values over dark
/// surfaces, and specular or directional effects give values somewhat above 1; integer
/// orthomosaics read without their scale give hundreds or thousands.
pub const REFLECTANCE_RANGE: (f64, f64) = (-0.05, 1.5);

/// Largest share of a band's valid cells allowed outside [`REFLECTANCE_RANGE`] (1%).
pub const REFLECTANCE_MAX_OUTSIDE: f64 = 0.01;

/// Valid cells of a block and those outside a range, with the extreme values seen.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct RangeCount {
    pub valid: u64,
    pub outside: u64,
    pub min: f64,
    pub max: f64,
}

impl Default for RangeCount {
    fn default() -> Self {
        RangeCount {
            valid: 0,
            outside: 0,
            min: f64::INFINITY,
            max: f64::NEG_INFINITY,
        }
    }
}

impl RangeCount {
    /// Count `values · factor` against `[lo, hi]`; NaN cells are not valid. A relative
    /// tolerance of 1e-6 on each bound absorbs the rounding of values to f32 (−0.05 read
    /// from a float32 file is −0.0500000007).
    pub fn of<T: Copy + Into<f64>>(
        values: impl IntoIterator<Item = T>,
        factor: f64,
        (lo, hi): (f64, f64),
    ) -> RangeCount {
        let lo = lo - 1e-6 * lo.abs().max(1.0);
        let hi = hi + 1e-6 * hi.abs().max(1.0);
        let mut c = RangeCount::default();
        for v in values {
            let v = v.into() * factor;
            if v.is_nan() {
                continue;
            }
            c.valid += 1;
            c.outside += u64::from(!(lo..=hi).contains(&v));
            c.min = c.min.min(v);
            c.max = c.max.max(v);
        }
        c
    }

    /// Add another block's count.
    pub fn merge(&mut self, other: &RangeCount) {
        self.valid += other.valid;
        self.outside += other.outside;
        self.min = self.min.min(other.min);
        self.max = self.max.max(other.max);
    }

    /// Share of the valid cells outside the range (0 when none is valid).
    pub fn fraction(&self) -> f64 {
        if self.valid == 0 {
            0.0
        } else {
            self.outside as f64 / self.valid as f64
        }
    }

    /// The record written to `stack.json`: range, cells outside and their share.
    pub fn record(&self, range: (f64, f64)) -> serde_json::Value {
        serde_json::json!({
            "range": [finite_or_null(range.0), finite_or_null(range.1)],
            "cells": self.outside,
            "fraction": self.fraction(),
        })
    }
}

fn finite_or_null(v: f64) -> serde_json::Value {
    if v.is_finite() {
        v.into()
    } else {
        serde_json::Value::Null
    }
}

/// The verdict on the DSM's counts so far. `complete` is false while blocks are still to
/// come: an empty DSM is only known at the end, a cell outside the range at once.
pub fn check_elevations(
    dsm: &Path,
    count: &RangeCount,
    allow: bool,
    complete: bool,
) -> Result<Option<String>> {
    if complete && count.valid == 0 {
        return Err(Error::file(
            dsm,
            "the DSM holds no valid elevation over the stack's grid: every cell is nodata",
        )
        .with_fix("check the file's nodata value (`terrastack info FILE`) and that the DSM covers the area"));
    }
    if count.outside == 0 {
        return Ok(None);
    }
    let (lo, hi) = ELEVATION_RANGE_M;
    let what = format!(
        "{} cells of the DSM hold values outside {lo} m to {hi} m (from {} to {}), which \
         are not elevations in metres on Earth",
        count.outside,
        short(count.min),
        short(count.max)
    );
    if allow {
        return Ok(Some(format!(
            "{}: {what}; built anyway (allow_any_elevation)",
            dsm.display()
        )));
    }
    Err(Error::file(dsm, what).with_fix(
        "declare the file's fill value as nodata, give --z-factor for other units (0.3048 for feet), \
         choose the elevation band with --dsm-band, or pass --allow-any-elevation if the values are right",
    ))
}

/// The verdict on one band's reflectance counts so far, over a grid of `grid_cells`
/// cells. While incomplete, a band is refused only once its cells outside exceed the
/// allowed share of the whole grid (so the final share must exceed it too).
pub fn check_reflectance(
    path: &Path,
    role: &str,
    band: usize,
    count: &RangeCount,
    grid_cells: u64,
    allow: bool,
    complete: bool,
) -> Result<Option<String>> {
    let limit = REFLECTANCE_MAX_OUTSIDE;
    let proven = if complete {
        count.fraction() > limit
    } else {
        count.outside as f64 > limit * grid_cells as f64
    };
    if !proven {
        return Ok(None);
    }
    let (lo, hi) = REFLECTANCE_RANGE;
    let what = format!(
        "band {band} (`{role}`) gives reflectance outside {lo} to {hi} on {}{} of its valid cells \
         (values from {} to {}), so it is not reflectance yet",
        if complete { "" } else { "more than " },
        percent(if complete { count.fraction() } else { limit }),
        short(count.min),
        short(count.max)
    );
    if allow {
        return Ok(if complete {
            Some(format!(
                "{}: {what}; built anyway (allow_any_reflectance)",
                path.display()
            ))
        } else {
            None
        });
    }
    Err(Error::file(path, what).with_fix(
        "give --reflectance-scale (1e-4 for values stored 0–10000, 1/65535 for 0–65535) \
         and --reflectance-offset if the file has one, or pass --allow-any-reflectance",
    ))
}

fn short(v: f64) -> String {
    if v.is_finite() {
        format!("{v:.4}")
    } else {
        "-".into()
    }
}

/// A share as a percentage with enough digits to be non-zero when it is.
pub fn percent(f: f64) -> String {
    let p = f * 100.0;
    if p == 0.0 || p >= 0.1 {
        format!("{p:.1}%")
    } else {
        format!("{p:.2e}%")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn counts_merge_and_ignore_nodata() {
        let a = RangeCount::of([1.0f32, f32::NAN, 9500.0], 1.0, ELEVATION_RANGE_M);
        let b = RangeCount::of([-600.0f64, 20.0], 1.0, ELEVATION_RANGE_M);
        let mut m = a;
        m.merge(&b);
        assert_eq!((m.valid, m.outside, m.min, m.max), (4, 2, -600.0, 9500.0));
        // A z-factor applies before the range: 30000 ft · 0.3048 = 9144 m.
        let ft = RangeCount::of([30000.0f32], 0.3048, ELEVATION_RANGE_M);
        assert_eq!(ft.outside, 1);
        assert_eq!(RangeCount::default().fraction(), 0.0);
    }

    #[test]
    fn elevation_verdicts() {
        let p = Path::new("dsm.tif");
        let empty = RangeCount::default();
        assert!(check_elevations(p, &empty, false, false).unwrap().is_none());
        let e = check_elevations(p, &empty, false, true)
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("dsm.tif") && e.contains("no valid elevation"),
            "{e}"
        );
        let bad = RangeCount::of([-32768.0f32, 12.0], 1.0, ELEVATION_RANGE_M);
        let e = check_elevations(p, &bad, false, false)
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("--allow-any-elevation") && e.contains("-32768"),
            "{e}"
        );
        let w = check_elevations(p, &bad, true, true).unwrap().unwrap();
        assert!(w.contains("built anyway"), "{w}");
    }

    #[test]
    fn reflectance_share_is_exact_at_the_end_and_proven_early() {
        let p = Path::new("ortho.tif");
        // 2 of 100 valid cells outside: 2% > 1%, refused at the end.
        let mut c = RangeCount::of(vec![0.2f32; 98], 1.0, REFLECTANCE_RANGE);
        c.merge(&RangeCount::of([2.0f32, -0.1], 1.0, REFLECTANCE_RANGE));
        let e = check_reflectance(p, "nir", 5, &c, 1000, false, true)
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("--reflectance-scale") && e.contains("2.0%"),
            "{e}"
        );
        // Early, the same two cells do not yet prove 1% of a 1000-cell grid.
        assert!(check_reflectance(p, "nir", 5, &c, 1000, false, false)
            .unwrap()
            .is_none());
        // 1 of 100 is exactly 1%: allowed.
        let mut ok = RangeCount::of(vec![0.2f32; 99], 1.0, REFLECTANCE_RANGE);
        ok.merge(&RangeCount::of([1.6f32], 1.0, REFLECTANCE_RANGE));
        assert!(check_reflectance(p, "nir", 5, &ok, 100, false, true)
            .unwrap()
            .is_none());
        // The range's ends are plausible.
        let ends = RangeCount::of([-0.05f32, 1.5], 1.0, REFLECTANCE_RANGE);
        assert_eq!(ends.outside, 0);
    }
}

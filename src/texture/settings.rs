//! Texture settings as a recipe gives them (`[texture]` table, `--texture-*` flags) and as
//! `stack.json` records them (`parameters.texture`): the grey levels and pair distance of
//! the co-occurrence features, and the quantisation range of each source.

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};

use super::glcm::{Quantiser, DEFAULT_LEVELS};
use crate::error::{Error, Result};

/// Pair distance of the co-occurrence features when none is given: 1 cell (the nearest
/// neighbours of Haralick, Shanmugam & Dinstein 1973).
pub const DEFAULT_DISTANCE_PX: usize = 1;

/// The `[texture]` table of a recipe, and the `--texture-*` flags: every key optional.
#[derive(Clone, Debug, Default, Deserialize, Serialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct TextureSection {
    /// Grey levels of the co-occurrence features (2–256).
    pub levels: Option<usize>,
    /// Pair distance of the co-occurrence features, cells.
    pub distance_px: Option<usize>,
    /// Quantisation range per source, `"LOW..HIGH"` (e.g. `ndvi = "0..1"`).
    #[serde(default)]
    pub ranges: BTreeMap<String, String>,
}

/// Resolved settings: every value explicit (recorded in `stack.json`).
#[derive(Clone, Debug, Deserialize, Serialize, PartialEq)]
pub struct TextureSettings {
    pub levels: usize,
    pub distance_px: usize,
    /// Source name → (low, high), as the user gave them; sources not listed use their
    /// physical range (see [`super::bands::default_range`]).
    pub ranges: BTreeMap<String, (f64, f64)>,
}

impl Default for TextureSettings {
    fn default() -> Self {
        TextureSettings {
            levels: DEFAULT_LEVELS,
            distance_px: DEFAULT_DISTANCE_PX,
            ranges: BTreeMap::new(),
        }
    }
}

/// Parses `LOW..HIGH` (two numbers, LOW < HIGH); `what` names where it came from.
pub fn parse_range(what: &str, text: &str) -> Result<(f64, f64)> {
    let bad = || {
        Error::usage(format!(
            "texture range `{text}` ({what}) is not LOW..HIGH with LOW < HIGH"
        ))
        .with_fix("write the range as two numbers, e.g. 0..1 for reflectance or -1..1 for an index")
    };
    let (lo, hi) = text.trim().split_once("..").ok_or_else(bad)?;
    let lo: f64 = lo.trim().parse().map_err(|_| bad())?;
    let hi: f64 = hi.trim().parse().map_err(|_| bad())?;
    if !(lo.is_finite() && hi.is_finite() && lo < hi) {
        return Err(bad());
    }
    Ok((lo, hi))
}

/// Parses `--texture-range SOURCE=LOW..HIGH`.
pub fn parse_range_flag(text: &str) -> Result<(String, String)> {
    match text.split_once('=') {
        Some((source, range)) if !source.trim().is_empty() => {
            parse_range("--texture-range", range)?;
            Ok((source.trim().to_ascii_lowercase(), range.trim().to_string()))
        }
        _ => Err(
            Error::usage(format!("--texture-range `{text}` is not SOURCE=LOW..HIGH"))
                .with_fix("name the band or index and its range, e.g. --texture-range ndvi=0..1"),
        ),
    }
}

impl TextureSettings {
    /// Merges the recipe's `[texture]` table with the flags (flags win, range by range) and
    /// checks every value.
    pub fn resolve(file: &TextureSection, flags: &TextureSection) -> Result<TextureSettings> {
        let levels = flags.levels.or(file.levels).unwrap_or(DEFAULT_LEVELS);
        // The quantiser's own check names the accepted levels.
        Quantiser::new(0.0, 1.0, levels).map_err(|e| match e {
            Error::Usage { problem, fix } => Error::Usage {
                problem: format!("{problem} (--texture-levels or levels in [texture])"),
                fix,
            },
            other => other,
        })?;
        let distance_px = flags
            .distance_px
            .or(file.distance_px)
            .unwrap_or(DEFAULT_DISTANCE_PX);
        if distance_px == 0 || distance_px > 64 {
            return Err(Error::usage(format!(
                "texture pair distance {distance_px} cells (--texture-distance or distance_px in [texture]) is outside 1..=64"
            ))
            .with_fix("give the distance between the cells of a pair in cells, 1 (the default) to 64"));
        }
        let mut ranges = BTreeMap::new();
        for (source, text) in &file.ranges {
            let what = format!("ranges.{source} in [texture]");
            ranges.insert(source.to_ascii_lowercase(), parse_range(&what, text)?);
        }
        for (source, text) in &flags.ranges {
            ranges.insert(
                source.to_ascii_lowercase(),
                parse_range("--texture-range", text)?,
            );
        }
        Ok(TextureSettings {
            levels,
            distance_px,
            ranges,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn flags_win_and_values_are_checked() {
        let file = TextureSection {
            levels: Some(16),
            distance_px: Some(2),
            ranges: [("ndvi".to_string(), "-1..1".to_string())].into(),
        };
        let flags = TextureSection {
            levels: Some(64),
            ranges: [("ndvi".to_string(), "0..1".to_string())].into(),
            ..TextureSection::default()
        };
        let s = TextureSettings::resolve(&file, &flags).unwrap();
        assert_eq!((s.levels, s.distance_px), (64, 2));
        assert_eq!(s.ranges["ndvi"], (0.0, 1.0));
        let d = TextureSettings::resolve(&TextureSection::default(), &TextureSection::default());
        assert_eq!(d.unwrap(), TextureSettings::default());
        for bad in [
            TextureSection {
                levels: Some(1),
                ..TextureSection::default()
            },
            TextureSection {
                distance_px: Some(0),
                ..TextureSection::default()
            },
            TextureSection {
                ranges: [("nir".to_string(), "1..0".to_string())].into(),
                ..TextureSection::default()
            },
        ] {
            assert!(TextureSettings::resolve(&bad, &TextureSection::default()).is_err());
        }
        assert_eq!(parse_range("x", " -0.5 .. 2 ").unwrap(), (-0.5, 2.0));
        assert!(parse_range("x", "0-1").is_err());
        assert_eq!(
            parse_range_flag("NDVI=0..1").unwrap(),
            ("ndvi".to_string(), "0..1".to_string())
        );
        assert!(parse_range_flag("=0..1").is_err());
    }
}

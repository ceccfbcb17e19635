//! The ground filter's settings as a recipe gives them (`[ground]` table, `--ground-*`
//! flags) and as `stack.json` records them (`parameters.ground`).

use serde::{Deserialize, Serialize};

use super::{
    GroundParams, DEFAULT_ELEVATION_THRESHOLD_M, DEFAULT_MAX_OBJECT_M, DEFAULT_NDVI_MAX,
    DEFAULT_SLOPE, DEFAULT_SLOPE_SCALE_M,
};
use crate::error::{Error, Result};
use crate::terrain::WindowShape;

/// The `[ground]` table of a recipe, and the `--ground-*` flags: every key optional.
#[derive(Clone, Debug, Default, Deserialize, Serialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct GroundSection {
    /// Width of the largest object to remove, metres.
    pub max_object_m: Option<f64>,
    /// Slope threshold, rise over run.
    pub slope: Option<f64>,
    /// Elevation threshold of the classification, metres.
    pub elevation_threshold_m: Option<f64>,
    /// Elevation scaling factor, metres per unit gradient.
    pub slope_scale_m: Option<f64>,
    /// "square" or "disc".
    pub window: Option<String>,
    /// Interpolation reach, metres.
    pub reach_m: Option<f64>,
    /// NDVI guidance on: cells with NDVI above this are not ground candidates.
    pub ndvi_max: Option<f64>,
    /// NDVI guidance on at the default threshold ([`DEFAULT_NDVI_MAX`]).
    pub ndvi: Option<bool>,
}

/// Resolved settings: every value explicit (recorded in `stack.json`).
#[derive(Clone, Debug, Deserialize, Serialize, PartialEq)]
pub struct GroundSettings {
    pub max_object_m: f64,
    pub slope: f64,
    pub elevation_threshold_m: f64,
    pub slope_scale_m: f64,
    pub window: String,
    pub reach_m: f64,
    /// `None`: no NDVI guidance.
    pub ndvi_max: Option<f64>,
}

impl Default for GroundSettings {
    fn default() -> Self {
        GroundSettings {
            max_object_m: DEFAULT_MAX_OBJECT_M,
            slope: DEFAULT_SLOPE,
            elevation_threshold_m: DEFAULT_ELEVATION_THRESHOLD_M,
            slope_scale_m: DEFAULT_SLOPE_SCALE_M,
            window: "square".into(),
            reach_m: DEFAULT_MAX_OBJECT_M,
            ndvi_max: None,
        }
    }
}

impl GroundSettings {
    /// Merges the recipe's `[ground]` table with the flags (flags win) and checks the
    /// values. The reach defaults to the largest object's width.
    pub fn resolve(file: &GroundSection, flags: &GroundSection) -> Result<GroundSettings> {
        let d = GroundSettings::default();
        let pick = |a: Option<f64>, b: Option<f64>, default: f64| a.or(b).unwrap_or(default);
        let max_object_m = pick(flags.max_object_m, file.max_object_m, d.max_object_m);
        let window = flags
            .window
            .clone()
            .or_else(|| file.window.clone())
            .unwrap_or(d.window);
        if window != "square" && window != "disc" {
            return Err(Error::usage(format!(
                "ground filter window {window:?} is not square or disc"
            ))
            .with_fix("use --ground-window square (the default) or disc"));
        }
        let guided = flags.ndvi.or(file.ndvi).unwrap_or(false);
        let ndvi_max = flags
            .ndvi_max
            .or(file.ndvi_max)
            .or(guided.then_some(DEFAULT_NDVI_MAX));
        let s = GroundSettings {
            max_object_m,
            slope: pick(flags.slope, file.slope, d.slope),
            elevation_threshold_m: pick(
                flags.elevation_threshold_m,
                file.elevation_threshold_m,
                d.elevation_threshold_m,
            ),
            slope_scale_m: pick(flags.slope_scale_m, file.slope_scale_m, d.slope_scale_m),
            window,
            reach_m: pick(flags.reach_m, file.reach_m, max_object_m),
            ndvi_max,
        };
        s.params()
            .check("--ground-* flags or the recipe's [ground] table")?;
        Ok(s)
    }

    /// The filter's parameters.
    pub fn params(&self) -> GroundParams {
        GroundParams {
            max_object_m: self.max_object_m,
            slope: self.slope,
            elevation_threshold_m: self.elevation_threshold_m,
            slope_scale_m: self.slope_scale_m,
            shape: if self.window == "disc" {
                WindowShape::Disc
            } else {
                WindowShape::Square
            },
            reach_m: self.reach_m,
            ndvi_max: self.ndvi_max,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn flags_win_and_the_reach_follows_the_largest_object() {
        let file = GroundSection {
            max_object_m: Some(30.0),
            slope: Some(0.2),
            ..GroundSection::default()
        };
        let flags = GroundSection {
            slope: Some(0.1),
            ndvi: Some(true),
            ..GroundSection::default()
        };
        let s = GroundSettings::resolve(&file, &flags).unwrap();
        assert_eq!((s.max_object_m, s.slope, s.reach_m), (30.0, 0.1, 30.0));
        assert_eq!(s.ndvi_max, Some(DEFAULT_NDVI_MAX));
        let d = GroundSettings::resolve(&GroundSection::default(), &GroundSection::default());
        assert_eq!(d.unwrap(), GroundSettings::default());
        let bad = GroundSection {
            max_object_m: Some(-1.0),
            ..GroundSection::default()
        };
        assert!(GroundSettings::resolve(&bad, &GroundSection::default()).is_err());
    }
}

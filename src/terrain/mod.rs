//! Terrain derivatives of a DSM block: the kernels the stack executor calls.
//!
//! Every kernel is a pure function of one block of elevations plus its halo (f32 or f64 as
//! the DSM stores them, NaN = nodata; see [`DsmSample`]) and the block's cell sizes in
//! metres per row. [`compute`] evaluates a list of
//! [`TerrainFeature`]s in one pass, sharing intermediates: one set of 3x3 partial
//! derivatives per estimator, one set of exact window sums per window radius and shape.
//!
//! Conventions (docs/methods.md): x east, y north, rows increase southward; slope and aspect in
//! degrees, aspect clockwise from north towards the downslope direction; curvatures in 1/m,
//! convex positive; heights in metres.
//!
//! Determinism: a cell's value depends only on the data and the cell's position, never on
//! the block's origin, size or the thread count. 3x3 features are pointwise functions of
//! nine cells; window sums use exact integer arithmetic (see [`window_sums`]); running
//! extrema are exact. Two runs with different blocks or thread counts are bit-identical.
//!
//! Cost per output cell: 3x3 features and square windows O(1) whatever the radius; disc
//! windows O(r/h) (one row segment per window row); the multi-scale quadratic fit O(1).
//! `z_factor` should be finite and positive (the command line checks it).
//!
//! Outputs are analysis aids for mapping and classification, not engineering assessments
//! of ground stability or access; those defer to local codes and licensed practice.

pub mod arctan;
pub mod catalogue;
pub mod curvature;
pub mod derivatives;
pub mod position;
pub mod precision;
pub mod quadratic_fit;
pub mod roughness;
pub mod running_extrema;
pub mod slope;
pub mod vrm;
pub mod window_sums;

use std::collections::BTreeMap;

use ndarray::{s, Array2, ArrayView2, Zip};

use crate::error::{Error, Result};
use crate::grid::CellSizes;

pub use catalogue::{catalogue, FeatureDoc};
use derivatives::{Derivatives, Pointwise};
use window_sums::{Layout, QuantisedField};

/// A stored elevation sample: f32 or f64. Kernels widen it exactly to f64 (then multiply
/// by the z-factor), so an f64 DSM keeps its precision through every kernel and is
/// rounded once, to the f32 of the output band. Two windowed paths quantise elevations
/// (exact integer sums, for bit-identical blocks): TPI, DEV and roughness to 2⁻²⁰ m
/// (error ≤ 0.48 µm per cell, see [`window_sums`]), and the multi-scale quadratic fit to
/// the same quantum (its effect on curvature is stated in [`quadratic_fit`]); the 3x3
/// estimators, VRM and the window extrema work on the f64 values themselves.
pub trait DsmSample: Copy + Send + Sync + Into<f64> + 'static {
    /// The storage precision's spacing (ulp) at elevation `z`, metres (before the z factor).
    fn spacing_at(z: f64) -> f64;
}

impl DsmSample for f32 {
    fn spacing_at(z: f64) -> f64 {
        let z = (z.abs() as f32).max(f32::MIN_POSITIVE);
        (f32::from_bits(z.to_bits() + 1) - z) as f64
    }
}

impl DsmSample for f64 {
    fn spacing_at(z: f64) -> f64 {
        let z = z.abs().max(f64::MIN_POSITIVE);
        f64::from_bits(z.to_bits() + 1) - z
    }
}

/// How first and second partial derivatives are estimated.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum SlopeMethod {
    /// Horn 1981 3x3 weighted differences (first derivatives only).
    Horn,
    /// Zevenbergen & Thorne 1987 3x3 partial quartic.
    ZevenbergenThorne,
    /// Evans 1979 / Young 1978 3x3 least-squares quadratic.
    EvansYoung,
    /// Wood 1996 least-squares quadratic over an n x n window (multi-scale).
    Quadratic,
}

impl SlopeMethod {
    /// Stable lower-case name used in band names and metadata.
    pub fn name(self) -> &'static str {
        match self {
            SlopeMethod::Horn => "horn",
            SlopeMethod::ZevenbergenThorne => "zevenbergen_thorne",
            SlopeMethod::EvansYoung => "evans_young",
            SlopeMethod::Quadratic => "quadratic",
        }
    }
}

/// Which cells form a window of radius r metres. The default is the square: its cost per
/// cell does not grow with the radius (integral images, as in Lindsay, Cockburn & Russell
/// 2015, docs/methods.md), so the large radii of multi-scale position cost what the small
/// ones do; the exact disc costs O(r/h) per cell.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Default)]
pub enum WindowShape {
    /// Cells whose centres lie within r of the centre cell's centre (centre included).
    Disc,
    /// The (2kx+1) x (2ky+1) cells with kx = ⌊r/hx⌋, ky = ⌊r/hy⌋ at the centre row.
    #[default]
    Square,
}

impl WindowShape {
    /// Stable lower-case name ("disc", "square").
    pub fn name(self) -> &'static str {
        match self {
            WindowShape::Disc => "disc",
            WindowShape::Square => "square",
        }
    }
}

/// Parameters shared by every terrain feature of a run.
#[derive(Clone, Debug, PartialEq)]
pub struct TerrainParams {
    /// A windowed feature needs at least this fraction of its window's cells valid (cells
    /// beyond the raster count as nodata), else it is NaN. Default 0.75.
    pub min_valid_fraction: f64,
    /// Multiplies every elevation before anything else (e.g. 0.3048 for DSMs in feet).
    pub z_factor: f64,
    /// Window shape of windowed statistics. Default square.
    pub shape: WindowShape,
}

impl Default for TerrainParams {
    fn default() -> Self {
        TerrainParams {
            min_valid_fraction: 0.75,
            z_factor: 1.0,
            shape: WindowShape::default(),
        }
    }
}

/// One output band of terrain analysis.
#[derive(Clone, Debug, PartialEq)]
pub enum TerrainFeature {
    /// Elevation × z_factor, metres.
    Elevation,
    /// Slope angle, degrees. `scale_m` (fit radius) only with [`SlopeMethod::Quadratic`].
    Slope {
        method: SlopeMethod,
        scale_m: Option<f64>,
    },
    /// Downslope direction, degrees clockwise from north; NaN on flat cells.
    Aspect {
        method: SlopeMethod,
        scale_m: Option<f64>,
    },
    /// cos(aspect), unitless; 0 on flat cells.
    Northness {
        method: SlopeMethod,
        scale_m: Option<f64>,
    },
    /// sin(aspect), unitless; 0 on flat cells.
    Eastness {
        method: SlopeMethod,
        scale_m: Option<f64>,
    },
    /// Normal curvature along the slope line kn, 1/m.
    ProfileCurvature {
        method: SlopeMethod,
        scale_m: Option<f64>,
    },
    /// Curvature of the contour line kc, 1/m.
    PlanCurvature {
        method: SlopeMethod,
        scale_m: Option<f64>,
    },
    /// Normal curvature along the contour kt, 1/m.
    TangentialCurvature {
        method: SlopeMethod,
        scale_m: Option<f64>,
    },
    /// Mean curvature H, 1/m.
    MeanCurvature {
        method: SlopeMethod,
        scale_m: Option<f64>,
    },
    /// Gaussian curvature K, 1/m².
    GaussianCurvature {
        method: SlopeMethod,
        scale_m: Option<f64>,
    },
    /// Topographic position index z − mean, metres.
    Tpi { radius_m: f64 },
    /// Deviation from mean elevation (z − mean)/std, unitless.
    Dev { radius_m: f64 },
    /// Population standard deviation of elevation, metres.
    Roughness { radius_m: f64 },
    /// Standard deviation of residuals from the least-squares plane, metres.
    RoughnessDetrended { radius_m: f64 },
    /// Terrain ruggedness index (Riley et al. 1999) on 3x3, metres.
    Tri,
    /// Vector ruggedness measure (Sappington et al. 2007), unitless 0..1.
    Vrm { radius_m: f64 },
    /// z − window minimum, metres.
    RelativeElevation { radius_m: f64 },
    /// Window maximum − minimum, metres.
    LocalRelief { radius_m: f64 },
}

/// Formats a radius for band names: shortest decimal form ("5", "2.5", "0.25").
fn radius_label(r: f64) -> String {
    format!("{r}")
}

/// Window radius in cells for radius `r` metres and cell size `h` metres: ⌊r/h⌋, with a
/// relative tolerance of 1e-9 so that r = k·h given in decimal counts k cells.
pub fn radius_cells(r: f64, h: f64) -> usize {
    if !(r.is_finite() && h.is_finite() && h > 0.0 && r > 0.0) {
        return 0;
    }
    (r / h * (1.0 + 1e-9)).floor() as usize
}

/// Smallest window radius a windowed feature (or the multi-scale fit) accepts, in cells of
/// the grid on each axis: 1.5 cells gives at least the full 3x3 neighbourhood (a disc of
/// radius 1.5·h holds all nine cells, since √2 < 1.5). Below one cell a window is the
/// centre alone, where TPI, DEV, roughness and relief are 0 whatever the terrain.
pub const MIN_RADIUS_CELLS: f64 = 1.5;

/// Checks a window radius as typed (`origin` names where it came from, e.g. `--scales` or
/// `` `tpi@5` in --features ``): it must be a finite number of metres above 0. The one
/// check of radius values; [`validate_window_radius`] adds the grid's checks.
pub fn check_radius_value(r: f64, origin: &str) -> Result<()> {
    if r.is_finite() && r > 0.0 {
        return Ok(());
    }
    Err(Error::usage(format!(
        "window radius {r} ({origin}) is not a positive number of metres"
    ))
    .with_fix("give window radii in metres above 0, e.g. `--scales 0.5,2,10` or `tpi@5`"))
}

/// Checks a window radius of `r` metres against the grid it will be used on: a valid
/// value ([`check_radius_value`]) that spans at least [`MIN_RADIUS_CELLS`] cells along x
/// and along y, for the largest cell sizes of the grid (`hx_max`, `hy_max`, metres; on
/// geographic grids those of the row where cells are widest). `origin` names the flag,
/// word or recipe key the radius came from. Every windowed radius of a plan goes through
/// this one function.
pub fn validate_window_radius(r: f64, origin: &str, hx_max: f64, hy_max: f64) -> Result<()> {
    check_radius_value(r, origin)?;
    let h = hx_max.max(hy_max);
    let cells = r / h;
    // Same decimal tolerance as `radius_cells`: 0.15 m at 0.1 m cells is 1.5 cells.
    if cells * (1.0 + 1e-9) < MIN_RADIUS_CELLS {
        return Err(Error::usage(format!(
            "window radius {r} m ({origin}) spans only {cells:.3} cells of {h} m; windowed \
             features need at least {MIN_RADIUS_CELLS} cells on each axis (smaller windows \
             hold the centre cell and hardly any neighbour)"
        ))
        .with_fix(format!(
            "use radii of at least {} m on this grid, or a finer --resolution",
            MIN_RADIUS_CELLS * h
        )));
    }
    Ok(())
}

impl TerrainFeature {
    /// The (method, scale) pair of a derivative-based feature.
    fn derivative_spec(&self) -> Option<(SlopeMethod, Option<f64>)> {
        use TerrainFeature::*;
        match self {
            Slope { method, scale_m }
            | Aspect { method, scale_m }
            | Northness { method, scale_m }
            | Eastness { method, scale_m }
            | ProfileCurvature { method, scale_m }
            | PlanCurvature { method, scale_m }
            | TangentialCurvature { method, scale_m }
            | MeanCurvature { method, scale_m }
            | GaussianCurvature { method, scale_m } => Some((*method, *scale_m)),
            _ => None,
        }
    }

    /// The (method, fit radius) of a curvature feature (profile, plan, tangential, mean,
    /// Gaussian); `None` for every other feature.
    pub fn curvature_spec(&self) -> Option<(SlopeMethod, Option<f64>)> {
        use TerrainFeature::*;
        match self {
            ProfileCurvature { .. }
            | PlanCurvature { .. }
            | TangentialCurvature { .. }
            | MeanCurvature { .. }
            | GaussianCurvature { .. } => self.derivative_spec(),
            _ => None,
        }
    }

    /// Whether this curvature needs a slope direction (kn, kc, kt): such layers are
    /// nodata where the gradient is within [`curvature::GRADIENT_SIGNIFICANCE`] standard
    /// errors of zero.
    pub fn needs_direction(&self) -> bool {
        matches!(
            self,
            TerrainFeature::ProfileCurvature { .. }
                | TerrainFeature::PlanCurvature { .. }
                | TerrainFeature::TangentialCurvature { .. }
        )
    }

    /// The pointwise function of the derivatives this feature is, if any.
    fn pointwise(&self) -> Option<Pointwise> {
        Some(match self {
            TerrainFeature::Slope { .. } => Pointwise::Slope,
            TerrainFeature::Aspect { .. } => Pointwise::Aspect,
            TerrainFeature::Northness { .. } => Pointwise::Northness,
            TerrainFeature::Eastness { .. } => Pointwise::Eastness,
            TerrainFeature::ProfileCurvature { .. } => Pointwise::Profile,
            TerrainFeature::PlanCurvature { .. } => Pointwise::Plan,
            TerrainFeature::TangentialCurvature { .. } => Pointwise::Tangential,
            TerrainFeature::MeanCurvature { .. } => Pointwise::Mean,
            TerrainFeature::GaussianCurvature { .. } => Pointwise::Gaussian,
            _ => return None,
        })
    }

    /// Window radius in metres of a window-statistics feature.
    fn window_radius(&self) -> Option<f64> {
        use TerrainFeature::*;
        match self {
            Tpi { radius_m }
            | Dev { radius_m }
            | Roughness { radius_m }
            | RoughnessDetrended { radius_m }
            | Vrm { radius_m }
            | RelativeElevation { radius_m }
            | LocalRelief { radius_m } => Some(*radius_m),
            _ => None,
        }
    }

    /// Stable band name, lower-case `[a-z0-9_.]`: "slope_horn", "tpi_r5m",
    /// "slope_quadratic_r2.5m".
    pub fn band_name(&self) -> String {
        let key = self.feature_key();
        if let Some((method, scale)) = self.derivative_spec() {
            return match scale {
                Some(r) if method == SlopeMethod::Quadratic => {
                    format!("{key}_{}_r{}m", method.name(), radius_label(r))
                }
                _ => format!("{key}_{}", method.name()),
            };
        }
        match self {
            TerrainFeature::RoughnessDetrended { radius_m } => {
                format!("roughness_detrended_r{}m", radius_label(*radius_m))
            }
            _ => match self.window_radius() {
                Some(r) => format!("{key}_r{}m", radius_label(r)),
                None => key.to_string(),
            },
        }
    }

    /// The docs/design.md `feature` value: "slope", "tpi", "roughness", ...
    pub fn feature_key(&self) -> &'static str {
        use TerrainFeature::*;
        match self {
            Elevation => "elevation",
            Slope { .. } => "slope",
            Aspect { .. } => "aspect",
            Northness { .. } => "northness",
            Eastness { .. } => "eastness",
            ProfileCurvature { .. } => "profile_curvature",
            PlanCurvature { .. } => "plan_curvature",
            TangentialCurvature { .. } => "tangential_curvature",
            MeanCurvature { .. } => "mean_curvature",
            GaussianCurvature { .. } => "gaussian_curvature",
            Tpi { .. } => "tpi",
            Dev { .. } => "dev",
            Roughness { .. } | RoughnessDetrended { .. } => "roughness",
            Tri => "tri",
            Vrm { .. } => "vrm",
            RelativeElevation { .. } => "relative_elevation",
            LocalRelief { .. } => "local_relief",
        }
    }

    /// The method label for metadata: the derivative estimator, "riley" for TRI,
    /// "detrended" for detrended roughness, `None` for elevation. Windowed statistics
    /// report their window shape through [`TerrainFeature::method_with_shape`].
    pub fn method(&self) -> Option<String> {
        if let Some((m, _)) = self.derivative_spec() {
            return Some(m.name().to_string());
        }
        match self {
            TerrainFeature::Elevation => None,
            TerrainFeature::Tri => Some("riley".into()),
            TerrainFeature::RoughnessDetrended { .. } => Some("detrended_square".into()),
            _ => Some("square".into()),
        }
    }

    /// Like [`TerrainFeature::method`], with the window shape actually used.
    pub fn method_with_shape(&self, shape: WindowShape) -> Option<String> {
        match self {
            TerrainFeature::RoughnessDetrended { .. } => {
                Some(format!("detrended_{}", shape.name()))
            }
            f if f.window_radius().is_some() => Some(shape.name().to_string()),
            f => f.method(),
        }
    }

    /// Window radius in metres for windowed features (and the multi-scale fit).
    pub fn scale_m(&self) -> Option<f64> {
        self.window_radius()
            .or_else(|| self.derivative_spec().and_then(|(_, s)| s))
    }

    /// Units: "degrees", "metres", "1/m", "1/m2" (Gaussian curvature) or "unitless".
    pub fn units(&self) -> &'static str {
        use TerrainFeature::*;
        match self {
            Slope { .. } | Aspect { .. } => "degrees",
            Elevation | Tpi { .. } | Roughness { .. } | RoughnessDetrended { .. } | Tri => "metres",
            RelativeElevation { .. } | LocalRelief { .. } => "metres",
            ProfileCurvature { .. }
            | PlanCurvature { .. }
            | TangentialCurvature { .. }
            | MeanCurvature { .. } => "1/m",
            GaussianCurvature { .. } => "1/m2",
            Northness { .. } | Eastness { .. } | Dev { .. } | Vrm { .. } => "unitless",
        }
    }

    /// Window radius in cells (x, y) for cell size (`hx`, `hy`) metres: 1 for 3x3
    /// features, ⌊r/h⌋ for windows of radius r, 0 for elevation.
    pub fn window_px(&self, hx: f64, hy: f64) -> (usize, usize) {
        if let Some(r) = self.window_radius() {
            return (radius_cells(r, hx), radius_cells(r, hy));
        }
        match self.derivative_spec() {
            Some((SlopeMethod::Quadratic, Some(r))) => {
                (radius_cells(r, hx).max(1), radius_cells(r, hy).max(1))
            }
            Some(_) => (1, 1),
            None if *self == TerrainFeature::Tri => (1, 1),
            None => (0, 0),
        }
    }

    /// Cells of context needed on every side. Pass the smallest cell sizes of the raster
    /// (on geographic grids, those of the row nearest a pole) so every block gets enough.
    pub fn halo_px(&self, hx: f64, hy: f64) -> usize {
        let (x, y) = self.window_px(hx, hy);
        let extra = usize::from(matches!(self, TerrainFeature::Vrm { .. }));
        x.max(y) + extra
    }

    /// Features from a comma-separated list of words, each windowed word carrying its
    /// radius as `@METRES` (e.g. `"slope,tpi@5,slope:quadratic@2.5"`).
    pub fn parse(text: &str) -> Result<Vec<TerrainFeature>> {
        let words: Vec<String> = text
            .split(',')
            .map(|w| w.trim().to_string())
            .filter(|w| !w.is_empty())
            .collect();
        expand(&words, &[])
    }
}

/// The feature words [`expand`] understands, with a one-line description each.
pub const FEATURE_WORDS: &[(&str, &str)] = &[
    ("elevation", "elevation × z factor"),
    (
        "slope",
        "slope, Horn; slope:zt, slope:ey, slope:quadratic (over the scales)",
    ),
    ("aspect", "aspect (same method suffixes as slope)"),
    ("northness", "cos(aspect) (same method suffixes)"),
    ("eastness", "sin(aspect) (same method suffixes)"),
    (
        "curvature",
        "all five curvatures, Evans–Young; curvature:zt, curvature:quadratic",
    ),
    (
        "profile_curvature",
        "profile curvature kn (suffixes as curvature)",
    ),
    ("plan_curvature", "plan curvature kc"),
    ("tangential_curvature", "tangential curvature kt"),
    ("mean_curvature", "mean curvature H"),
    ("gaussian_curvature", "Gaussian curvature K"),
    ("tpi", "topographic position index, per scale"),
    ("dev", "deviation from mean elevation, per scale"),
    ("roughness", "standard deviation of elevation, per scale"),
    (
        "roughness_detrended",
        "std of residuals from a fitted plane, per scale",
    ),
    ("tri", "terrain ruggedness index, 3x3"),
    ("vrm", "vector ruggedness measure, per scale"),
    ("relative_elevation", "z − window minimum, per scale"),
    ("local_relief", "window maximum − minimum, per scale"),
];

fn valid_words() -> String {
    FEATURE_WORDS
        .iter()
        .map(|(w, _)| *w)
        .collect::<Vec<_>>()
        .join(", ")
}

fn parse_method(word: &str, suffix: Option<&str>, curvature: bool) -> Result<SlopeMethod> {
    let m = match suffix {
        None => {
            if curvature {
                SlopeMethod::EvansYoung
            } else {
                SlopeMethod::Horn
            }
        }
        Some("horn") if !curvature => SlopeMethod::Horn,
        Some("zt") => SlopeMethod::ZevenbergenThorne,
        Some("ey") => SlopeMethod::EvansYoung,
        Some("quadratic") => SlopeMethod::Quadratic,
        Some(other) => {
            let valid = if curvature {
                "zt, ey, quadratic (Horn 1981 gives no second derivatives)"
            } else {
                "horn, zt, ey, quadratic"
            };
            return Err(
                Error::usage(format!("unknown method `{other}` in feature word `{word}`"))
                    .with_fix(format!("use one of: {valid}")),
            );
        }
    };
    Ok(m)
}

fn parse_radius(word: &str, text: &str) -> Result<f64> {
    let origin = format!("`{word}`");
    match text.parse::<f64>() {
        Ok(r) => check_radius_value(r, &origin).map(|_| r),
        Err(_) => Err(Error::usage(format!(
            "feature word `{word}` has radius `{text}`, which is not a number of metres"
        ))
        .with_fix("write the radius in metres after `@`, e.g. `tpi@5`")),
    }
}

/// Features from CLI words and scales: windowed words (tpi, dev, roughness,
/// roughness_detrended, vrm, relative_elevation, local_relief, and any `:quadratic`
/// derivative) expand over `scales_m` (radii in metres) unless they carry `@METRES`.
/// Duplicates are dropped, order is kept. An unknown word is an error listing the valid ones.
pub fn expand(words: &[String], scales_m: &[f64]) -> Result<Vec<TerrainFeature>> {
    for &s in scales_m {
        check_radius_value(s, "--scales")?;
    }
    let mut out: Vec<TerrainFeature> = Vec::new();
    for raw in words {
        let word = raw.trim().to_ascii_lowercase();
        let (body, explicit) = match word.split_once('@') {
            Some((b, r)) => (b.to_string(), Some(parse_radius(&word, r)?)),
            None => (word.clone(), None),
        };
        let (base, suffix) = match body.split_once(':') {
            Some((b, m)) => (b.to_string(), Some(m.to_string())),
            None => (body.clone(), None),
        };
        let radii: Vec<f64> = match explicit {
            Some(r) => vec![r],
            None => scales_m.to_vec(),
        };
        let need_radii = |out_len: usize| -> Result<()> {
            if out_len == 0 {
                Err(Error::usage(format!(
                    "feature word `{word}` needs a window radius, and no scales were given"
                ))
                .with_fix("add `--scales METRES,...` or write the radius as `WORD@METRES`"))
            } else {
                Ok(())
            }
        };
        use TerrainFeature as F;
        type Ctor = fn(SlopeMethod, Option<f64>) -> TerrainFeature;
        let derivative: Option<(Vec<Ctor>, bool)> = match base.as_str() {
            "slope" => Some((
                vec![|m, s| F::Slope {
                    method: m,
                    scale_m: s,
                }],
                false,
            )),
            "aspect" => Some((
                vec![|m, s| F::Aspect {
                    method: m,
                    scale_m: s,
                }],
                false,
            )),
            "northness" => Some((
                vec![|m, s| F::Northness {
                    method: m,
                    scale_m: s,
                }],
                false,
            )),
            "eastness" => Some((
                vec![|m, s| F::Eastness {
                    method: m,
                    scale_m: s,
                }],
                false,
            )),
            "profile_curvature" => Some((
                vec![|m, s| F::ProfileCurvature {
                    method: m,
                    scale_m: s,
                }],
                true,
            )),
            "plan_curvature" => Some((
                vec![|m, s| F::PlanCurvature {
                    method: m,
                    scale_m: s,
                }],
                true,
            )),
            "tangential_curvature" => Some((
                vec![|m, s| F::TangentialCurvature {
                    method: m,
                    scale_m: s,
                }],
                true,
            )),
            "mean_curvature" => Some((
                vec![|m, s| F::MeanCurvature {
                    method: m,
                    scale_m: s,
                }],
                true,
            )),
            "gaussian_curvature" => Some((
                vec![|m, s| F::GaussianCurvature {
                    method: m,
                    scale_m: s,
                }],
                true,
            )),
            "curvature" => Some((
                vec![
                    |m, s| F::ProfileCurvature {
                        method: m,
                        scale_m: s,
                    },
                    |m, s| F::PlanCurvature {
                        method: m,
                        scale_m: s,
                    },
                    |m, s| F::TangentialCurvature {
                        method: m,
                        scale_m: s,
                    },
                    |m, s| F::MeanCurvature {
                        method: m,
                        scale_m: s,
                    },
                    |m, s| F::GaussianCurvature {
                        method: m,
                        scale_m: s,
                    },
                ],
                true,
            )),
            _ => None,
        };
        let mut produced: Vec<TerrainFeature> = Vec::new();
        if let Some((ctors, curvature)) = derivative {
            let method = parse_method(&word, suffix.as_deref(), curvature)?;
            if method == SlopeMethod::Quadratic {
                need_radii(radii.len())?;
                for &r in &radii {
                    for c in &ctors {
                        produced.push(c(method, Some(r)));
                    }
                }
            } else {
                if explicit.is_some() {
                    return Err(Error::usage(format!(
                        "feature word `{word}` is a 3x3 estimate and takes no radius"
                    ))
                    .with_fix(
                        "drop the `@METRES`, or use the `:quadratic` method for a multi-scale fit",
                    ));
                }
                for c in &ctors {
                    produced.push(c(method, None));
                }
            }
        } else {
            if suffix.is_some() {
                return Err(Error::usage(format!(
                    "feature word `{word}` takes no `:method` suffix"
                ))
                .with_fix(format!("valid words: {}", valid_words())));
            }
            let windowed: Option<fn(f64) -> TerrainFeature> = match base.as_str() {
                "tpi" => Some(|r| F::Tpi { radius_m: r }),
                "dev" => Some(|r| F::Dev { radius_m: r }),
                "roughness" => Some(|r| F::Roughness { radius_m: r }),
                "roughness_detrended" => Some(|r| F::RoughnessDetrended { radius_m: r }),
                "vrm" => Some(|r| F::Vrm { radius_m: r }),
                "relative_elevation" => Some(|r| F::RelativeElevation { radius_m: r }),
                "local_relief" => Some(|r| F::LocalRelief { radius_m: r }),
                _ => None,
            };
            match (base.as_str(), windowed) {
                (_, Some(ctor)) => {
                    need_radii(radii.len())?;
                    produced.extend(radii.iter().map(|&r| ctor(r)));
                }
                ("elevation", None) | ("tri", None) => {
                    if explicit.is_some() {
                        return Err(
                            Error::usage(format!("feature word `{word}` takes no radius"))
                                .with_fix("drop the `@METRES`"),
                        );
                    }
                    produced.push(if base == "tri" { F::Tri } else { F::Elevation });
                }
                _ => {
                    return Err(
                        Error::usage(format!("unknown terrain feature word `{base}`"))
                            .with_fix(format!("valid words: {}", valid_words())),
                    )
                }
            }
        }
        for f in produced {
            if !out.contains(&f) {
                out.push(f);
            }
        }
    }
    Ok(out)
}

/// Row-indexed cell sizes (metres) that never index out of range: rows past the end
/// repeat the last entry; an empty list reads as 1 m.
#[derive(Clone, Copy, Debug)]
pub struct RowSizes<'a> {
    cells: &'a CellSizes,
}

impl<'a> RowSizes<'a> {
    /// Wraps a block's cell sizes.
    pub fn new(cells: &'a CellSizes) -> Self {
        RowSizes { cells }
    }
    /// East-west cell size of block row `row`.
    pub fn hx(&self, row: usize) -> f64 {
        let v = &self.cells.hx;
        v.get(row).or(v.last()).copied().unwrap_or(1.0)
    }
    /// North-south cell size of block row `row`.
    pub fn hy(&self, row: usize) -> f64 {
        let v = &self.cells.hy;
        v.get(row).or(v.last()).copied().unwrap_or(1.0)
    }
}

/// Key of a set of first and second derivatives: the estimator and the fit radius.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord)]
struct DerivKey {
    method: SlopeMethod,
    scale_bits: u64,
}

/// Computes `features` for the interior of `z` (z includes `halo` cells on every side);
/// `cells` has one entry per row of `z` (metres). Returns one array per feature, each of
/// shape (z.nrows() − 2·halo, z.ncols() − 2·halo) (empty when z is smaller than its halo).
/// `reference_z` is a global elevation offset chosen by the caller, the same for every
/// block of a raster (e.g. a round number near the raster's median elevation): window sums
/// quantise z·z_factor − reference_z exactly (see [`window_sums`]).
///
/// The block's halo must be at least [`TerrainFeature::halo_px`] of every feature for the
/// interior to be complete; cells the window would need beyond the array count as nodata.
pub fn compute<T: DsmSample>(
    features: &[TerrainFeature],
    z: ArrayView2<T>,
    cells: &CellSizes,
    halo: usize,
    reference_z: f64,
    params: &TerrainParams,
) -> Vec<Array2<f32>> {
    let (nr, nc) = z.dim();
    let out_r = nr.saturating_sub(2 * halo);
    let out_c = nc.saturating_sub(2 * halo);
    if out_r == 0 || out_c == 0 {
        return features
            .iter()
            .map(|_| Array2::zeros((out_r, out_c)))
            .collect();
    }
    let sizes = RowSizes::new(cells);
    let zf = params.z_factor;
    let pointwise_of = |f: &TerrainFeature| -> Option<(SlopeMethod, Pointwise)> {
        let (method, scale) = f.derivative_spec()?;
        if method == SlopeMethod::Quadratic && scale.is_some() {
            return None;
        }
        let method = if method == SlopeMethod::Quadratic {
            SlopeMethod::EvansYoung
        } else {
            method
        };
        Some((method, f.pointwise()?))
    };
    let mut outputs: Vec<Option<Array2<f32>>> = vec![None; features.len()];

    // 3x3 features (derivative estimators and TRI) in one fused pass over the block.
    let mut jobs: Vec<(usize, derivatives::PointJob)> = Vec::new();
    for (k, f) in features.iter().enumerate() {
        if *f == TerrainFeature::Tri {
            jobs.push((k, derivatives::PointJob::Tri));
        } else if let Some((m, func)) = pointwise_of(f) {
            jobs.push((k, derivatives::PointJob::Derivative(m, func)));
        }
    }
    if !jobs.is_empty() {
        let list: Vec<derivatives::PointJob> = jobs.iter().map(|(_, j)| *j).collect();
        let res = derivatives::fused_3x3(z, zf, sizes, halo, &list);
        for ((k, _), a) in jobs.iter().zip(res) {
            outputs[*k] = Some(a);
        }
    }
    if outputs.iter().all(Option::is_some) {
        return outputs.into_iter().flatten().collect();
    }

    // Elevations in metres (f64), NaN = nodata.
    let zs: Array2<f64> = z.mapv(|v| v.into() * zf);
    let interior = |a: &Array2<f64>| -> Array2<f32> {
        a.slice(s![halo..halo + out_r, halo..halo + out_c])
            .mapv(|v| v as f32)
    };

    // 3x3 and fitted derivatives, one set per (method, scale).
    let mut derivs: BTreeMap<DerivKey, Derivatives> = BTreeMap::new();
    for f in features {
        if pointwise_of(f).is_some() {
            continue;
        }
        if let Some((method, scale)) = f.derivative_spec() {
            let key = DerivKey {
                method,
                scale_bits: scale.unwrap_or(0.0).to_bits(),
            };
            derivs.entry(key).or_insert_with(|| match (method, scale) {
                (SlopeMethod::Quadratic, Some(r)) => {
                    quadratic_fit::fit(&zs, sizes, halo, r, reference_z)
                }
                (SlopeMethod::Quadratic, None) => {
                    derivatives::estimate(&zs, sizes, halo, SlopeMethod::EvansYoung)
                }
                (m, _) => derivatives::estimate(&zs, sizes, halo, m),
            });
        }
    }

    let frac = params.min_valid_fraction;
    let layout_for = |r: f64| Layout::new(params.shape, r, sizes, halo, out_r);

    // Window statistics from exact sums: one pass per radius for TPI, DEV, roughness and
    // detrended roughness together.
    let mut radii: Vec<f64> = Vec::new();
    for f in features {
        if let TerrainFeature::Tpi { radius_m }
        | TerrainFeature::Dev { radius_m }
        | TerrainFeature::Roughness { radius_m }
        | TerrainFeature::RoughnessDetrended { radius_m } = f
        {
            if !radii.iter().any(|r| r.to_bits() == radius_m.to_bits()) {
                radii.push(*radius_m);
            }
        }
    }
    let field = if radii.is_empty() {
        QuantisedField {
            valid: Array2::from_elem((0, 0), false),
            values: Vec::new(),
        }
    } else {
        QuantisedField::new(&zs, reference_z)
    };
    for r in radii {
        let idx: Vec<usize> = features
            .iter()
            .enumerate()
            .filter(|(_, f)| f.window_radius().map(f64::to_bits) == Some(r.to_bits()))
            .filter(|(_, f)| {
                matches!(
                    f,
                    TerrainFeature::Tpi { .. }
                        | TerrainFeature::Dev { .. }
                        | TerrainFeature::Roughness { .. }
                        | TerrainFeature::RoughnessDetrended { .. }
                )
            })
            .map(|(k, _)| k)
            .collect();
        let opt = window_sums::SumOptions {
            squares: idx
                .iter()
                .any(|&k| !matches!(features[k], TerrainFeature::Tpi { .. })),
            // TPI and DEV take the local level from the plane of the valid cells, which
            // needs the plane moments (see `position`); so does detrended roughness.
            plane: idx.iter().any(|&k| {
                matches!(
                    features[k],
                    TerrainFeature::Tpi { .. }
                        | TerrainFeature::Dev { .. }
                        | TerrainFeature::RoughnessDetrended { .. }
                )
            }),
        };
        let layout = layout_for(r);
        let sums = window_sums::WindowSums::new(&field, &layout, halo, out_c, opt);
        let centre = |i: usize, j: usize| -> Option<i64> {
            field.valid[[halo + i, halo + j]].then(|| field.values[0][[halo + i, halo + j]])
        };
        let tpi = |i: usize, j: usize, cells: u64, s: &window_sums::CellSums| {
            position::tpi(centre(i, j), cells, s, frac)
        };
        let dev = |i: usize, j: usize, cells: u64, s: &window_sums::CellSums| {
            position::dev(centre(i, j), cells, s, frac)
        };
        let sd = |_: usize, _: usize, cells: u64, s: &window_sums::CellSums| {
            roughness::std_dev(cells, s, frac)
        };
        let detr = |_: usize, _: usize, cells: u64, s: &window_sums::CellSums| {
            roughness::detrended_std(cells, s, frac)
        };
        let stats: Vec<window_sums::CellStat> = idx
            .iter()
            .map(|&k| -> window_sums::CellStat {
                match features[k] {
                    TerrainFeature::Tpi { .. } => &tpi,
                    TerrainFeature::Dev { .. } => &dev,
                    TerrainFeature::Roughness { .. } => &sd,
                    _ => &detr,
                }
            })
            .collect();
        for (k, a) in idx.iter().zip(sums.map(&stats)) {
            outputs[*k] = Some(a.mapv(|v| v as f32));
        }
    }

    // Relative elevation and local relief: exact running extrema plus valid counts.
    let mask_field = window_sums::QuantisedField {
        valid: zs.mapv(f64::is_finite),
        values: Vec::new(),
    };
    let mut radii: Vec<f64> = Vec::new();
    for f in features {
        if let TerrainFeature::RelativeElevation { radius_m }
        | TerrainFeature::LocalRelief { radius_m } = f
        {
            if !radii.iter().any(|r| r.to_bits() == radius_m.to_bits()) {
                radii.push(*radius_m);
            }
        }
    }
    for r in radii {
        let layout = layout_for(r);
        let ex = running_extrema::Extrema::compute(&zs, &layout, halo, out_c);
        let counts = window_sums::WindowSums::new(
            &mask_field,
            &layout,
            halo,
            out_c,
            window_sums::SumOptions {
                squares: false,
                plane: false,
            },
        );
        let rel = |i: usize, j: usize, cells: u64, s: &window_sums::CellSums| {
            position::relative_elevation(zs[[halo + i, halo + j]], &ex, i, j, cells, s.n, frac)
        };
        let relief = |i: usize, j: usize, cells: u64, s: &window_sums::CellSums| {
            position::local_relief(&ex, i, j, cells, s.n, frac)
        };
        let res = counts.map(&[&rel, &relief]);
        for (k, f) in features.iter().enumerate() {
            match f {
                TerrainFeature::RelativeElevation { radius_m }
                    if radius_m.to_bits() == r.to_bits() =>
                {
                    outputs[k] = Some(res[0].mapv(|v| v as f32));
                }
                TerrainFeature::LocalRelief { radius_m } if radius_m.to_bits() == r.to_bits() => {
                    outputs[k] = Some(res[1].mapv(|v| v as f32));
                }
                _ => {}
            }
        }
    }

    for (k, f) in features.iter().enumerate() {
        if outputs[k].is_some() {
            continue;
        }
        let out: Array2<f32> = match f {
            TerrainFeature::Elevation => interior(&zs),
            TerrainFeature::Vrm { radius_m } => {
                let layout = layout_for(*radius_m);
                vrm::vrm(&zs, sizes, &layout, halo, out_c, frac).mapv(|x| x as f32)
            }
            TerrainFeature::Tpi { .. }
            | TerrainFeature::Dev { .. }
            | TerrainFeature::Roughness { .. }
            | TerrainFeature::RoughnessDetrended { .. }
            | TerrainFeature::RelativeElevation { .. }
            | TerrainFeature::LocalRelief { .. } => unreachable!("computed above"),
            _ => {
                let (method, scale) = f.derivative_spec().expect("derivative feature");
                let key = DerivKey {
                    method,
                    scale_bits: scale.unwrap_or(0.0).to_bits(),
                };
                let dv = &derivs[&key];
                let mut o = Array2::<f32>::zeros((out_r, out_c));
                let pointwise = f.pointwise().expect("derivative feature");
                Zip::indexed(&mut o).par_for_each(|(i, j), o| {
                    *o = pointwise.eval_gated(&dv.at(i, j), dv.g_min[[i, j]]) as f32;
                });
                o
            }
        };
        outputs[k] = Some(out);
    }
    outputs
        .into_iter()
        .map(|o| o.expect("every feature computed"))
        .collect()
}

#[cfg(test)]
pub(crate) mod test_support {
    //! Shared fixtures for the terrain tests: a small deterministic PRNG and surface sampling.

    use ndarray::Array2;

    pub use crate::random::SplitMix64;

    /// Samples `f(x, y)` (x east, y north, metres) on a grid with `h` spacing, centred on
    /// the origin, as f32.
    pub fn sample(
        rows: usize,
        cols: usize,
        hx: f64,
        hy: f64,
        f: impl Fn(f64, f64) -> f64,
    ) -> Array2<f32> {
        let r0 = (rows as f64 - 1.0) / 2.0;
        let c0 = (cols as f64 - 1.0) / 2.0;
        Array2::from_shape_fn((rows, cols), |(i, j)| {
            f((j as f64 - c0) * hx, -(i as f64 - r0) * hy) as f32
        })
    }

    /// A rough random surface with some nodata holes.
    pub fn random_dem(rng: &mut SplitMix64, rows: usize, cols: usize, hole_p: f64) -> Array2<f32> {
        Array2::from_shape_fn((rows, cols), |(i, j)| {
            if rng.next_f64() < hole_p {
                f32::NAN
            } else {
                (100.0
                    + 3.0 * (i as f64 * 0.3).sin()
                    + 2.0 * (j as f64 * 0.2).cos()
                    + rng.next_f64()) as f32
            }
        })
    }
}

#[cfg(test)]
mod tests {
    use super::test_support::*;
    use super::*;
    use approx::assert_relative_eq;

    #[test]
    fn band_names_are_stable() {
        let f = TerrainFeature::Slope {
            method: SlopeMethod::Horn,
            scale_m: None,
        };
        assert_eq!(f.band_name(), "slope_horn");
        assert_eq!(TerrainFeature::Tpi { radius_m: 5.0 }.band_name(), "tpi_r5m");
        let q = TerrainFeature::Slope {
            method: SlopeMethod::Quadratic,
            scale_m: Some(2.5),
        };
        assert_eq!(q.band_name(), "slope_quadratic_r2.5m");
        assert_eq!(q.scale_m(), Some(2.5));
        assert_eq!(
            TerrainFeature::RoughnessDetrended { radius_m: 0.5 }.band_name(),
            "roughness_detrended_r0.5m"
        );
        assert_eq!(TerrainFeature::Tri.band_name(), "tri");
        for f in expand(
            &FEATURE_WORDS
                .iter()
                .map(|(w, _)| w.to_string())
                .collect::<Vec<_>>(),
            &[0.25, 3.0],
        )
        .unwrap()
        {
            let n = f.band_name();
            assert!(
                n.chars()
                    .all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || c == '_' || c == '.'),
                "{n}"
            );
        }
    }

    #[test]
    fn expand_words_over_scales() {
        let words: Vec<String> = ["slope", "curvature:zt", "tpi", "vrm@2", "slope:quadratic"]
            .iter()
            .map(|s| s.to_string())
            .collect();
        let f = expand(&words, &[1.0, 5.0]).unwrap();
        let names: Vec<String> = f.iter().map(|f| f.band_name()).collect();
        assert_eq!(
            names,
            vec![
                "slope_horn",
                "profile_curvature_zevenbergen_thorne",
                "plan_curvature_zevenbergen_thorne",
                "tangential_curvature_zevenbergen_thorne",
                "mean_curvature_zevenbergen_thorne",
                "gaussian_curvature_zevenbergen_thorne",
                "tpi_r1m",
                "tpi_r5m",
                "vrm_r2m",
                "slope_quadratic_r1m",
                "slope_quadratic_r5m",
            ]
        );
    }

    #[test]
    fn unknown_word_lists_valid_ones() {
        let e = expand(&["slop".to_string()], &[1.0])
            .unwrap_err()
            .to_string();
        assert!(e.contains("unknown terrain feature word `slop`"), "{e}");
        assert!(e.contains("roughness_detrended"), "{e}");
        let e = TerrainFeature::parse("tpi").unwrap_err().to_string();
        assert!(e.contains("needs a window radius"), "{e}");
        let e = TerrainFeature::parse("curvature:horn")
            .unwrap_err()
            .to_string();
        assert!(e.contains("Horn"), "{e}");
        assert!(TerrainFeature::parse("tpi@-1").is_err());
        assert!(expand(&["tpi".into()], &[f64::NAN]).is_err());
        assert_eq!(
            TerrainFeature::parse("elevation, tri,tpi@2.5").unwrap(),
            vec![
                TerrainFeature::Elevation,
                TerrainFeature::Tri,
                TerrainFeature::Tpi { radius_m: 2.5 }
            ]
        );
    }

    #[test]
    fn window_radius_must_span_one_and_a_half_cells() {
        // The rule of MIN_RADIUS_CELLS: r/h ≥ 1.5 on the coarser axis, decimal tolerance.
        assert!(validate_window_radius(0.15, "--scales", 0.1, 0.1).is_ok());
        assert!(validate_window_radius(5.0, "--scales", 0.1, 0.1).is_ok());
        let e = validate_window_radius(0.05, "--scales", 0.1, 0.1)
            .unwrap_err()
            .to_string();
        assert!(e.contains("--scales") && e.contains("0.500 cells"), "{e}");
        // Unequal cells: the coarser axis decides (0.2 m / 0.2 m = 1 cell).
        assert!(validate_window_radius(0.2, "`tpi@0.2`", 0.1, 0.2).is_err());
        for bad in [0.0, -5.0, f64::NAN, f64::INFINITY] {
            let e = validate_window_radius(bad, "--scales", 0.1, 0.1)
                .unwrap_err()
                .to_string();
            assert!(e.contains("not a positive number of metres"), "{bad}: {e}");
        }
        assert!(matches!(
            check_radius_value(-1.0, "--scales"),
            Err(Error::Usage { .. })
        ));
    }

    #[test]
    fn window_and_halo_sizes() {
        let t = TerrainFeature::Tpi { radius_m: 0.5 };
        // 0.5 m at 0.05 m cells is exactly 10 cells (decimal input, tolerance 1e-9).
        assert_eq!(t.window_px(0.05, 0.05), (10, 10));
        assert_eq!(t.halo_px(0.05, 0.1), 10);
        assert_eq!(TerrainFeature::Vrm { radius_m: 1.0 }.halo_px(0.5, 0.5), 3);
        assert_eq!(TerrainFeature::Tri.halo_px(1.0, 1.0), 1);
        assert_eq!(TerrainFeature::Elevation.halo_px(1.0, 1.0), 0);
        assert_eq!(TerrainFeature::Tpi { radius_m: 1.0 }.units(), "metres");
        assert_eq!(
            TerrainFeature::GaussianCurvature {
                method: SlopeMethod::EvansYoung,
                scale_m: None
            }
            .units(),
            "1/m2"
        );
    }

    fn all_features(r: f64) -> Vec<TerrainFeature> {
        let words: Vec<String> = FEATURE_WORDS.iter().map(|(w, _)| w.to_string()).collect();
        let mut f = expand(&words, &[r]).unwrap();
        f.extend(
            expand(
                &[
                    "slope:zt".into(),
                    "aspect:ey".into(),
                    "curvature:quadratic".into(),
                ],
                &[r],
            )
            .unwrap(),
        );
        f
    }

    fn block_run(
        feats: &[TerrainFeature],
        dem: &Array2<f32>,
        cells: &CellSizes,
        halo: usize,
        params: &TerrainParams,
        block: (usize, usize),
    ) -> Vec<Array2<f32>> {
        // Pads the DEM with a NaN halo, then computes block by block and stitches.
        let (nr, nc) = dem.dim();
        let mut padded = Array2::<f32>::from_elem((nr + 2 * halo, nc + 2 * halo), f32::NAN);
        padded
            .slice_mut(s![halo..halo + nr, halo..halo + nc])
            .assign(dem);
        let pcells = CellSizes {
            hx: (0..nr + 2 * halo)
                .map(|i| cells.hx[i.saturating_sub(halo).min(nr - 1)])
                .collect(),
            hy: (0..nr + 2 * halo)
                .map(|i| cells.hy[i.saturating_sub(halo).min(nr - 1)])
                .collect(),
        };
        let mut out: Vec<Array2<f32>> = feats.iter().map(|_| Array2::zeros((nr, nc))).collect();
        let mut r0 = 0;
        while r0 < nr {
            let h = block.0.min(nr - r0);
            let mut c0 = 0;
            while c0 < nc {
                let w = block.1.min(nc - c0);
                let view = padded.slice(s![r0..r0 + h + 2 * halo, c0..c0 + w + 2 * halo]);
                let bc = CellSizes {
                    hx: pcells.hx[r0..r0 + h + 2 * halo].to_vec(),
                    hy: pcells.hy[r0..r0 + h + 2 * halo].to_vec(),
                };
                let res = compute(feats, view, &bc, halo, 100.0, params);
                for (o, r) in out.iter_mut().zip(res) {
                    o.slice_mut(s![r0..r0 + h, c0..c0 + w]).assign(&r);
                }
                c0 += w;
            }
            r0 += h;
        }
        out
    }

    fn bits_equal(a: &Array2<f32>, b: &Array2<f32>) -> bool {
        a.dim() == b.dim()
            && a.iter()
                .zip(b.iter())
                .all(|(x, y)| x.to_bits() == y.to_bits())
    }

    #[test]
    fn blocks_and_threads_give_identical_bits() {
        // Determinism requirement: the same raster as one block and as several blocks
        // with halos, and on one thread versus several, must agree bit for bit.
        let mut rng = SplitMix64::new(7);
        let dem = random_dem(&mut rng, 37, 41, 0.05);
        // Geographic-like rows: cell widths shrink northward (row 0 is north).
        let cells = CellSizes {
            hx: (0..37).map(|i| 0.9 + 0.001 * i as f64).collect(),
            hy: vec![1.1; 37],
        };
        for shape in [WindowShape::Disc, WindowShape::Square] {
            let params = TerrainParams {
                shape,
                ..TerrainParams::default()
            };
            let feats = all_features(3.3);
            let halo = feats.iter().map(|f| f.halo_px(0.9, 1.1)).max().unwrap();
            let whole = block_run(&feats, &dem, &cells, halo, &params, (37, 41));
            let tiled = block_run(&feats, &dem, &cells, halo, &params, (10, 7));
            let pool = rayon::ThreadPoolBuilder::new()
                .num_threads(1)
                .build()
                .unwrap();
            let serial = pool.install(|| block_run(&feats, &dem, &cells, halo, &params, (13, 41)));
            for (k, f) in feats.iter().enumerate() {
                assert!(
                    bits_equal(&whole[k], &tiled[k]),
                    "{} differs between block sizes ({shape:?})",
                    f.band_name()
                );
                assert!(
                    bits_equal(&whole[k], &serial[k]),
                    "{} differs with one thread ({shape:?})",
                    f.band_name()
                );
                assert!(
                    whole[k].iter().any(|v| v.is_finite()),
                    "{} all NaN",
                    f.band_name()
                );
            }
        }
    }

    #[test]
    fn one_cell_raster() {
        // Degenerate input: a single valid cell with no neighbours.
        let z = Array2::from_elem((1, 1), 5.0f32);
        let feats = all_features(1.0);
        let mut padded = Array2::from_elem((7, 7), f32::NAN);
        padded[[3, 3]] = 5.0;
        let out = compute(
            &feats,
            padded.view(),
            &CellSizes::uniform(1.0, 1.0, 7),
            3,
            0.0,
            &TerrainParams::default(),
        );
        for (f, o) in feats.iter().zip(&out) {
            assert_eq!(o.dim(), (1, 1));
            if *f == TerrainFeature::Elevation {
                assert_eq!(o[[0, 0]], 5.0);
            } else {
                assert!(o[[0, 0]].is_nan(), "{} should be NaN", f.band_name());
            }
        }
        // A block smaller than its halo gives empty outputs, not a panic.
        let out = compute(
            &feats,
            z.view(),
            &CellSizes::uniform(1.0, 1.0, 1),
            3,
            0.0,
            &TerrainParams::default(),
        );
        assert!(out.iter().all(|o| o.is_empty()));
    }

    #[test]
    fn all_nodata() {
        let z = Array2::from_elem((12, 12), f32::NAN);
        let feats = all_features(2.0);
        let out = compute(
            &feats,
            z.view(),
            &CellSizes::uniform(1.0, 1.0, 12),
            3,
            0.0,
            &TerrainParams::default(),
        );
        for (f, o) in feats.iter().zip(&out) {
            assert!(o.iter().all(|v| v.is_nan()), "{}", f.band_name());
        }
    }

    #[test]
    fn flat_surface() {
        // A flat surface: slope 0, aspect NaN, northness = eastness = 0, curvatures 0 or
        // NaN (kn, kt, kc undefined where the gradient vanishes), TPI, roughness, TRI,
        // VRM, relative elevation and local relief 0, DEV 0 (documented rule).
        let z = Array2::from_elem((15, 15), 42.0f32);
        let feats = all_features(2.0);
        let out = compute(
            &feats,
            z.view(),
            &CellSizes::uniform(0.5, 0.5, 15),
            4,
            40.0,
            &TerrainParams::default(),
        );
        for (f, o) in feats.iter().zip(&out) {
            let v = o[[3, 3]];
            match f {
                TerrainFeature::Elevation => assert_eq!(v, 42.0),
                TerrainFeature::Aspect { .. }
                | TerrainFeature::ProfileCurvature { .. }
                | TerrainFeature::PlanCurvature { .. }
                | TerrainFeature::TangentialCurvature { .. } => {
                    assert!(v.is_nan(), "{} = {v}", f.band_name())
                }
                _ => assert_eq!(v, 0.0, "{}", f.band_name()),
            }
        }
    }

    #[test]
    fn z_factor_scales_heights() {
        // Plane z = 0.3x + 0.4y in feet with z_factor 1 ft = 0.3048 m (international foot):
        // slope = atan(0.3048·0.5) (closed form), elevation in metres.
        let z = sample(9, 9, 1.0, 1.0, |x, y| 0.3 * x + 0.4 * y + 10.0);
        let feats = expand(&["slope".into(), "elevation".into()], &[]).unwrap();
        let p = TerrainParams {
            z_factor: 0.3048,
            ..TerrainParams::default()
        };
        let out = compute(
            &feats,
            z.view(),
            &CellSizes::uniform(1.0, 1.0, 9),
            1,
            0.0,
            &p,
        );
        assert_relative_eq!(
            out[0][[3, 3]] as f64,
            (0.3048f64 * 0.5).atan().to_degrees(),
            epsilon = 1e-4
        );
        assert_relative_eq!(out[1][[3, 3]] as f64, 10.0 * 0.3048, epsilon = 1e-5);
    }
}

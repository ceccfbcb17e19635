//! Ground (DTM), height above ground and a ground mask from a DSM alone: the simple
//! morphological filter of Pingel, Clarke & McBride (2013, ISPRS J. Photogramm. Remote
//! Sens. 77, 21–30, doi:10.1016/j.isprsjprs.2012.12.002) on the raster, optionally guided
//! by NDVI. docs/methods.md, *Ground from the DSM*, states the steps, parameters, defaults
//! and where terrastack departs from the paper.
//!
//! Steps on one block with its halo (metres, NaN = nodata):
//! 1. Minimum surface Z₀: the DSM on the stack's grid (each cell holds one elevation, its
//!    own minimum); with NDVI guidance, cells whose NDVI exceeds the threshold are not
//!    ground candidates and are left out (NaN) of Z₀.
//! 2. Object cells: openings of Z₀ by windows of radius r_k = k·step, k = 1, 2, … up to
//!    half the largest object's width; a cell is an object where the opening by r_k lies
//!    more than slope·r_k below the opening by r_(k−1) ([`opening`]).
//! 3. Provisional ground: Z₀ on the remaining (ground) cells; object and left-out cells
//!    interpolated from the ground cells within the reach ([`fill`]).
//! 4. Classification: a DSM cell is ground where |z − dtm| ≤ elevation threshold +
//!    slope scale · (gradient of the provisional ground, rise over run).
//!
//! Outputs: `dtm` (metres), `height` = DSM − dtm (metres above ground, negative where
//! the DSM dips below the interpolated ground), `ground` (1 ground, 0 above ground, 2 no
//! ground cell within the reach: dtm and height are then nodata) and `ground_distance`
//! (metres from the cell to the nearest ground cell of step 3, nodata beyond the reach).
//!
//! Block independence: every step reads a bounded neighbourhood (2·r_max for the objects,
//! the reach for the interpolation and the distance, one cell for the gradient), so a
//! block whose halo is at least [`GroundParams::halo_px`] computes its interior exactly as
//! a block of any other size would; a test compares the bits.
//!
//! Outputs are analysis aids for mapping vegetation structure, not surveyed ground.

pub mod bands;
pub mod fill;
pub mod opening;
pub mod settings;

use ndarray::{Array2, ArrayView2, Zip};

use crate::error::{Error, Result};
use crate::grid::CellSizes;
use crate::terrain::{RowSizes, WindowShape};

/// Default width of the largest object removed, metres: a large tree crown or a small
/// building on a river-meadow site (terrastack's choice; the paper tunes the maximum
/// window per site).
pub const DEFAULT_MAX_OBJECT_M: f64 = 20.0;
/// Default slope threshold s, rise over run (Pingel et al. 2013's recommended single
/// parameter set, from memory: s = 0.15).
pub const DEFAULT_SLOPE: f64 = 0.15;
/// Default elevation threshold, metres (Pingel et al. 2013, from memory: 0.5 m).
pub const DEFAULT_ELEVATION_THRESHOLD_M: f64 = 0.5;
/// Default elevation scaling factor, metres per unit of gradient (Pingel et al. 2013,
/// from memory: 1.25).
pub const DEFAULT_SLOPE_SCALE_M: f64 = 1.25;
/// Default NDVI above which a cell is not a ground candidate when guidance is on:
/// dense green vegetation (common practice; bare soil and dry litter lie well below).
pub const DEFAULT_NDVI_MAX: f64 = 0.5;
/// Most openings one filter runs: the radius step grows beyond one cell when the largest
/// radius spans more cells than this (terrastack's bound on the cost; see
/// [`GroundParams::radii`]).
pub const MAX_OPENINGS: usize = 64;

/// Parameters of the ground filter (units in the names; see docs/methods.md).
#[derive(Clone, Debug, PartialEq)]
pub struct GroundParams {
    /// Width of the largest object to remove, metres; the largest opening radius is half.
    pub max_object_m: f64,
    /// Slope threshold s (rise over run): an opening by radius r may lower a ground cell by
    /// at most s·r below the previous opening.
    pub slope: f64,
    /// Elevation threshold of the final classification, metres.
    pub elevation_threshold_m: f64,
    /// Elevation scaling factor of the final classification: metres of tolerance added per
    /// unit of the provisional ground's gradient.
    pub slope_scale_m: f64,
    /// Window shape of the openings. Default square (the paper uses a disc; see
    /// docs/methods.md for why terrastack defaults to squares).
    pub shape: WindowShape,
    /// Interpolation reach, metres: farther than this from any ground cell the ground is
    /// unknown. Default: the largest object's width.
    pub reach_m: f64,
    /// With NDVI guidance: cells with NDVI above this are not ground candidates.
    pub ndvi_max: Option<f64>,
}

impl Default for GroundParams {
    fn default() -> Self {
        GroundParams {
            max_object_m: DEFAULT_MAX_OBJECT_M,
            slope: DEFAULT_SLOPE,
            elevation_threshold_m: DEFAULT_ELEVATION_THRESHOLD_M,
            slope_scale_m: DEFAULT_SLOPE_SCALE_M,
            shape: WindowShape::Square,
            reach_m: DEFAULT_MAX_OBJECT_M,
            ndvi_max: None,
        }
    }
}

impl GroundParams {
    /// Refuses values outside their meaning; `origin` names where they came from.
    pub fn check(&self, origin: &str) -> Result<()> {
        let bad = |what: &str, v: f64, fix: &str| {
            Err(
                Error::usage(format!("{what} {v} ({origin}) is out of range"))
                    .with_fix(fix.to_string()),
            )
        };
        if !(self.max_object_m.is_finite() && self.max_object_m > 0.0) {
            return bad(
                "the largest object width",
                self.max_object_m,
                "give the width in metres of the widest object to remove, e.g. 20",
            );
        }
        if !(self.slope.is_finite() && self.slope >= 0.0) {
            return bad(
                "the slope threshold",
                self.slope,
                "give rise over run, e.g. 0.15",
            );
        }
        if !(self.elevation_threshold_m.is_finite() && self.elevation_threshold_m >= 0.0) {
            return bad(
                "the elevation threshold",
                self.elevation_threshold_m,
                "give metres at or above 0, e.g. 0.5",
            );
        }
        if !(self.slope_scale_m.is_finite() && self.slope_scale_m >= 0.0) {
            return bad(
                "the elevation scaling factor",
                self.slope_scale_m,
                "give metres per unit gradient at or above 0, e.g. 1.25",
            );
        }
        if !(self.reach_m.is_finite() && self.reach_m > 0.0) {
            return bad(
                "the interpolation reach",
                self.reach_m,
                "give metres above 0, e.g. the largest object's width",
            );
        }
        if let Some(t) = self.ndvi_max {
            if !(t.is_finite() && (-1.0..=1.0).contains(&t)) {
                return bad(
                    "the NDVI threshold",
                    t,
                    "give an NDVI between -1 and 1, e.g. 0.5",
                );
            }
        }
        Ok(())
    }

    /// Largest opening radius, metres: half the largest object's width.
    pub fn max_radius_m(&self) -> f64 {
        self.max_object_m / 2.0
    }

    /// Opening radii in metres for a grid whose smallest cell size is `h` metres:
    /// r_k = k·step, step = h (Pingel et al. 2013: one cell per step) unless that takes
    /// more than [`MAX_OPENINGS`] steps, then step = r_max/[`MAX_OPENINGS`]; the last
    /// radius is r_max.
    pub fn radii(&self, h: f64) -> Vec<f64> {
        let r_max = self.max_radius_m();
        let step = h.max(r_max / MAX_OPENINGS as f64);
        let k = ((r_max / step) * (1.0 - 1e-9)).ceil().max(1.0) as usize;
        (1..=k).map(|i| (i as f64 * step).min(r_max)).collect()
    }

    /// Cells of context a block needs on each side for its interior to be exact, on a
    /// grid whose smallest cell size is `h` metres: 2·r_max (the openings) + the reach
    /// (interpolation and distance) + 1 (the gradient of the classification).
    pub fn halo_px(&self, h: f64) -> usize {
        let cells = (2.0 * self.max_radius_m() + self.reach_m) / h;
        // Saturating: an absurd width is capped by the caller at the raster's side.
        (cells.ceil().min(1e15) as usize).saturating_add(2)
    }
}

/// The filter's layers over one block (same shape as the DSM block given).
pub struct GroundLayers {
    /// Ground elevation, metres; NaN where the DSM is nodata or no ground is within reach.
    pub dtm: Array2<f64>,
    /// DSM − dtm, metres.
    pub height: Array2<f64>,
    /// 1 ground, 0 above ground, 2 no ground within reach, NaN where the DSM is nodata.
    pub ground: Array2<f32>,
    /// Metres to the nearest ground cell of the filter (step 3); NaN beyond the reach.
    pub distance: Array2<f64>,
}

/// Runs the filter on `z` (metres, NaN = nodata; a block with its halo) with per-row cell
/// sizes `cells`. `excluded` (same shape) marks cells that are not ground candidates (NDVI
/// guidance). `h` is the grid's smallest cell size in metres, the same for every block
/// (it fixes the opening radii). Values are exact at least [`GroundParams::halo_px`]
/// cells from the block's edges.
pub fn filter(
    z: ArrayView2<f64>,
    cells: &CellSizes,
    excluded: Option<ArrayView2<bool>>,
    h: f64,
    params: &GroundParams,
) -> GroundLayers {
    let z = z.to_owned();
    // 1. Minimum surface: the DSM without the excluded cells.
    let mut z0 = z.clone();
    if let Some(ex) = excluded {
        Zip::from(&mut z0).and(ex).for_each(|v, &e| {
            if e {
                *v = f64::NAN;
            }
        });
    }
    // 2. Object cells of the progressive openings.
    let objects =
        opening::progressive_objects(&z0, cells, params.shape, &params.radii(h), params.slope);
    // 3. Provisional ground from the remaining candidates.
    let support = Zip::from(&z0)
        .and(&objects)
        .map_collect(|v, &o| v.is_finite() && !o);
    let valid = z.mapv(f64::is_finite);
    let dtm = fill::interpolate(&z0, &support, &valid, cells, params.reach_m);
    let distance = fill::distance_to_ground(&support, cells, params.reach_m).mapv(|d| {
        if d.is_finite() {
            d
        } else {
            f64::NAN
        }
    });
    // 4. Classification against the provisional ground and its gradient.
    let gradient = gradient_magnitude(&dtm, cells);
    let ground = Zip::from(&z)
        .and(&dtm)
        .and(&gradient)
        .map_collect(|&v, &d, &g| {
            if !v.is_finite() {
                f32::NAN
            } else if !d.is_finite() {
                2.0
            } else if (v - d).abs() <= params.elevation_threshold_m + params.slope_scale_m * g {
                1.0
            } else {
                0.0
            }
        });
    let height = Zip::from(&z).and(&dtm).map_collect(|&v, &d| v - d);
    GroundLayers {
        dtm,
        height,
        ground,
        distance,
    }
}

/// Gradient magnitude √(p² + q²) (rise over run) of `d` by central differences
/// (Zevenbergen & Thorne 1987's p and q), one-sided where a neighbour is nodata or beyond
/// the array, 0 along an axis with no valid neighbour.
pub fn gradient_magnitude(d: &Array2<f64>, cells: &CellSizes) -> Array2<f64> {
    let (nr, nc) = d.dim();
    let sizes = RowSizes::new(cells);
    let at = |i: i64, j: i64| -> Option<f64> {
        if i < 0 || j < 0 || i >= nr as i64 || j >= nc as i64 {
            return None;
        }
        let v = d[[i as usize, j as usize]];
        v.is_finite().then_some(v)
    };
    let diff = |c: f64, a: Option<f64>, b: Option<f64>, h: f64| -> f64 {
        match (a, b) {
            (Some(a), Some(b)) => (b - a) / (2.0 * h),
            (Some(a), None) => (c - a) / h,
            (None, Some(b)) => (b - c) / h,
            (None, None) => 0.0,
        }
    };
    Array2::from_shape_fn((nr, nc), |(i, j)| {
        let c = d[[i, j]];
        if !c.is_finite() {
            return f64::NAN;
        }
        let (ii, jj) = (i as i64, j as i64);
        let p = diff(c, at(ii, jj - 1), at(ii, jj + 1), sizes.hx(i));
        let q = diff(c, at(ii + 1, jj), at(ii - 1, jj), sizes.hy(i));
        (p * p + q * q).sqrt()
    })
}

#[cfg(test)]
mod closed_form_tests;

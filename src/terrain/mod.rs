//! Terrain derivatives of a DSM block: the kernels the stack executor calls.
//!
//! Every kernel is a pure function of one block of elevations plus its halo (f32 or f64 as
//! the DSM stores them, NaN = nodata; see [`DsmSample`]) and the block's cell sizes in
//! metres per row. [`compute`] evaluates a list of
//! [`TerrainFeature`]s in one pass, sharing intermediates: one set of 3x3 partial
//! derivatives per estimator, one set of exact window sums per window radius and shape.
//!
//! Where things live: the feature table ([`table`]: every quantity's word, band key,
//! units, family, kernel and documentation); a feature as data ([`feature`]); feature
//! words ([`words`]); the scheduler ([`schedule`]); the kernels, one module per family of
//! methods (`derivatives`, `slope`, `curvature`, `quadratic_fit`, `position`, `roughness`,
//! `vrm`, `window_sums`, `running_extrema`); run parameters ([`params`]), window radii
//! ([`radius`]) and the block's sample type and cell sizes ([`block`]).
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
pub mod block;
pub mod catalogue;
pub mod curvature;
pub mod derivatives;
pub mod feature;
pub mod params;
pub mod position;
pub mod pqrst;
pub mod precision;
pub mod quadratic_fit;
pub mod radius;
pub mod relief_position;
pub mod roughness;
pub mod running_extrema;
pub mod schedule;
pub mod slope;
pub mod table;
pub mod vrm;
pub mod window_sums;
pub mod words;

#[cfg(test)]
pub(crate) mod test_support;

pub use block::{DsmSample, RowSizes};
pub use catalogue::{catalogue, FeatureDoc};
pub use feature::TerrainFeature;
pub use params::{SlopeMethod, TerrainParams, WindowShape};
pub use radius::{check_radius_value, radius_cells, validate_window_radius, MIN_RADIUS_CELLS};
pub use schedule::compute;
pub use table::{Family, Kernel, Quantity, QUANTITIES};
pub use words::{expand, FEATURE_WORDS};

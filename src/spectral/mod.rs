//! Spectral layers: which band is which, reflectance, published indices and band math.
//!
//! - [`roles`]: band roles, band maps, reflectance scale/offset and masks.
//! - [`indices`]: the catalogue of published spectral indices.
//! - [`expression`]: user band math, compiled once and evaluated block by block.

pub mod expression;
pub mod indices;
pub mod roles;

pub use expression::Expression;
pub use indices::{catalogue, find_index, SpectralIndex};
pub use roles::{
    apply_scaling, check_band_exists, parse_band_file, parse_band_map, to_reflectance, BandArrays,
    BandMap, BandSource, MaskOptions, PerBand, Role,
};

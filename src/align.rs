//! Where the pieces of bringing inputs onto one grid live, re-exported under their
//! earlier names: the target grid ([`crate::target_grid`]), the resampling methods
//! ([`crate::raster::Resampling`]) and kernels ([`crate::resample`]), reading another CRS
//! ([`crate::raster::reproject`]) and the in-memory raster ([`crate::raster::MemoryRaster`]).
//! New code imports from those modules. (Between-flight alignment is `batch::shift`.)

pub use crate::raster::{MemoryRaster, Resampling};
pub use crate::resample::{resample_window, resample_window_f64};
pub use crate::target_grid::{target_grid, target_grid_named, ExtentRule};

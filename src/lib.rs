//! terrastack: drone photogrammetry outputs (a DSM and a multispectral orthomosaic per
//! flight) in, a co-registered, documented stack of terrain and spectral predictor layers
//! out.
//!
//! Data flows one way: sources → target grid → block plan → kernels → stack writer.
//!
//! - [`error`]: the one error type; every error names its file, problem and fix.
//! - [`atomic_file`]: the one atomic write (temporary name, then rename) and stale-partial cleanup.
//! - [`output_lock`]: exclusive locks on output folders and files.
//! - [`checksum`]: SHA-256 digests of whole files.
//! - [`input_guard`]: outputs never overwrite inputs (canonical path and file identity).
//! - [`grid`]: size, transform, CRS, nodata; cell sizes in metres; windows.
//! - [`lonlat`]: WGS84 longitude/latitude of grid coordinates (catalogue footprints).
//! - [`projjson`]: PROJJSON descriptions of CRSs (GeoParquet, STAC).
//! - [`raster`]: windowed readers and the GeoTIFF writer (pure Rust; GDAL with `gdal`).
//! - [`terrain`]: terrain derivatives, one module per family, each citing its method.
//! - [`ground`]: ground (DTM), height above ground and a ground mask from the DSM (SMRF).
//! - [`spectral`]: band roles, reflectance scaling, the index catalogue, band math.
//! - [`texture`]: co-occurrence (Haralick) and first-order texture of a band or index.
//! - [`target_grid`]: the one grid every layer is computed on.
//! - [`resample`]: resampling kernels onto windows of the target grid.
//! - [`align`]: the earlier names of the target grid and resampling, re-exported.
//! - [`stack`]: the recipe, the block plan, the executor and the stack's metadata.
//! - [`verify`]: closed-form test surfaces and error tables.
//! - [`sample`]: training tables at labelled samples, with honest folds.
//! - [`batch`]: many flights: manifest, resume, shards, shifts, multi-temporal stack.
//! - [`random`]: the small deterministic generator (demo data, fold shuffles, tests).
//! - [`demo_site`]: the generator of the invented demo site in `sample-dsm/`.

pub mod align;
pub mod allocator;
pub mod atomic_file;
pub mod batch;
pub mod checksum;
pub mod demo_site;
pub mod error;
pub mod grid;
pub mod ground;
pub mod input_guard;
pub mod lonlat;
pub mod output_lock;
pub mod projjson;
pub mod random;
pub mod raster;
pub mod resample;
pub mod sample;
pub mod spectral;
pub mod stack;
pub mod target_grid;
pub mod terrain;
pub mod texture;
pub mod verify;

pub use error::{Error, Result};
pub use grid::{CellSizes, Crs, CrsKind, Grid, Window};

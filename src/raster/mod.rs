//! Reading and writing georeferenced rasters.
//!
//! [`RasterSource`] is what every reader offers: the [`Grid`], band metadata and windowed
//! reads as `f32` with nodata turned into NaN. The pure-Rust GeoTIFF reader and writer live
//! in [`geotiff`]; with the `gdal` feature, `gdal` offers the same trait over every format
//! GDAL reads. [`open`] picks the right one for a path.

use std::path::Path;

use ndarray::Array2;
use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};
use crate::grid::{Grid, RasterSpace, Window};

pub mod crs_equality;
#[cfg(feature = "gdal")]
pub mod gdal;
pub mod geotiff;
pub mod memory;
pub mod orientation;
pub mod reproject;
pub mod resampling;

pub use memory::MemoryRaster;
pub use resampling::Resampling;

/// The numeric type of a band's samples as stored in the file.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum SampleType {
    U8,
    U16,
    I16,
    U32,
    I32,
    F32,
    F64,
}

impl SampleType {
    /// Bytes per sample.
    pub fn size(self) -> usize {
        match self {
            SampleType::U8 => 1,
            SampleType::U16 | SampleType::I16 => 2,
            SampleType::U32 | SampleType::I32 | SampleType::F32 => 4,
            SampleType::F64 => 8,
        }
    }

    /// Lower-case name ("uint16", "float32"), as GDAL-based tools print it.
    pub fn name(self) -> &'static str {
        match self {
            SampleType::U8 => "uint8",
            SampleType::U16 => "uint16",
            SampleType::I16 => "int16",
            SampleType::U32 => "uint32",
            SampleType::I32 => "int32",
            SampleType::F32 => "float32",
            SampleType::F64 => "float64",
        }
    }
}

/// What is known about one band.
#[derive(Clone, Debug, PartialEq)]
pub struct BandInfo {
    /// Band description (GDAL's band description), if the file has one.
    pub description: Option<String>,
    pub sample_type: SampleType,
    /// Nodata value of the band as stored (before conversion to NaN).
    pub nodata: Option<f64>,
}

/// A georeferenced raster that can be read window by window.
///
/// Bands are numbered from 1, as in GDAL and on the command line. Reads convert samples
/// to `f32`, turn the nodata value into NaN, and fill cells of the window that lie outside
/// the raster with NaN. Implementations are `Send + Sync`: blocks may be read from several
/// threads at once.
pub trait RasterSource: Send + Sync {
    /// The file this raster was opened from.
    fn path(&self) -> &Path;
    /// The raster's geometry (transform in the pixel-is-area convention), always north-up
    /// and west-to-east: a file stored otherwise is read through an exact index flip
    /// ([`orientation`]).
    fn grid(&self) -> &Grid;
    /// Whether the file declared pixel-is-area or pixel-is-point.
    fn raster_space(&self) -> RasterSpace {
        RasterSpace::Area
    }
    /// Number of bands.
    fn band_count(&self) -> usize;
    /// Metadata of band `band` (1-based). May panic on a band outside
    /// `1..=band_count()`: callers with a number from outside use [`try_band_info`].
    ///
    /// [`try_band_info`]: RasterSource::try_band_info
    fn band_info(&self, band: usize) -> BandInfo;
    /// Metadata of band `band` (1-based), or an error naming the file when the band does
    /// not exist.
    fn try_band_info(&self, band: usize) -> Result<BandInfo> {
        if band == 0 || band > self.band_count() {
            return Err(Error::file(
                self.path(),
                format!(
                    "band {band} does not exist: the file has {} band(s), numbered from 1",
                    self.band_count()
                ),
            )
            .with_fix(
                "pick a band between 1 and the file's band count (`terrastack info FILE` lists them)",
            ));
        }
        Ok(self.band_info(band))
    }
    /// Cap the decoded-block cache this source keeps, in bytes (sources without a cache
    /// ignore it). Only speed depends on it, never a value read.
    fn set_cache_bytes(&self, _bytes: usize) {}
    /// Band `band` (1-based) over `window`, as `f32`, nodata and out-of-raster cells NaN.
    /// Memory use is bounded by the window, not by the file.
    fn read_window(&self, band: usize, window: Window) -> Result<Array2<f32>>;
    /// Like [`RasterSource::read_window`], as `f64`: a float64 band keeps its precision
    /// (readers that store f64 override this; the default widens the f32 read).
    fn read_window_f64(&self, band: usize, window: Window) -> Result<Array2<f64>> {
        Ok(self.read_window(band, window)?.mapv(f64::from))
    }
}

/// Check a 1-based band number against a source's band count.
pub fn check_band(source: &dyn RasterSource, band: usize) -> Result<()> {
    if band == 0 || band > source.band_count() {
        return Err(Error::file(
            source.path(),
            format!(
                "band {band} does not exist: the file has {} band(s), numbered from 1",
                source.band_count()
            ),
        )
        .with_fix(
            "pick a band between 1 and the file's band count (`terrastack info FILE` lists them)",
        ));
    }
    Ok(())
}

/// Open a raster for reading: GeoTIFF with the pure-Rust reader, any other format through
/// GDAL when the `gdal` feature is on.
pub fn open(path: &Path) -> Result<Box<dyn RasterSource>> {
    if !path.exists() {
        return Err(Error::io(
            path,
            std::io::Error::from(std::io::ErrorKind::NotFound),
        ));
    }
    if geotiff::is_tiff(path)? {
        return Ok(Box::new(geotiff::GeoTiffReader::open(path)?));
    }
    #[cfg(feature = "gdal")]
    {
        Ok(Box::new(gdal::GdalSource::open(path)?))
    }
    #[cfg(not(feature = "gdal"))]
    {
        Err(Error::file(path, "not a TIFF file; this build reads GeoTIFF only")
            .with_fix("convert it to GeoTIFF, or build terrastack with `--features gdal` to read every GDAL format"))
    }
}

//! Pure-Rust GeoTIFF reading and writing (through the `tiff` crate's tag parsing).
//!
//! API SURFACE FIXED BY THE SKELETON; the I/O work fills it in.

use std::path::Path;

use ndarray::{Array2, ArrayView2};

use crate::error::Result;
use crate::grid::{Grid, RasterSpace, Window};
use crate::raster::{BandInfo, RasterSource, SampleType};

/// True when `path` starts with a TIFF or BigTIFF signature.
pub fn is_tiff(path: &Path) -> Result<bool> {
    let _ = path;
    unimplemented!()
}

/// Windowed GeoTIFF reader.
pub struct GeoTiffReader {}

impl GeoTiffReader {
    pub fn open(path: &Path) -> Result<GeoTiffReader> {
        let _ = path;
        unimplemented!()
    }
}

impl RasterSource for GeoTiffReader {
    fn path(&self) -> &Path {
        unimplemented!()
    }
    fn grid(&self) -> &Grid {
        unimplemented!()
    }
    fn band_count(&self) -> usize {
        unimplemented!()
    }
    fn band_info(&self, _band: usize) -> BandInfo {
        unimplemented!()
    }
    fn read_window(&self, _band: usize, _window: Window) -> Result<Array2<f32>> {
        unimplemented!()
    }
}

/// Compression of written blocks.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Compression {
    None,
    Deflate,
    Lzw,
    Zstd,
    PackBits,
}

/// Tiles or strips.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Layout {
    Tiled { size: usize },
    Strips { rows_per_strip: usize },
}

/// Band-sequential (PlanarConfiguration 2) or pixel-interleaved (1).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Interleave {
    Band,
    Pixel,
}

/// When to write BigTIFF.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum BigTiff {
    /// When the file could pass 4 GiB.
    Auto,
    Always,
    Never,
}

/// How a file is written. `Default` is the stack's: float32, 512x512 tiles, Deflate with
/// the floating-point predictor, band-sequential, BigTIFF when needed.
#[derive(Clone, Debug, PartialEq)]
pub struct WriteOptions {
    pub sample_type: SampleType,
    pub compression: Compression,
    /// TIFF predictor (1 none, 2 horizontal, 3 floating point); `None` picks 3 for floats
    /// and 2 for integers when compressed, 1 otherwise.
    pub predictor: Option<u16>,
    pub layout: Layout,
    pub interleave: Interleave,
    pub bigtiff: BigTiff,
    pub raster_space: RasterSpace,
}

impl Default for WriteOptions {
    fn default() -> Self {
        WriteOptions {
            sample_type: SampleType::F32,
            compression: Compression::Deflate,
            predictor: None,
            layout: Layout::Tiled { size: 512 },
            interleave: Interleave::Band,
            bigtiff: BigTiff::Auto,
            raster_space: RasterSpace::Area,
        }
    }
}

/// Streaming GeoTIFF writer: blocks (tiles or strips) of each band are written as they
/// are produced, from several threads at once; the directory is written by `finish`.
pub struct GeoTiffWriter {}

impl GeoTiffWriter {
    /// Create `path` (exactly that path: callers do temporary naming) for `bands` bands on
    /// `grid` (its CRS and nodata are written as GeoKeys and the GDAL nodata tag).
    pub fn create(
        path: &Path,
        grid: &Grid,
        bands: usize,
        options: WriteOptions,
    ) -> Result<GeoTiffWriter> {
        let _ = (path, grid, bands, options);
        unimplemented!()
    }

    /// Set band `band`'s (1-based) description, stored where GDAL-based tools read it.
    pub fn set_band_description(&mut self, band: usize, text: &str) {
        let _ = (band, text);
        unimplemented!()
    }

    /// Block size (width, height) in cells: the tile, or (width, rows_per_strip).
    pub fn block_size(&self) -> (usize, usize) {
        unimplemented!()
    }

    /// Write block (`block_col`, `block_row`) of band `band` (1-based), band-sequential
    /// files only. `data` is the block's cells (smaller at the right and bottom edges);
    /// values are converted to the file's sample type. Thread-safe.
    pub fn write_block(
        &self,
        band: usize,
        block_col: usize,
        block_row: usize,
        data: ArrayView2<f32>,
    ) -> Result<()> {
        let _ = (band, block_col, block_row, data);
        unimplemented!()
    }

    /// Write the directory and close the file.
    pub fn finish(self) -> Result<()> {
        unimplemented!()
    }
}

/// A sample type the whole-image writer accepts.
pub trait TiffSample: Copy + Send + Sync + 'static {
    const TYPE: SampleType;
}
impl TiffSample for u8 {
    const TYPE: SampleType = SampleType::U8;
}
impl TiffSample for u16 {
    const TYPE: SampleType = SampleType::U16;
}
impl TiffSample for i16 {
    const TYPE: SampleType = SampleType::I16;
}
impl TiffSample for u32 {
    const TYPE: SampleType = SampleType::U32;
}
impl TiffSample for i32 {
    const TYPE: SampleType = SampleType::I32;
}
impl TiffSample for f32 {
    const TYPE: SampleType = SampleType::F32;
}
impl TiffSample for f64 {
    const TYPE: SampleType = SampleType::F64;
}

/// Write whole in-memory bands (all the same shape as `grid`) to `path` in any layout of
/// `options` (its `sample_type` is taken from `T`). For small files: demo data, tests.
pub fn write_geotiff<T: TiffSample>(
    path: &Path,
    grid: &Grid,
    bands: &[ArrayView2<T>],
    descriptions: &[&str],
    options: &WriteOptions,
) -> Result<()> {
    let _ = (path, grid, bands, descriptions, options);
    unimplemented!()
}

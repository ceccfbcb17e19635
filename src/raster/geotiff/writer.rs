//! The streaming GeoTIFF writer.
//!
//! Blocks are appended to the file as they arrive, from any number of threads: each
//! caller converts, predicts and compresses its block itself, then takes a lock only to
//! reserve the block's byte range, and writes it with a positioned write. `finish` writes
//! the image file directory (TIFF 6.0 §2) after the data and points the header at it.
//! Files are little-endian; BigTIFF is chosen when the file could pass 4 GiB.
//!
//! With overviews ([`WriteOptions::overviews`], tiled files) the file is a Cloud Optimized
//! GeoTIFF (OGC 21-026, recommendation "ifd-order"): header; the directories of the full
//! resolution and of each overview level, largest first, each with its tag values; the
//! tile offsets and byte counts of all of them; the overviews' tiles from the smallest
//! level up; the full-resolution tiles. Blocks are then appended to a spill file beside
//! the output (`.NAME.partial-PID`, removed when the writer ends; a killed run's is removed
//! as a stale partial, [`crate::atomic_file`]). Each tile's quarter of the next level is
//! kept, uncompressed, in a second temporary file before the tile is compressed; `finish`
//! assembles each overview level from the quarters of the level above, a few tiles per
//! thread at a time (memory stays a few tiles per thread, whatever the raster), appends
//! them to the spill file, writes the directories into the output and puts the tiles in
//! after them, smallest level first. (When a band's overview rule changed after tiles were
//! written, the levels are made by reading the tiles of the level above back instead.)
//! Overview IFDs carry NewSubfileType 1 and the full resolution's tiling, compression,
//! predictor, sample format and nodata; GeoKeys and band metadata are on the full
//! resolution only, which they describe for all levels (OGC 21-026 §7 "Georeference Keys").
//!
//! File space is allocated ahead of the blocks where the system allows
//! ([`file_ranges::reserve`]) and the file cut to its content when it is finished.
//!
//! Pixel-interleaved files hold all bands in each block, so their blocks wait in memory
//! until every band of the block has arrived: memory is bounded by the blocks in flight.

use std::collections::HashMap;
use std::fs::{File, OpenOptions};
use std::path::{Path, PathBuf};
use std::sync::Mutex;

use ndarray::ArrayView2;

use crate::error::{Error, Result};
use crate::grid::{CrsKind, Grid, RasterSpace};
use crate::raster::SampleType;

use super::codec::{self, ChunkShape, Codec};
use super::file_ranges;
use super::overview::{self, OverviewResampling};
use super::tags::{self, OutValue};
use super::{
    geokeys, metadata, BigTiff, Compression, Interleave, Layout, TiffSample, WriteOptions,
};

/// Bytes reserved for the directory and tags when estimating whether BigTIFF is needed.
const DIRECTORY_MARGIN: u64 = 64 << 20;

/// Smallest and largest step by which a file of compressed blocks is allocated ahead of
/// its blocks (`file_ranges::reserve`): as much as has been written, within these bounds.
/// At most one step too much is allocated, and cut when the file is finished.
const RESERVE_STEP_MIN: u64 = 4 << 20;
const RESERVE_STEP_MAX: u64 = 64 << 20;

/// Peak bytes the writer holds per block (tile or strip of one band plane) for its index:
/// offset, byte count and written flag while writing (8 + 8 + 1), then a copy of offsets
/// and counts as tag values (16) and their bytes in the directory (16) in `finish`.
pub const INDEX_BYTES_PER_BLOCK: u64 = 49;

struct PendingBlock {
    data: Vec<u8>,
    bands_done: Vec<bool>,
}

#[derive(Default)]
struct State {
    end: u64,
    /// Bytes of the file allocated ahead of the blocks ([`file_ranges::reserve`]); the
    /// final length is set when the file is finished.
    reserved: u64,
    offsets: Vec<u64>,
    counts: Vec<u64>,
    written: Vec<bool>,
    pending: HashMap<usize, PendingBlock>,
    failure: Option<String>,
}

/// Everything fixed about an output file once it is created.
pub(super) struct Plan {
    pub width: usize,
    pub height: usize,
    pub bands: usize,
    pub sample_type: SampleType,
    pub codec: Codec,
    pub predictor: u16,
    pub tiled: bool,
    pub block_w: usize,
    pub block_h: usize,
    pub across: usize,
    pub down: usize,
    pub planar: bool,
    pub big: bool,
    /// Sizes (width, height) of the overview levels, largest first; empty without them.
    pub levels: Vec<(usize, usize)>,
    /// Cloud Optimized layout (directories first); set when overviews are asked for on a
    /// tiled file, even one that fits a single tile and has no overview level.
    pub cog: bool,
}

impl Plan {
    fn new(path: &Path, grid: &Grid, bands: usize, o: &WriteOptions) -> Result<Plan> {
        let usage = |p: String| Error::usage(p).in_file(path);
        if bands == 0 || bands > 65_535 {
            return Err(usage(format!(
                "a GeoTIFF holds 1 to 65535 bands; {bands} were asked for"
            )));
        }
        let is_float = matches!(o.sample_type, SampleType::F32 | SampleType::F64);
        // Predictors go with LZW, Deflate and ZSTD only: libtiff-based readers ignore
        // them beside no compression or PackBits.
        let predicting = matches!(
            o.compression,
            Compression::Lzw | Compression::Deflate | Compression::Zstd
        );
        let predictor = match o.predictor {
            Some(p) if p != 1 && !predicting => {
                return Err(usage(format!(
                    "predictor {p} cannot be combined with {:?} compression",
                    o.compression
                ))
                .with_fix("use Deflate, LZW or ZSTD with a predictor, or predictor 1"))
            }
            Some(p) => p,
            None if !predicting => 1,
            None if is_float => 3,
            None => 2,
        };
        match (predictor, is_float) {
            (1, _) | (2, false) | (3, true) => {}
            _ => {
                return Err(usage(format!(
                    "predictor {predictor} does not apply to {} samples",
                    o.sample_type.name()
                ))
                .with_fix("use predictor 3 for float32/float64, 2 for integers, or 1 (none)"))
            }
        }
        let (tiled, block_w, block_h) = match o.layout {
            Layout::Tiled { size } => {
                if size == 0 || size % 16 != 0 || size > 1 << 16 {
                    return Err(usage(format!(
                        "tile size {size} is not a multiple of 16 between 16 and 65536 (TIFF 6.0 §15)"
                    ))
                    .with_fix("pick a tile size such as 256 or 512"));
                }
                (true, size, size)
            }
            Layout::Strips { rows_per_strip } => {
                if rows_per_strip == 0 {
                    return Err(usage("rows per strip must be at least 1".into()));
                }
                (false, grid.width, rows_per_strip.min(grid.height))
            }
        };
        let planar = o.interleave == Interleave::Band && bands > 1;
        let block_samples = if planar { 1 } else { bands };
        let block_bytes = block_w as u128
            * block_h as u128
            * block_samples as u128
            * o.sample_type.size() as u128;
        if block_bytes > super::MAX_BLOCK_BYTES as u128 {
            return Err(usage(format!(
                "one block would hold {block_bytes} bytes, more than the limit of {}",
                super::MAX_BLOCK_BYTES
            ))
            .with_fix("use smaller tiles or fewer rows per strip"));
        }
        let raw =
            grid.width as u64 * grid.height as u64 * bands as u64 * o.sample_type.size() as u64;
        // Compressed blocks can outgrow raw data slightly (Deflate's stored blocks, PackBits
        // literals: at most 1/128 more), and tiles are padded at the edges.
        let across = grid.width.div_ceil(block_w);
        let down = grid.height.div_ceil(block_h);
        let padded = (across * block_w) as u64
            * (down * block_h) as u64
            * bands as u64
            * o.sample_type.size() as u64;
        let cog = o.overviews && tiled;
        let levels = if cog {
            overview::level_sizes(grid.width, grid.height, block_w)
        } else {
            Vec::new()
        };
        // Overview tiles add at most a third of the padded full resolution (¼ + ¹⁄₁₆ + …).
        let overview_padded: u64 = levels
            .iter()
            .map(|(w, h)| {
                (w.div_ceil(block_w) * block_w) as u64
                    * (h.div_ceil(block_h) * block_h) as u64
                    * bands as u64
                    * o.sample_type.size() as u64
            })
            .sum();
        let worst =
            raw.max(padded) + overview_padded + (padded + overview_padded) / 64 + DIRECTORY_MARGIN;
        let big = match o.bigtiff {
            BigTiff::Always => true,
            BigTiff::Never => false,
            BigTiff::Auto => worst > u32::MAX as u64,
        };
        Ok(Plan {
            width: grid.width,
            height: grid.height,
            bands,
            sample_type: o.sample_type,
            codec: match o.compression {
                Compression::None => Codec::None,
                Compression::Deflate => Codec::Deflate,
                Compression::Lzw => Codec::Lzw,
                Compression::Zstd => Codec::Zstd,
                Compression::PackBits => Codec::PackBits,
            },
            predictor,
            tiled,
            block_w,
            block_h,
            across,
            down,
            planar,
            big,
            levels,
            cog,
        })
    }

    /// Tiles across and down overview level `k` (0 = full resolution).
    fn level_grid(&self, k: usize) -> (usize, usize) {
        if k == 0 {
            (self.across, self.down)
        } else {
            let (w, h) = self.levels[k - 1];
            (w.div_ceil(self.block_w), h.div_ceil(self.block_h))
        }
    }

    /// Size (width, height) of level `k` (0 = full resolution).
    fn level_size(&self, k: usize) -> (usize, usize) {
        if k == 0 {
            (self.width, self.height)
        } else {
            self.levels[k - 1]
        }
    }

    /// Blocks of level `k` (all planes).
    fn level_blocks(&self, k: usize) -> usize {
        let (a, d) = self.level_grid(k);
        a * d * if self.planar { self.bands } else { 1 }
    }

    /// Blocks of every level, the full resolution included.
    fn all_blocks(&self) -> usize {
        (0..=self.levels.len()).map(|k| self.level_blocks(k)).sum()
    }

    /// Blocks per band plane.
    fn per_plane(&self) -> usize {
        self.across * self.down
    }

    fn block_count(&self) -> usize {
        self.per_plane() * if self.planar { self.bands } else { 1 }
    }

    /// Rows stored in block row `br` (tiles are full; the last strip may be short).
    pub fn block_rows(&self, br: usize) -> usize {
        if self.tiled {
            self.block_h
        } else {
            self.block_h.min(self.height - br * self.block_h)
        }
    }

    /// Cells of block (`bc`, `br`) that lie inside the raster (width, height).
    pub fn valid_size(&self, bc: usize, br: usize) -> (usize, usize) {
        (
            self.block_w.min(self.width - bc * self.block_w),
            self.block_h.min(self.height - br * self.block_h),
        )
    }

    pub fn samples_per_block_pixel(&self) -> usize {
        if self.planar {
            1
        } else {
            self.bands
        }
    }

    fn shape(&self, br: usize) -> ChunkShape {
        let spp = self.samples_per_block_pixel();
        ChunkShape {
            rows: self.block_rows(br),
            row_samples: self.block_w * spp,
            stride: spp,
            sample_size: self.sample_type.size(),
        }
    }
}

/// A block converted, predicted and compressed by [`GeoTiffWriter::encode_block`], not yet
/// in the file.
pub struct EncodedBlock {
    index: usize,
    packed: Vec<u8>,
}

/// Streaming GeoTIFF writer: blocks (tiles or strips) of each band are written as they
/// are produced, from several threads at once; the directory is written by `finish`.
///
/// Values given as `f32` are converted to the file's sample type: floats exactly (f64
/// widens), integers rounded to nearest and saturated to the type's range, NaN written as
/// the grid's nodata value (0 when the grid has none).
pub struct GeoTiffWriter {
    path: PathBuf,
    /// Where blocks are appended: the output, or the spill file in the Cloud Optimized
    /// layout.
    file: File,
    /// The output, in the Cloud Optimized layout (filled by `finish`).
    output: Option<File>,
    /// The spill file, removed when the writer ends (held for its `Drop`).
    _spill: Option<SpillFile>,
    /// Each overview level made from the quarters of the level above, kept while its
    /// tiles were in memory.
    quarters: Option<Quarters>,
    grid: Grid,
    plan: Plan,
    space: RasterSpace,
    descriptions: Vec<Option<String>>,
    units: Vec<Option<String>>,
    resampling: Vec<OverviewResampling>,
    state: Mutex<State>,
}

/// Sines and cosines of a tile's directions (NaN where a cell has none), for the circular
/// mean.
struct CircularParts {
    sin: Vec<f64>,
    cos: Vec<f64>,
}

/// Each tile of a Cloud Optimized file reduced to its quarter of a tile of the next level
/// (t/2 x t/2 cells, uncompressed little-endian samples) before it is compressed, in a
/// slot of a temporary file ([`GeoTiffWriter::quarter_at`]): the full-resolution tiles
/// give level 1, the level 1 tiles level 2 and so on, each level assembled from quarters
/// instead of decompressing the tiles of the level above. Same bytes either way: a
/// quarter reduces the same cells in the same order.
struct Quarters {
    file: File,
    /// Bytes of one quarter.
    slot: usize,
    _guard: SpillFile,
}

/// A temporary file removed when dropped.
struct SpillFile {
    path: PathBuf,
}

impl Drop for SpillFile {
    fn drop(&mut self) {
        let _ = std::fs::remove_file(&self.path);
    }
}

impl GeoTiffWriter {
    /// Peak bytes of the tile index of a file [`create`](GeoTiffWriter::create) would
    /// make with these arguments ([`INDEX_BYTES_PER_BLOCK`] per block, overview levels
    /// included): memory that grows with the raster, for callers that keep a budget. Fails as `create` does on
    /// impossible options.
    pub fn index_bytes(
        path: &Path,
        grid: &Grid,
        bands: usize,
        options: &WriteOptions,
    ) -> Result<u64> {
        let plan = Plan::new(path, grid, bands, options)?;
        Ok((plan.all_blocks() as u64).saturating_mul(INDEX_BYTES_PER_BLOCK))
    }

    /// Create `path` (exactly that path: callers do temporary naming) for `bands` bands on
    /// `grid` (its CRS and nodata are written as GeoKeys and the GDAL nodata tag).
    pub fn create(
        path: &Path,
        grid: &Grid,
        bands: usize,
        options: WriteOptions,
    ) -> Result<GeoTiffWriter> {
        let plan = Plan::new(path, grid, bands, &options)?;
        // The index grows with the raster: allocate it before the file exists, and fail
        // with the figure rather than abort when the system cannot give it.
        let n = plan.block_count();
        let index_error = || {
            Error::file(
                path,
                format!(
                    "the tile index of {n} blocks ({} x {} cells, {bands} bands) needs {} MiB, which the system could not allocate",
                    grid.width,
                    grid.height,
                    (n as u64).saturating_mul(INDEX_BYTES_PER_BLOCK) >> 20
                ),
            )
            .with_fix("write a smaller raster, fewer bands or larger tiles")
        };
        let offsets = zeroed::<u64>(n).ok_or_else(index_error)?;
        let counts = zeroed::<u64>(n).ok_or_else(index_error)?;
        let written = zeroed::<bool>(n).ok_or_else(index_error)?;
        let open = |p: &Path| {
            OpenOptions::new()
                .read(true)
                .write(true)
                .create(true)
                .truncate(true)
                .open(p)
                .map_err(|e| Error::io(path, e))
        };
        let first = open(path)?;
        let mut quarters = None;
        let (file, output, spill, end) = if plan.cog {
            let spill_path = crate::atomic_file::temp_path_for(path)?;
            let spill_file = open(&spill_path)?;
            if !plan.levels.is_empty() {
                let quarter_path = crate::atomic_file::temp_path_for(&spill_path)?;
                let half = plan.block_w / 2;
                quarters = Some(Quarters {
                    file: open(&quarter_path)?,
                    slot: half * half * plan.samples_per_block_pixel() * plan.sample_type.size(),
                    _guard: SpillFile { path: quarter_path },
                });
            }
            let guard = SpillFile { path: spill_path };
            (spill_file, Some(first), Some(guard), 0)
        } else {
            let header: Vec<u8> = if plan.big {
                let mut h = b"II+\0\x08\0\0\0".to_vec();
                h.extend_from_slice(&0u64.to_le_bytes());
                h
            } else {
                b"II*\0\0\0\0\0".to_vec()
            };
            tags::write_all_at(&first, &header, 0).map_err(|e| Error::io(path, e))?;
            (first, None, None, header.len() as u64)
        };
        // Uncompressed blocks have known sizes: their space is allocated at once. Other
        // files grow by steps as blocks arrive (`append`).
        let mut reserved = 0;
        if plan.codec == Codec::None {
            let data: u64 = (0..plan.block_count())
                .map(|i| plan.shape((i % plan.per_plane()) / plan.across).bytes() as u64)
                .sum();
            if file_ranges::reserve(&file, end + data) {
                reserved = end + data;
            }
        }
        if let Some(q) = &quarters {
            let tiles: usize = (0..plan.levels.len()).map(|k| plan.level_blocks(k)).sum();
            file_ranges::reserve(&q.file, (tiles * q.slot) as u64);
        }
        Ok(GeoTiffWriter {
            path: path.to_path_buf(),
            file,
            output,
            _spill: spill,
            quarters,
            grid: grid.clone(),
            space: options.raster_space,
            descriptions: vec![None; bands],
            units: vec![None; bands],
            resampling: vec![OverviewResampling::Average; bands],
            state: Mutex::new(State {
                end,
                reserved,
                offsets,
                counts,
                written,
                pending: HashMap::new(),
                failure: None,
            }),
            plan,
        })
    }

    /// Set band `band`'s (1-based) description, stored where GDAL-based tools read it.
    /// Band numbers outside the file's bands are ignored.
    pub fn set_band_description(&mut self, band: usize, text: &str) {
        if band >= 1 && band <= self.plan.bands {
            self.descriptions[band - 1] = Some(text.to_string());
        }
    }

    /// Set band `band`'s (1-based) units, stored where GDAL-based tools read them (the
    /// band's unit type). Band numbers outside the file's bands are ignored.
    pub fn set_band_units(&mut self, band: usize, units: &str) {
        if band >= 1 && band <= self.plan.bands && !units.is_empty() {
            self.units[band - 1] = Some(units.to_string());
        }
    }

    /// Set how band `band`'s (1-based) overviews are made (average unless set). Band
    /// numbers outside the file's bands are ignored. In a pixel-interleaved file each
    /// band of a tile is reduced with its own rule.
    pub fn set_band_overview(&mut self, band: usize, resampling: OverviewResampling) {
        if band >= 1 && band <= self.plan.bands && self.resampling[band - 1] != resampling {
            self.resampling[band - 1] = resampling;
            // Quarters already made used the old resampling: the levels are then made by
            // reading back the tiles of the level above.
            let started = self
                .state
                .get_mut()
                .map(|st| st.written.iter().any(|w| *w) || !st.pending.is_empty())
                .unwrap_or(true);
            if started {
                self.quarters = None;
            }
        }
    }

    /// Sizes (width, height) of the overview levels the file will hold, largest first
    /// (empty without overviews).
    pub fn overview_sizes(&self) -> &[(usize, usize)] {
        &self.plan.levels
    }

    /// Block size (width, height) in cells: the tile, or (width, rows_per_strip).
    pub fn block_size(&self) -> (usize, usize) {
        (self.plan.block_w, self.plan.block_h)
    }

    /// Number of blocks across and down the raster.
    pub fn block_grid(&self) -> (usize, usize) {
        (self.plan.across, self.plan.down)
    }

    /// True when the file is written as BigTIFF.
    pub fn is_bigtiff(&self) -> bool {
        self.plan.big
    }

    fn check_block(&self, band: usize, bc: usize, br: usize, shape: (usize, usize)) -> Result<()> {
        let p = &self.plan;
        if band == 0 || band > p.bands {
            return Err(Error::usage(format!(
                "band {band} does not exist in the output, which has {} band(s)",
                p.bands
            ))
            .in_file(&self.path));
        }
        if bc >= p.across || br >= p.down {
            return Err(Error::usage(format!(
                "block ({bc}, {br}) is outside the output's {} x {} blocks",
                p.across, p.down
            ))
            .in_file(&self.path));
        }
        let (w, h) = p.valid_size(bc, br);
        if shape != (h, w) {
            return Err(Error::usage(format!(
                "block ({bc}, {br}) must be {h} rows x {w} columns, got {} x {}",
                shape.0, shape.1
            ))
            .in_file(&self.path));
        }
        Ok(())
    }

    /// Write block (`block_col`, `block_row`) of band `band` (1-based). `data` is the
    /// block's cells (smaller at the right and bottom edges); values are converted to the
    /// file's sample type. Thread-safe. In a pixel-interleaved file the block is stored
    /// once all its bands have been given.
    pub fn write_block(
        &self,
        band: usize,
        block_col: usize,
        block_row: usize,
        data: ArrayView2<f32>,
    ) -> Result<()> {
        self.check_block(band, block_col, block_row, data.dim())?;
        match self.plan.sample_type {
            SampleType::U8 => self.write_block_as::<u8>(band, block_col, block_row, data),
            SampleType::U16 => self.write_block_as::<u16>(band, block_col, block_row, data),
            SampleType::I16 => self.write_block_as::<i16>(band, block_col, block_row, data),
            SampleType::U32 => self.write_block_as::<u32>(band, block_col, block_row, data),
            SampleType::I32 => self.write_block_as::<i32>(band, block_col, block_row, data),
            SampleType::F32 => self.write_block_as::<f32>(band, block_col, block_row, data),
            SampleType::F64 => self.write_block_as::<f64>(band, block_col, block_row, data),
        }
    }

    fn write_block_as<T: TiffSample>(
        &self,
        band: usize,
        bc: usize,
        br: usize,
        data: ArrayView2<f32>,
    ) -> Result<()> {
        let fill = T::from_f64_saturating(self.grid.nodata.unwrap_or(0.0));
        let p = &self.plan;
        let ss = T::TYPE.size();
        if p.planar || p.bands == 1 {
            let buf = self.planar_raw::<T>(br, data);
            let index = (band - 1) * p.per_plane() * usize::from(p.planar) + br * p.across + bc;
            return self.store(index, br, buf);
        }
        // Pixel-interleaved: gather the bands of this block.
        let index = br * p.across + bc;
        let done = {
            let mut st = self.lock()?;
            if st.written[index] {
                return Err(self.twice(band, bc, br));
            }
            let shape = p.shape(br);
            let pending = st.pending.entry(index).or_insert_with(|| PendingBlock {
                data: T::fill_le(fill, shape.bytes() / ss),
                bands_done: vec![false; p.bands],
            });
            if pending.bands_done[band - 1] {
                return Err(self.twice(band, bc, br));
            }
            for ((r, c), v) in data.indexed_iter() {
                let i = ((r * p.block_w + c) * p.bands + band - 1) * ss;
                T::from_f32(*v, fill).put_le(&mut pending.data[i..i + ss]);
            }
            pending.bands_done[band - 1] = true;
            if pending.bands_done.iter().all(|d| *d) {
                st.pending.remove(&index)
            } else {
                None
            }
        };
        match done {
            Some(block) => self.store(index, br, block.data),
            None => Ok(()),
        }
    }

    fn twice(&self, band: usize, bc: usize, br: usize) -> Error {
        Error::usage(format!(
            "block ({bc}, {br}) of band {band} was written twice"
        ))
        .in_file(&self.path)
    }

    fn lock(&self) -> Result<std::sync::MutexGuard<'_, State>> {
        self.state
            .lock()
            .map_err(|_| Error::file(&self.path, "a block write failed in another thread"))
    }

    /// Little-endian samples of one band's block in a band-sequential (or one-band) file,
    /// padded to the full block with the nodata fill.
    fn planar_raw<T: TiffSample>(&self, br: usize, data: ArrayView2<f32>) -> Vec<u8> {
        let p = &self.plan;
        let fill = T::from_f64_saturating(self.grid.nodata.unwrap_or(0.0));
        let ss = T::TYPE.size();
        let shape = p.shape(br);
        let mut buf = T::fill_le(fill, shape.bytes() / ss);
        // Row by row, a fixed sample size per instantiation: loops the compiler unrolls.
        let size = std::mem::size_of::<T>();
        debug_assert_eq!(size, ss);
        for (r, row) in data.rows().into_iter().enumerate() {
            let dst = &mut buf[r * p.block_w * size..][..row.len() * size];
            match row.as_slice() {
                Some(src) => {
                    for (d, v) in dst.chunks_exact_mut(size).zip(src) {
                        T::from_f32(*v, fill).put_le(d);
                    }
                }
                None => {
                    for (d, v) in dst.chunks_exact_mut(size).zip(row.iter()) {
                        T::from_f32(*v, fill).put_le(d);
                    }
                }
            }
        }
        buf
    }

    /// Convert, predict and compress block (`block_col`, `block_row`) of band `band`
    /// (1-based) of a band-sequential file without writing it: the costly part of
    /// [`write_block`](Self::write_block), safe to run on many threads. Hand the result to
    /// [`write_encoded`](Self::write_encoded); appending encoded blocks in a fixed order
    /// gives a file whose bytes do not depend on thread timing.
    pub fn encode_block(
        &self,
        band: usize,
        block_col: usize,
        block_row: usize,
        data: ArrayView2<f32>,
    ) -> Result<EncodedBlock> {
        self.check_block(band, block_col, block_row, data.dim())?;
        let p = &self.plan;
        if !(p.planar || p.bands == 1) {
            return Err(Error::usage(
                "blocks can be encoded ahead of writing only in band-sequential files",
            )
            .in_file(&self.path));
        }
        let raw = match p.sample_type {
            SampleType::U8 => self.planar_raw::<u8>(block_row, data),
            SampleType::U16 => self.planar_raw::<u16>(block_row, data),
            SampleType::I16 => self.planar_raw::<i16>(block_row, data),
            SampleType::U32 => self.planar_raw::<u32>(block_row, data),
            SampleType::I32 => self.planar_raw::<i32>(block_row, data),
            SampleType::F32 => self.planar_raw::<f32>(block_row, data),
            SampleType::F64 => self.planar_raw::<f64>(block_row, data),
        };
        let index =
            (band - 1) * p.per_plane() * usize::from(p.planar) + block_row * p.across + block_col;
        Ok(EncodedBlock {
            index,
            packed: self.pack(Some(index), block_row, raw)?,
        })
    }

    /// Append a block made by [`encode_block`](Self::encode_block). Thread-safe.
    pub fn write_encoded(&self, block: EncodedBlock) -> Result<()> {
        self.append(block.index, block.packed)
    }

    /// Predict and compress the little-endian samples `raw` of block `index` (block row
    /// `br`; `None` for an overview tile), first keeping its quarter of overview level 1.
    /// (Overview tiles keep theirs in [`level_from_quarters`](Self::level_from_quarters).)
    fn pack(&self, index: Option<usize>, br: usize, mut raw: Vec<u8>) -> Result<Vec<u8>> {
        if let (Some(q), Some(index)) = (&self.quarters, index) {
            let quarter = match self.plan.sample_type {
                SampleType::U8 => self.quarter::<u8>(0, index, &raw),
                SampleType::U16 => self.quarter::<u16>(0, index, &raw),
                SampleType::I16 => self.quarter::<i16>(0, index, &raw),
                SampleType::U32 => self.quarter::<u32>(0, index, &raw),
                SampleType::I32 => self.quarter::<i32>(0, index, &raw),
                SampleType::F32 => self.quarter::<f32>(0, index, &raw),
                SampleType::F64 => self.quarter::<f64>(0, index, &raw),
            };
            tags::write_all_at(&q.file, &quarter, self.quarter_at(q, 0, index))
                .map_err(|e| Error::io(&self.path, e))?;
        }
        let shape = self.plan.shape(br);
        codec::encode_samples(&mut raw, shape, self.plan.predictor);
        let row_bytes = shape.row_samples * shape.sample_size;
        codec::compress(self.plan.codec, raw, row_bytes).map_err(|p| Error::file(&self.path, p))
    }

    /// Predict, compress and append block `index` (block row `br`) whose little-endian
    /// samples are `raw`, padded to the full block.
    pub(super) fn store(&self, index: usize, br: usize, raw: Vec<u8>) -> Result<()> {
        let packed = self.pack(Some(index), br, raw)?;
        self.append(index, packed)
    }

    /// Append the compressed block `index` at the end of the file and record where it is.
    fn append(&self, index: usize, packed: Vec<u8>) -> Result<()> {
        let offset = {
            let mut st = self.lock()?;
            if st.written[index] {
                let (bc, br) = (
                    index % self.plan.across,
                    (index % self.plan.per_plane()) / self.plan.across,
                );
                let band = index / self.plan.per_plane() + 1;
                return Err(self.twice(band, bc, br));
            }
            let offset = st.end;
            st.end += packed.len() as u64;
            if !self.plan.big && st.end > u32::MAX as u64 {
                let msg = "the file has grown past 4 GiB, the limit of classic TIFF";
                st.failure = Some(msg.into());
                return Err(Error::file(&self.path, msg)
                    .with_fix("write it as BigTIFF (BigTiff::Always or Auto)"));
            }
            st.written[index] = true;
            st.offsets[index] = offset;
            st.counts[index] = packed.len() as u64;
            if st.end > st.reserved {
                // Steps of the size written so far, between 4 and 64 MiB; a refusal (no
                // room for the step) stops the steps, and writing goes on as before.
                let next = st.end + st.end.clamp(RESERVE_STEP_MIN, RESERVE_STEP_MAX);
                st.reserved = if file_ranges::reserve(&self.file, next) {
                    next
                } else {
                    u64::MAX
                };
            }
            offset
        };
        tags::write_all_at(&self.file, &packed, offset).map_err(|e| {
            if let Ok(mut st) = self.state.lock() {
                st.failure = Some(e.to_string());
            }
            Error::io(&self.path, e)
        })
    }

    /// Write the directory and close the file. Fails when a block was never written. With
    /// overviews, first builds every overview level and lays the file out as a Cloud
    /// Optimized GeoTIFF (see the module documentation).
    pub fn finish(self) -> Result<()> {
        let st = std::mem::take(&mut *self.lock()?);
        if let Some(f) = st.failure {
            return Err(Error::file(
                &self.path,
                format!("an earlier block write failed: {f}"),
            ));
        }
        let p = &self.plan;
        if let Some(missing) = st.written.iter().position(|w| !w) {
            let (bc, br) = (missing % p.across, (missing % p.per_plane()) / p.across);
            let band = if p.planar {
                missing / p.per_plane() + 1
            } else {
                1
            };
            let total = st.written.iter().filter(|w| !**w).count();
            return Err(Error::usage(format!(
                "{total} block(s) were never written, the first is block ({bc}, {br}) of band {band}"
            ))
            .in_file(&self.path)
            .with_fix("write every block of every band before finishing the file"));
        }
        if p.cog {
            return self.finish_cog(st);
        }
        let mut entries = self.image_entries(0);
        let (offsets, counts) = (self.index_value(&st.offsets), self.index_value(&st.counts));
        if p.tiled {
            entries.push((tags::TILE_OFFSETS, offsets));
            entries.push((tags::TILE_BYTE_COUNTS, counts));
        } else {
            entries.push((tags::STRIP_OFFSETS, offsets));
            entries.push((tags::STRIP_BYTE_COUNTS, counts));
        }
        entries.extend(self.band_entries());
        let at = st.end + st.end % 2; // IFDs start on a word boundary (TIFF 6.0 §2)
        let ifd = tags::build_ifd(entries, at, p.big);
        if !p.big && at + ifd.len() as u64 > u32::MAX as u64 {
            return Err(Error::file(
                &self.path,
                "the file would pass 4 GiB, the limit of classic TIFF",
            )
            .with_fix("write it as BigTIFF (BigTiff::Always or Auto)"));
        }
        let io = |e| Error::io(&self.path, e);
        tags::write_all_at(&self.file, &ifd, at).map_err(io)?;
        if p.big {
            tags::write_all_at(&self.file, &at.to_le_bytes(), 8).map_err(io)?;
        } else {
            tags::write_all_at(&self.file, &(at as u32).to_le_bytes(), 4).map_err(io)?;
        }
        self.file.set_len(at + ifd.len() as u64).map_err(io)?;
        Ok(())
    }

    /// The tags describing the image of level `k` (0 = full resolution): size, samples,
    /// compression, predictor and tiling (or strips). No offsets, no georeferencing.
    fn image_entries(&self, k: usize) -> Vec<(u16, OutValue)> {
        let p = &self.plan;
        let (width, height) = p.level_size(k);
        let mut entries: Vec<(u16, OutValue)> = vec![
            (tags::IMAGE_WIDTH, OutValue::Long(vec![width as u32])),
            (tags::IMAGE_LENGTH, OutValue::Long(vec![height as u32])),
            (
                tags::BITS_PER_SAMPLE,
                OutValue::Short(vec![(p.sample_type.size() * 8) as u16; p.bands]),
            ),
            (tags::COMPRESSION, OutValue::Short(vec![p.codec.tag()])),
            (tags::PHOTOMETRIC, OutValue::Short(vec![1])), // BlackIsZero
            (
                tags::SAMPLES_PER_PIXEL,
                OutValue::Short(vec![p.bands as u16]),
            ),
            (
                tags::PLANAR_CONFIGURATION,
                OutValue::Short(vec![if p.planar { 2 } else { 1 }]),
            ),
            (
                tags::SAMPLE_FORMAT,
                OutValue::Short(vec![
                    match p.sample_type {
                        SampleType::U8 | SampleType::U16 | SampleType::U32 => 1,
                        SampleType::I16 | SampleType::I32 => 2,
                        SampleType::F32 | SampleType::F64 => 3,
                    };
                    p.bands
                ]),
            ),
        ];
        if p.bands > 1 {
            // Extra samples of unspecified meaning (TIFF 6.0 §18), as GDAL writes them.
            entries.push((tags::EXTRA_SAMPLES, OutValue::Short(vec![0; p.bands - 1])));
        }
        if p.predictor != 1 {
            entries.push((tags::PREDICTOR, OutValue::Short(vec![p.predictor])));
        }
        if p.tiled {
            entries.push((tags::TILE_WIDTH, OutValue::Long(vec![p.block_w as u32])));
            entries.push((tags::TILE_LENGTH, OutValue::Long(vec![p.block_h as u32])));
        } else {
            entries.push((tags::ROWS_PER_STRIP, OutValue::Long(vec![p.block_h as u32])));
        }
        if p.cog {
            // Bit 0: reduced-resolution image (TIFF 6.0 §8).
            let kind = u32::from(k > 0);
            entries.push((tags::NEW_SUBFILE_TYPE, OutValue::Long(vec![kind])));
        }
        entries
    }

    /// Georeferencing, band descriptions and units, and nodata: the full resolution's.
    fn band_entries(&self) -> Vec<(u16, OutValue)> {
        let mut entries = georeferencing_tags(&self.grid, self.space);
        if let Some(xml) = metadata::build_bands(&self.descriptions, &self.units) {
            entries.push((tags::GDAL_METADATA, OutValue::Ascii(xml)));
        }
        entries.extend(self.nodata_entry());
        entries
    }

    fn nodata_entry(&self) -> Option<(u16, OutValue)> {
        self.grid
            .nodata
            .map(|nd| (tags::GDAL_NODATA, OutValue::Ascii(nodata_text(nd))))
    }

    /// Offsets or byte counts as a tag value: LONG in classic TIFF, LONG8 in BigTIFF.
    fn index_value(&self, v: &[u64]) -> OutValue {
        if self.plan.big {
            OutValue::Long8(v.to_vec())
        } else {
            OutValue::Long(v.iter().map(|o| *o as u32).collect())
        }
    }

    /// Build the overview levels into the spill file, then write the output: header,
    /// directories, tile offsets and byte counts, overview tiles smallest level first,
    /// full-resolution tiles.
    fn finish_cog(&self, st: State) -> Result<()> {
        let p = &self.plan;
        let io = |e| Error::io(&self.path, e);
        let n = p.levels.len();
        let mut spans = vec![LevelTiles {
            start: 0,
            end: st.end,
            offsets: st.offsets,
            counts: st.counts,
        }];
        let mut end = st.end;
        let wave = rayon::current_num_threads().max(1) * 2;
        for k in 1..=n {
            let blocks = p.level_blocks(k);
            let alloc_error = || {
                Error::file(
                    &self.path,
                    format!("the tile index of overview level {k} ({blocks} tiles) could not be allocated"),
                )
                .with_fix("write a smaller raster, fewer bands or larger tiles")
            };
            let mut offsets = zeroed::<u64>(blocks).ok_or_else(alloc_error)?;
            let mut counts = zeroed::<u64>(blocks).ok_or_else(alloc_error)?;
            let start = end;
            let prev = &spans[k - 1];
            // Tiles are made in parallel, a wave at a time, and appended in tile order: the
            // bytes do not depend on the threads.
            for first in (0..blocks).step_by(wave) {
                use rayon::prelude::*;
                let last = (first + wave).min(blocks);
                let packed: Vec<Result<Vec<u8>>> = (first..last)
                    .into_par_iter()
                    .map(|i| match p.sample_type {
                        SampleType::U8 => self.overview_tile::<u8>(k, i, prev),
                        SampleType::U16 => self.overview_tile::<u16>(k, i, prev),
                        SampleType::I16 => self.overview_tile::<i16>(k, i, prev),
                        SampleType::U32 => self.overview_tile::<u32>(k, i, prev),
                        SampleType::I32 => self.overview_tile::<i32>(k, i, prev),
                        SampleType::F32 => self.overview_tile::<f32>(k, i, prev),
                        SampleType::F64 => self.overview_tile::<f64>(k, i, prev),
                    })
                    .collect();
                for (i, bytes) in (first..last).zip(packed) {
                    let bytes = bytes?;
                    tags::write_all_at(&self.file, &bytes, end).map_err(io)?;
                    offsets[i] = end;
                    counts[i] = bytes.len() as u64;
                    end += bytes.len() as u64;
                }
            }
            spans.push(LevelTiles {
                start,
                end,
                offsets,
                counts,
            });
        }

        // Where everything goes: header, IFDs (each with its values), the late tile
        // offsets and byte counts, then the tiles.
        let late = [tags::TILE_OFFSETS, tags::TILE_BYTE_COUNTS];
        let entries = |k: usize, offsets: &[u64], counts: &[u64]| {
            let mut e = self.image_entries(k);
            e.push((tags::TILE_OFFSETS, self.index_value(offsets)));
            e.push((tags::TILE_BYTE_COUNTS, self.index_value(counts)));
            if k == 0 {
                e.extend(self.band_entries());
            } else {
                e.extend(self.nodata_entry());
            }
            e
        };
        let even = |x: u64| x + x % 2;
        let mut pos: u64 = if p.big { 16 } else { 8 };
        let mut ifd_at = Vec::with_capacity(n + 1);
        let mut late_len = Vec::with_capacity(n + 1);
        for (k, span) in spans.iter().enumerate() {
            let (ifd, values) = tags::build_ifd_split(
                entries(k, &span.offsets, &span.counts),
                0,
                p.big,
                0,
                &late,
                0,
            );
            ifd_at.push(pos);
            pos = even(pos + ifd.len() as u64);
            late_len.push(values.len() as u64);
        }
        let mut late_at = Vec::with_capacity(n + 1);
        for len in &late_len {
            late_at.push(pos);
            pos = even(pos + len);
        }
        // A large file is finished in its spill file (`make_room_in_spill`): the tiles start
        // after a gap that ends on an IN_PLACE_ALIGN boundary, whichever way the file is
        // finished, so its bytes do not depend on the file system.
        let overview_bytes: u64 = spans[1..].iter().map(|s| s.end - s.start).sum();
        let in_place = spans[0].end >= file_ranges::IN_PLACE_MIN_BYTES;
        if in_place {
            pos = (pos + overview_bytes).next_multiple_of(file_ranges::IN_PLACE_ALIGN)
                - overview_bytes;
        }
        let mut data_at = vec![0u64; n + 1];
        for k in (0..=n).rev() {
            data_at[k] = pos;
            pos += spans[k].end - spans[k].start;
        }
        let total = pos;
        if !p.big && total > u32::MAX as u64 {
            return Err(Error::file(
                &self.path,
                "the file would pass 4 GiB, the limit of classic TIFF",
            )
            .with_fix("write it as BigTIFF (BigTiff::Always or Auto)"));
        }
        let out = self
            .output
            .as_ref()
            .expect("the Cloud Optimized layout has an output file");
        let finished_in_place = in_place
            && self
                .make_room_in_spill(&spans, &data_at, total)
                .map_err(io)?;
        let out = if finished_in_place { &self.file } else { out };
        if !finished_in_place {
            file_ranges::reserve(out, total);
            out.set_len(total).map_err(io)?;
        }
        let mut header: Vec<u8> = if p.big {
            b"II+\0\x08\0\0\0".to_vec()
        } else {
            b"II*\0".to_vec()
        };
        if p.big {
            header.extend_from_slice(&ifd_at[0].to_le_bytes());
        } else {
            header.extend_from_slice(&(ifd_at[0] as u32).to_le_bytes());
        }
        tags::write_all_at(out, &header, 0).map_err(io)?;
        for (k, span) in spans.iter().enumerate() {
            let moved: Vec<u64> = span
                .offsets
                .iter()
                .map(|o| data_at[k] + (o - span.start))
                .collect();
            let next = ifd_at.get(k + 1).copied().unwrap_or(0);
            let (ifd, values) = tags::build_ifd_split(
                entries(k, &moved, &span.counts),
                ifd_at[k],
                p.big,
                next,
                &late,
                late_at[k],
            );
            tags::write_all_at(out, &ifd, ifd_at[k]).map_err(io)?;
            tags::write_all_at(out, &values, late_at[k]).map_err(io)?;
        }
        if finished_in_place {
            let spill = self
                ._spill
                .as_ref()
                .expect("a Cloud Optimized writer has a spill file");
            // The spill file, now the whole output, replaces the empty output file.
            std::fs::rename(&spill.path, &self.path).map_err(io)?;
            return Ok(());
        }
        for (k, span) in spans.iter().enumerate().rev() {
            file_ranges::copy_range(
                &self.file,
                span.start,
                span.end - span.start,
                out,
                data_at[k],
            )
            .map_err(io)?;
        }
        Ok(())
    }

    /// Turn the spill file (full resolution from 0, then the overview levels) into the
    /// output's tile data without copying the full resolution: room is inserted at its
    /// front (`data_at[0]` bytes, an IN_PLACE_ALIGN multiple), the overview levels are
    /// copied into that room at `data_at[k]` and cut from the end, leaving `total` bytes.
    /// `Ok(false)`, with the spill file untouched, where the file system cannot insert or
    /// the output path is a symbolic link or has other hard links (a rename would replace
    /// the link instead of writing the file).
    fn make_room_in_spill(
        &self,
        spans: &[LevelTiles],
        data_at: &[u64],
        total: u64,
    ) -> std::io::Result<bool> {
        let room = data_at[0];
        debug_assert_eq!(room % file_ranges::IN_PLACE_ALIGN, 0);
        if !file_ranges::replaceable_by_rename(&self.path)?
            || !file_ranges::insert_at_front(&self.file, room)?
        {
            return Ok(false);
        }
        for (k, span) in spans.iter().enumerate().skip(1) {
            file_ranges::copy_within(
                &self.file,
                room + span.start,
                span.end - span.start,
                data_at[k],
            )?;
        }
        self.file.set_len(total)?;
        Ok(true)
    }

    /// Tile `index` of overview level `k` (1-based), predicted and compressed: each cell
    /// reduces the 2 x 2 cells of level k − 1 it covers (read back from the spill file)
    /// with its band's [`OverviewResampling`]; nodata and cells past the edge are left out.
    fn overview_tile<T: TiffSample>(
        &self,
        k: usize,
        index: usize,
        prev: &LevelTiles,
    ) -> Result<Vec<u8>> {
        if let Some(q) = &self.quarters {
            return self.level_from_quarters::<T>(q, k, index);
        }
        let p = &self.plan;
        let t = p.block_w;
        let (across, down) = p.level_grid(k);
        let per_plane = across * down;
        let plane = index / per_plane;
        let (tc, tr) = (index % per_plane % across, index % per_plane / across);
        let (pa, pd) = p.level_grid(k - 1);
        let (pw, ph) = p.level_size(k - 1);
        let (w, h) = p.level_size(k);
        let spp = p.samples_per_block_pixel();
        let ss = T::TYPE.size();
        const QUAD: [(usize, usize); 4] = [(0, 0), (1, 0), (0, 1), (1, 1)];
        // The four child tiles as f64 samples, nodata as NaN (absent past the edge).
        let mut children: [Option<(Vec<f64>, Option<CircularParts>)>; 4] = Default::default();
        for (j, (dx, dy)) in QUAD.iter().enumerate() {
            let (cc, cr) = (2 * tc + dx, 2 * tr + dy);
            if cc >= pa || cr >= pd {
                continue;
            }
            let ci = plane * pa * pd + cr * pa + cc;
            let mut raw = vec![0u8; prev.counts[ci] as usize];
            tags::read_exact_at(&self.file, &mut raw, prev.offsets[ci])
                .map_err(|e| Error::io(&self.path, e))?;
            let shape = p.shape(0);
            let mut data = codec::decompress(p.codec, raw, shape.bytes())
                .map_err(|e| Error::file(&self.path, format!("reading back a tile: {e}")))?;
            codec::decode_samples(&mut data, shape, tags::ByteOrder::Little, p.predictor);
            let values = self.values(&data, T::from_ne);
            let parts = self.circular_parts(plane, &values);
            children[j] = Some((values, parts));
        }
        let fill = T::from_f64_saturating(self.grid.nodata.unwrap_or(0.0));
        let mut out = T::fill_le(fill, t * t * spp);
        let (vw, vh) = (t.min(w - tc * t), t.min(h - tr * t));
        // Tiles are aligned: output cell (r, c) covers rows 2r, 2r + 1 and columns 2c,
        // 2c + 1 of the children's 2t x 2t mosaic, so the child is (2r / t, 2c / t) and the
        // place in it (2r mod t, 2c mod t). A second row or column past level k − 1's edge
        // does not take part.
        let (row0, col0) = (2 * tr * t, 2 * tc * t);
        for r in 0..vh {
            let (cy, lr) = ((2 * r) / t, (2 * r) % t);
            let second_row = row0 + 2 * r + 1 < ph;
            for c in 0..vw {
                let (cx, lc) = ((2 * c) / t, (2 * c) % t);
                let Some((d, parts)) = &children[2 * cy + cx] else {
                    continue;
                };
                let second_col = col0 + 2 * c + 1 < pw;
                let top = (lr * t + lc) * spp;
                let below = top + t * spp;
                for s in 0..spp {
                    let band = if p.planar { plane } else { s };
                    let cells = [
                        Some(top + s),
                        second_col.then_some(top + spp + s),
                        second_row.then_some(below + s),
                        (second_row && second_col).then_some(below + spp + s),
                    ];
                    let v = self.reduce_cells(band, &cells, d, parts.as_ref());
                    if !v.is_nan() {
                        let i = ((r * t + c) * spp + s) * ss;
                        T::from_f64_saturating(v).put_le(&mut out[i..i + ss]);
                    }
                }
            }
        }
        self.pack(None, 0, out)
    }

    /// Tile `index` of level `k` (0 = full resolution; little-endian samples `raw`,
    /// padded to the tile) reduced to the t/2 x t/2 cells it covers at level k + 1, as
    /// little-endian samples: cell (r, c) reduces cells (2r, 2c), (2r, 2c + 1),
    /// (2r + 1, 2c), (2r + 1, 2c + 1) of the tile, those past the level's edge and nodata
    /// left out; cells with none left hold the nodata fill.
    fn quarter<T: TiffSample>(&self, k: usize, index: usize, raw: &[u8]) -> Vec<u8> {
        let p = &self.plan;
        let t = p.block_w;
        let half = t / 2;
        let spp = p.samples_per_block_pixel();
        let ss = T::TYPE.size();
        let (across, down) = p.level_grid(k);
        let per_plane = across * down;
        let plane = index / per_plane;
        let (bc, br) = (index % per_plane % across, index % per_plane / across);
        let (w, h) = p.level_size(k);
        let (vw, vh) = (t.min(w - bc * t), t.min(h - br * t));
        let fill = T::from_f64_saturating(self.grid.nodata.unwrap_or(0.0));
        let mut out = T::fill_le(fill, half * half * spp);
        let band = if p.planar { plane } else { 0 };
        if spp == 1 && self.resampling[band] == OverviewResampling::Average {
            self.quarter_average::<T>(raw, (vw, vh), fill, &mut out);
            return out;
        }
        let values = self.values(raw, sample_le::<T>);
        let parts = self.circular_parts(plane, &values);
        let at = |r: usize, c: usize, s: usize| (r * t + c) * spp + s;
        for r in 0..vh.div_ceil(2) {
            let second_row = 2 * r + 1 < vh;
            for c in 0..vw.div_ceil(2) {
                let second_col = 2 * c + 1 < vw;
                for s in 0..spp {
                    let band = if p.planar { plane } else { s };
                    let cells = [
                        Some(at(2 * r, 2 * c, s)),
                        second_col.then(|| at(2 * r, 2 * c + 1, s)),
                        second_row.then(|| at(2 * r + 1, 2 * c, s)),
                        (second_row && second_col).then(|| at(2 * r + 1, 2 * c + 1, s)),
                    ];
                    let v = self.reduce_cells(band, &cells, &values, parts.as_ref());
                    if !v.is_nan() {
                        let i = ((r * half + c) * spp + s) * ss;
                        T::from_f64_saturating(v).put_le(&mut out[i..i + ss]);
                    }
                }
            }
        }
        out
    }

    /// [`quarter`](Self::quarter) of a tile with one sample per pixel whose band takes
    /// the average (`vw` x `vh` valid cells), into `out` (already holding the nodata
    /// `fill`): the same values, read straight from the tile's bytes without a converted
    /// copy of the tile; whole 2 x 2 groups by [`average_groups`], the groups cut by the
    /// level's edge by [`overview::reduce`] in the same order.
    fn quarter_average<T: TiffSample>(
        &self,
        raw: &[u8],
        (vw, vh): (usize, usize),
        fill: T,
        out: &mut [u8],
    ) {
        let t = self.plan.block_w;
        let half = t / 2;
        let ss = std::mem::size_of::<T>();
        let nodata = self.grid.nodata.and_then(T::nodata_match);
        let value = |i: usize| {
            let v = sample_le::<T>(&raw[i * ss..(i + 1) * ss]).to_f64();
            if nodata == Some(v) {
                f64::NAN
            } else {
                v
            }
        };
        for r in 0..vh.div_ceil(2) {
            let second_row = 2 * r + 1 < vh;
            // Whole 2 x 2 groups: in one loop that vectorises.
            let whole = if second_row { vw / 2 } else { 0 };
            if whole > 0 {
                let top = &raw[2 * r * t * ss..][..2 * whole * ss];
                let below = &raw[(2 * r + 1) * t * ss..][..2 * whole * ss];
                let row = &mut out[r * half * ss..][..whole * ss];
                average_groups::<T>(top, below, row, nodata, fill);
            }
            for c in whole..vw.div_ceil(2) {
                let second_col = 2 * c + 1 < vw;
                let i = 2 * r * t + 2 * c;
                let either = |take: bool, i: usize| if take { value(i) } else { f64::NAN };
                let cells = [
                    value(i),
                    either(second_col, i + 1),
                    either(second_row, i + t),
                    either(second_row && second_col, i + t + 1),
                ];
                let v = overview::reduce(OverviewResampling::Average, &cells);
                if !v.is_nan() {
                    let at = (r * half + c) * ss;
                    T::from_f64_saturating(v).put_le(&mut out[at..at + ss]);
                }
            }
        }
    }

    /// The samples of `bytes` (each read by `read`) as f64, the nodata value as NaN.
    fn values<T: TiffSample>(&self, bytes: &[u8], read: fn(&[u8]) -> T) -> Vec<f64> {
        let nodata = self.grid.nodata.and_then(T::nodata_match);
        bytes
            .chunks_exact(T::TYPE.size())
            .map(|b| {
                let v = read(b).to_f64();
                if nodata == Some(v) {
                    f64::NAN
                } else {
                    v
                }
            })
            .collect()
    }

    /// The sines and cosines of `values` when they are all of one band (a band-sequential
    /// or one-band file) whose overviews take the circular mean; `None` otherwise.
    fn circular_parts(&self, plane: usize, values: &[f64]) -> Option<CircularParts> {
        let p = &self.plan;
        let band = if p.planar { plane } else { 0 };
        if !(p.planar || p.bands == 1) || self.resampling[band] != OverviewResampling::Circular {
            return None;
        }
        let mut parts = CircularParts {
            sin: vec![0.0; values.len()],
            cos: vec![0.0; values.len()],
        };
        overview::sin_cos_degrees_many(values, &mut parts.sin, &mut parts.cos);
        Some(parts)
    }

    /// Reduce the (up to) four cells `cells` (indices into `values`, in the order upper
    /// left, upper right, lower left, lower right; `None` for one that does not take part)
    /// of band `band` (0-based); with their sines and cosines in `parts` when the band
    /// takes the circular mean. The same value as [`overview::reduce`] of the cells.
    fn reduce_cells(
        &self,
        band: usize,
        cells: &[Option<usize>; 4],
        values: &[f64],
        parts: Option<&CircularParts>,
    ) -> f64 {
        if let Some(parts) = parts {
            let (mut s, mut c, mut n) = (0.0, 0.0, 0u32);
            for &i in cells.iter().flatten() {
                if !parts.sin[i].is_nan() {
                    s += parts.sin[i];
                    c += parts.cos[i];
                    n += 1;
                }
            }
            return overview::mean_direction(s, c, n);
        }
        let mut vals = [f64::NAN; 4];
        for (v, i) in vals.iter_mut().zip(cells.iter()) {
            if let Some(i) = i {
                *v = values[*i];
            }
        }
        overview::reduce(self.resampling[band], &vals)
    }

    /// Tile `index` of overview level `k` (1-based) put together from the quarters of
    /// the (up to) four tiles of level k − 1 it covers, predicted and compressed; below
    /// the last level, its own quarter is kept first, for level k + 1.
    fn level_from_quarters<T: TiffSample>(
        &self,
        q: &Quarters,
        k: usize,
        index: usize,
    ) -> Result<Vec<u8>> {
        let p = &self.plan;
        let t = p.block_w;
        let half = t / 2;
        let (across, down) = p.level_grid(k);
        let per_plane = across * down;
        let plane = index / per_plane;
        let (tc, tr) = (index % per_plane % across, index % per_plane / across);
        let (pa, pd) = p.level_grid(k - 1);
        let spp = p.samples_per_block_pixel();
        let ss = T::TYPE.size();
        let row_bytes = half * spp * ss;
        let fill = T::from_f64_saturating(self.grid.nodata.unwrap_or(0.0));
        let mut out = T::fill_le(fill, t * t * spp);
        let mut quarter = vec![0u8; q.slot];
        for (dx, dy) in [(0, 0), (1, 0), (0, 1), (1, 1)] {
            let (cc, cr) = (2 * tc + dx, 2 * tr + dy);
            if cc >= pa || cr >= pd {
                continue;
            }
            let ci = plane * pa * pd + cr * pa + cc;
            tags::read_exact_at(&q.file, &mut quarter, self.quarter_at(q, k - 1, ci))
                .map_err(|e| Error::io(&self.path, e))?;
            for r in 0..half {
                let to = ((dy * half + r) * t + dx * half) * spp * ss;
                out[to..to + row_bytes]
                    .copy_from_slice(&quarter[r * row_bytes..(r + 1) * row_bytes]);
            }
        }
        if k < p.levels.len() {
            let own = self.quarter::<T>(k, index, &out);
            tags::write_all_at(&q.file, &own, self.quarter_at(q, k, index))
                .map_err(|e| Error::io(&self.path, e))?;
        }
        self.pack(None, 0, out)
    }

    /// Where the quarter of tile `index` of level `k` (0 = full resolution) lies in the
    /// quarters file: the levels one after another, a slot per tile.
    fn quarter_at(&self, q: &Quarters, k: usize, index: usize) -> u64 {
        let before: usize = (0..k).map(|j| self.plan.level_blocks(j)).sum();
        ((before + index) * q.slot) as u64
    }
}

/// The average of each 2 x 2 group of cells, the groups side by side along the two rows
/// `top` and `below` (little-endian samples), into `out`: the value
/// [`overview::reduce`] gives for the group's cells in the order upper left, upper right,
/// lower left, lower right, nodata (`nodata`) left out, and `fill` where none is left or
/// the mean is NaN. Without branches, so that the loop vectorises: each cell adds its
/// value or +0.0 to a sum that starts at +0.0 (never −0.0, so adding +0.0 changes
/// nothing) and 0 / 0 is the NaN of an empty group.
#[inline(never)]
fn average_groups<T: TiffSample>(
    top: &[u8],
    below: &[u8],
    out: &mut [u8],
    nodata: Option<f64>,
    fill: T,
) {
    let ss = std::mem::size_of::<T>();
    let nd = nodata.unwrap_or(f64::NAN);
    let part = |b: &[u8]| {
        let v = sample_le::<T>(b).to_f64();
        // NaN never equals `nd`; a NaN sample (a float band) is left out as well.
        let valid = !v.is_nan() && v != nd;
        (if valid { v } else { 0.0 }, if valid { 1.0 } else { 0.0 })
    };
    for ((a, b), o) in top
        .chunks_exact(2 * ss)
        .zip(below.chunks_exact(2 * ss))
        .zip(out.chunks_exact_mut(ss))
    {
        let (ul, n0) = part(&a[..ss]);
        let (ur, n1) = part(&a[ss..]);
        let (ll, n2) = part(&b[..ss]);
        let (lr, n3) = part(&b[ss..]);
        let mean = (((0.0 + ul) + ur) + ll + lr) / (n0 + n1 + n2 + n3);
        let v = if mean.is_nan() {
            fill
        } else {
            T::from_f64_saturating(mean)
        };
        v.put_le(o);
    }
}

/// A sample from its little-endian bytes.
fn sample_le<T: TiffSample>(bytes: &[u8]) -> T {
    let mut b = [0u8; 8];
    let n = bytes.len();
    b[..n].copy_from_slice(bytes);
    if cfg!(target_endian = "big") {
        b[..n].reverse();
    }
    T::from_ne(&b[..n])
}

/// Where one level's tiles lie in the spill file: the byte range of the level, and each
/// tile's offset and byte count.
struct LevelTiles {
    start: u64,
    end: u64,
    offsets: Vec<u64>,
    counts: Vec<u64>,
}

/// `n` default values, or `None` when the allocation fails (instead of aborting).
fn zeroed<T: Default + Clone>(n: usize) -> Option<Vec<T>> {
    let mut v = Vec::new();
    v.try_reserve_exact(n).ok()?;
    v.resize(n, T::default());
    Some(v)
}

/// GDAL's text for a nodata value: "nan", "inf", "-inf", or the shortest decimal that
/// reads back to the same double.
pub(super) fn nodata_text(v: f64) -> String {
    if v.is_nan() {
        "nan".into()
    } else if v.is_infinite() {
        if v > 0.0 { "inf" } else { "-inf" }.into()
    } else {
        let t = format!("{v:?}");
        t.strip_suffix(".0").map(str::to_string).unwrap_or(t)
    }
}

/// ModelPixelScale + ModelTiepoint (north-up grids, as GDAL writes them) or
/// ModelTransformation (south-up grids), and the GeoKeys. A grid with no CRS and the
/// transform `[0, 1, 0, 0, 0, 1]` gets no georeferencing tags at all.
fn georeferencing_tags(grid: &Grid, space: RasterSpace) -> Vec<(u16, OutValue)> {
    let t = grid.transform;
    let identity = t == [0.0, 1.0, 0.0, 0.0, 0.0, 1.0];
    if grid.crs.kind == CrsKind::Unknown && grid.crs.epsg.is_none() && identity {
        return Vec::new();
    }
    let mut out = Vec::new();
    // In pixel-is-point files the tiepoint is the centre of cell (0, 0) (OGC GeoTIFF 1.1
    // §B.2); GDAL's arithmetic.
    let (x0, y0) = match space {
        RasterSpace::Area => (t[0], t[3]),
        RasterSpace::Point => (
            t[0] + t[1] * 0.5 + t[2] * 0.5,
            t[3] + t[4] * 0.5 + t[5] * 0.5,
        ),
    };
    if t[2] == 0.0 && t[4] == 0.0 && t[5] < 0.0 {
        out.push((
            tags::MODEL_PIXEL_SCALE,
            OutValue::Double(vec![t[1], -t[5], 0.0]),
        ));
        out.push((
            tags::MODEL_TIEPOINT,
            OutValue::Double(vec![0.0, 0.0, 0.0, x0, y0, 0.0]),
        ));
    } else {
        out.push((
            tags::MODEL_TRANSFORMATION,
            OutValue::Double(vec![
                t[1], t[2], 0.0, x0, t[4], t[5], 0.0, y0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 1.0,
            ]),
        ));
    }
    let (dir, doubles, ascii) = geokeys::build(&grid.crs, space);
    out.push((tags::GEO_KEY_DIRECTORY, OutValue::Short(dir)));
    if !doubles.is_empty() {
        out.push((tags::GEO_DOUBLE_PARAMS, OutValue::Double(doubles)));
    }
    if !ascii.is_empty() {
        out.push((tags::GEO_ASCII_PARAMS, OutValue::Ascii(ascii)));
    }
    out
}

/// Write whole in-memory bands; see [`super::write_geotiff`].
pub(super) fn write_all<T: TiffSample>(
    path: &Path,
    grid: &Grid,
    bands: &[ArrayView2<T>],
    descriptions: &[&str],
    options: &WriteOptions,
) -> Result<()> {
    use rayon::prelude::*;
    if bands.is_empty() {
        return Err(Error::usage("no band to write").in_file(path));
    }
    for (i, b) in bands.iter().enumerate() {
        if b.dim() != (grid.height, grid.width) {
            return Err(Error::usage(format!(
                "band {} is {} x {} cells but the grid is {} x {}",
                i + 1,
                b.ncols(),
                b.nrows(),
                grid.width,
                grid.height
            ))
            .in_file(path));
        }
    }
    let mut options = options.clone();
    options.sample_type = T::TYPE;
    let mut writer = GeoTiffWriter::create(path, grid, bands.len(), options)?;
    for (i, d) in descriptions.iter().enumerate() {
        writer.set_band_description(i + 1, d);
    }
    let p = &writer.plan;
    let fill = T::from_f64_saturating(grid.nodata.unwrap_or(0.0));
    let ss = T::TYPE.size();
    let result = (0..p.block_count()).into_par_iter().try_for_each(|index| {
        let plane = index / p.per_plane();
        let (bc, br) = (index % p.across, (index % p.per_plane()) / p.across);
        let (w, h) = p.valid_size(bc, br);
        let spp = p.samples_per_block_pixel();
        let shape = p.shape(br);
        let mut buf = T::fill_le(fill, shape.bytes() / ss);
        let (x0, y0) = (bc * p.block_w, br * p.block_h);
        let band_range = if p.planar {
            plane..plane + 1
        } else {
            0..p.bands
        };
        for (k, b) in band_range.enumerate() {
            let src = &bands[b];
            // A fixed sample size per instantiation: loops the compiler unrolls.
            let size = std::mem::size_of::<T>();
            debug_assert_eq!(size, ss);
            for r in 0..h {
                let row = src.row(y0 + r);
                let dst = &mut buf[(r * p.block_w * spp + k) * size..];
                match (spp, row.as_slice()) {
                    (1, Some(cells)) => {
                        for (d, v) in dst.chunks_exact_mut(size).zip(&cells[x0..x0 + w]) {
                            v.put_le(d);
                        }
                    }
                    _ => {
                        for (d, v) in dst.chunks_mut(spp * size).zip(row.iter().skip(x0).take(w)) {
                            v.put_le(&mut d[..size]);
                        }
                    }
                }
            }
        }
        writer.store(index, br, buf)
    });
    match result.and_then(|_| writer.finish()) {
        Ok(()) => Ok(()),
        Err(e) => {
            let _ = std::fs::remove_file(path);
            Err(e)
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn tile_index_bytes_grow_with_the_raster() {
        use crate::grid::{Crs, MAX_DIMENSION};
        let side = MAX_DIMENSION;
        let g = Grid::new(
            side,
            side,
            [0.0, 0.1, 0.0, 0.0, 0.0, -0.1],
            Crs::from_epsg(32633),
        )
        .unwrap();
        let o = WriteOptions::default(); // 512² tiles, band-sequential
        let path = Path::new("never-created.tif");
        // (2²² / 512)² = 8192² tiles per band, 49 bytes each: 3.3 GB for one band; the 13
        // overview levels add 4096² + 2048² + … + 1 tiles: (4¹⁴ − 1)/3 tiles in all.
        let one = GeoTiffWriter::index_bytes(path, &g, 1, &o).unwrap();
        assert_eq!(one, (4u64.pow(14) - 1) / 3 * INDEX_BYTES_PER_BLOCK);
        let flat = WriteOptions {
            overviews: false,
            ..WriteOptions::default()
        };
        assert_eq!(
            GeoTiffWriter::index_bytes(path, &g, 1, &flat).unwrap(),
            8192 * 8192 * INDEX_BYTES_PER_BLOCK
        );
        assert_eq!(
            GeoTiffWriter::index_bytes(path, &g, 33, &o).unwrap(),
            33 * one
        );
        assert!(!path.exists());
        let small = Grid::new(
            1000,
            600,
            [0.0, 0.1, 0.0, 0.0, 0.0, -0.1],
            Crs::from_epsg(32633),
        )
        .unwrap();
        // 2 x 2 tiles, and one overview tile (500 x 300).
        assert_eq!(
            GeoTiffWriter::index_bytes(path, &small, 1, &o).unwrap(),
            5 * INDEX_BYTES_PER_BLOCK
        );
    }

    #[test]
    fn nodata_texts() {
        // GDAL writes and reads these forms (GDAL GTiff driver documentation).
        assert_eq!(nodata_text(-9999.0), "-9999");
        assert_eq!(nodata_text(f64::NAN), "nan");
        assert_eq!(nodata_text(f64::NEG_INFINITY), "-inf");
        assert_eq!(nodata_text(0.1), "0.1");
        let t = nodata_text(f32::MIN as f64);
        assert_eq!(t.parse::<f64>().unwrap(), f32::MIN as f64);
    }
}

//! The streaming GeoTIFF writer.
//!
//! Blocks are appended to the file as they arrive, from any number of threads: each
//! caller converts, predicts and compresses its block itself, then takes a lock only to
//! reserve the block's byte range, and writes it with a positioned write. `finish` writes
//! the image file directory (TIFF 6.0 §2) after the data and points the header at it.
//! Files are little-endian; BigTIFF is chosen when the file could pass 4 GiB.
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
use super::tags::{self, OutValue};
use super::{
    geokeys, metadata, BigTiff, Compression, Interleave, Layout, TiffSample, WriteOptions,
};

/// Bytes reserved for the directory and tags when estimating whether BigTIFF is needed.
const DIRECTORY_MARGIN: u64 = 64 << 20;

/// Peak bytes the writer holds per block (tile or strip of one band plane) for its index:
/// offset, byte count and written flag while writing (8 + 8 + 1), then a copy of offsets
/// and counts as tag values (16) and their bytes in the directory (16) in `finish`.
pub const INDEX_BYTES_PER_BLOCK: u64 = 49;

struct PendingBlock {
    data: Vec<u8>,
    bands_done: Vec<bool>,
}

struct State {
    end: u64,
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
        let worst = raw.max(padded) + padded / 64 + DIRECTORY_MARGIN;
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
        })
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
    file: File,
    grid: Grid,
    plan: Plan,
    space: RasterSpace,
    descriptions: Vec<Option<String>>,
    state: Mutex<State>,
}

impl GeoTiffWriter {
    /// Peak bytes of the tile index of a file [`create`](GeoTiffWriter::create) would
    /// make with these arguments ([`INDEX_BYTES_PER_BLOCK`] per block): memory that grows
    /// with the raster, for callers that keep a budget. Fails as `create` does on
    /// impossible options.
    pub fn index_bytes(
        path: &Path,
        grid: &Grid,
        bands: usize,
        options: &WriteOptions,
    ) -> Result<u64> {
        let plan = Plan::new(path, grid, bands, options)?;
        Ok((plan.block_count() as u64).saturating_mul(INDEX_BYTES_PER_BLOCK))
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
        let file = OpenOptions::new()
            .read(true)
            .write(true)
            .create(true)
            .truncate(true)
            .open(path)
            .map_err(|e| Error::io(path, e))?;
        let header: Vec<u8> = if plan.big {
            let mut h = b"II+\0\x08\0\0\0".to_vec();
            h.extend_from_slice(&0u64.to_le_bytes());
            h
        } else {
            b"II*\0\0\0\0\0".to_vec()
        };
        tags::write_all_at(&file, &header, 0).map_err(|e| Error::io(path, e))?;
        Ok(GeoTiffWriter {
            path: path.to_path_buf(),
            file,
            grid: grid.clone(),
            space: options.raster_space,
            descriptions: vec![None; bands],
            state: Mutex::new(State {
                end: header.len() as u64,
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
        for ((r, c), v) in data.indexed_iter() {
            let i = (r * p.block_w + c) * ss;
            T::from_f32(*v, fill).put_le(&mut buf[i..i + ss]);
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
            packed: self.pack(block_row, raw)?,
        })
    }

    /// Append a block made by [`encode_block`](Self::encode_block). Thread-safe.
    pub fn write_encoded(&self, block: EncodedBlock) -> Result<()> {
        self.append(block.index, block.packed)
    }

    /// Predict and compress the little-endian samples `raw` of a block of block row `br`.
    fn pack(&self, br: usize, mut raw: Vec<u8>) -> Result<Vec<u8>> {
        let shape = self.plan.shape(br);
        codec::encode_samples(&mut raw, shape, self.plan.predictor);
        let row_bytes = shape.row_samples * shape.sample_size;
        codec::compress(self.plan.codec, raw, row_bytes).map_err(|p| Error::file(&self.path, p))
    }

    /// Predict, compress and append block `index` (block row `br`) whose little-endian
    /// samples are `raw`, padded to the full block.
    pub(super) fn store(&self, index: usize, br: usize, raw: Vec<u8>) -> Result<()> {
        let packed = self.pack(br, raw)?;
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
            offset
        };
        tags::write_all_at(&self.file, &packed, offset).map_err(|e| {
            if let Ok(mut st) = self.state.lock() {
                st.failure = Some(e.to_string());
            }
            Error::io(&self.path, e)
        })
    }

    /// Write the directory and close the file. Fails when a block was never written.
    pub fn finish(self) -> Result<()> {
        let st = self
            .state
            .into_inner()
            .map_err(|_| Error::file(&self.path, "a block write failed in another thread"))?;
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
        let mut entries: Vec<(u16, OutValue)> = vec![
            (tags::IMAGE_WIDTH, OutValue::Long(vec![p.width as u32])),
            (tags::IMAGE_LENGTH, OutValue::Long(vec![p.height as u32])),
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
        let offsets = if p.big {
            OutValue::Long8(st.offsets.clone())
        } else {
            OutValue::Long(st.offsets.iter().map(|o| *o as u32).collect())
        };
        let counts = if p.big {
            OutValue::Long8(st.counts.clone())
        } else {
            OutValue::Long(st.counts.iter().map(|c| *c as u32).collect())
        };
        if p.tiled {
            entries.push((tags::TILE_WIDTH, OutValue::Long(vec![p.block_w as u32])));
            entries.push((tags::TILE_LENGTH, OutValue::Long(vec![p.block_h as u32])));
            entries.push((tags::TILE_OFFSETS, offsets));
            entries.push((tags::TILE_BYTE_COUNTS, counts));
        } else {
            entries.push((tags::ROWS_PER_STRIP, OutValue::Long(vec![p.block_h as u32])));
            entries.push((tags::STRIP_OFFSETS, offsets));
            entries.push((tags::STRIP_BYTE_COUNTS, counts));
        }
        entries.extend(georeferencing_tags(&self.grid, self.space));
        if let Some(xml) = metadata::build(&self.descriptions) {
            entries.push((tags::GDAL_METADATA, OutValue::Ascii(xml)));
        }
        if let Some(nd) = self.grid.nodata {
            entries.push((tags::GDAL_NODATA, OutValue::Ascii(nodata_text(nd))));
        }
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
            for r in 0..h {
                let row = src.row(y0 + r);
                let first = (r * p.block_w * spp + k) * ss;
                let dst = &mut buf[first..];
                for (c, v) in row.iter().skip(x0).take(w).enumerate() {
                    let i = c * spp * ss;
                    v.put_le(&mut dst[i..i + ss]);
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
        // (2²² / 512)² = 8192² tiles per band, 49 bytes each: 3.3 GB for one band.
        let one = GeoTiffWriter::index_bytes(path, &g, 1, &o).unwrap();
        assert_eq!(one, 8192 * 8192 * INDEX_BYTES_PER_BLOCK);
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
        // 2 x 2 tiles.
        assert_eq!(
            GeoTiffWriter::index_bytes(path, &small, 1, &o).unwrap(),
            4 * INDEX_BYTES_PER_BLOCK
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

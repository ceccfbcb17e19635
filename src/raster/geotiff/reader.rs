//! The windowed GeoTIFF reader.
//!
//! Opening reads the header and the first image file directory only (later directories
//! hold overviews or masks). A window read decodes just the strips or tiles it touches;
//! decompressed blocks are kept in a small least-recently-used cache shared by all
//! threads, uncompressed ones pass through a buffer of the reading thread's (the page
//! cache already holds them), so memory depends on the cache size, the threads and the
//! window, never on the file. Blocks are read with positioned reads (no shared file
//! cursor, no lock) and decompressed outside the cache lock, so many threads can read one
//! file at once.

use std::collections::HashMap;
use std::fs::File;
use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex};

use ndarray::{s, Array2, ArrayViewMut2, Axis};
use rayon::prelude::*;

use crate::error::{Error, Result};
use crate::grid::{Crs, CrsKind, Grid, RasterSpace, Window, MAX_DIMENSION};
use crate::raster::orientation::Orientation;
use crate::raster::{check_band, BandInfo, RasterSource, SampleType};

use super::codec::{self, ChunkShape, Codec};
use super::geokeys::GeoKeys;
use super::model_transform;
use super::tags::{self, ByteOrder, Ifd};
use super::{
    metadata, Compression, Interleave, Layout, MetadataItem, TiffSample, CACHE_BYTES,
    MAX_BLOCK_BYTES,
};

/// Uncompressed single-strip planes larger than this are read in strips of about this
/// many bytes.
const VIRTUAL_STRIP_BYTES: usize = 8 << 20;

/// Largest buffer for uncompressed blocks a thread keeps between reads (larger blocks get
/// a buffer for the one read): a virtual strip of a single-strip file.
const SCRATCH_KEEP_BYTES: usize = VIRTUAL_STRIP_BYTES;

thread_local! {
    /// Each thread's buffer for uncompressed blocks (see [`GeoTiffReader::with_block`]).
    static UNCOMPRESSED: std::cell::RefCell<Vec<u8>> = const { std::cell::RefCell::new(Vec::new()) };
}

/// Hint for corrupt or truncated files.
const FIX_CORRUPT: &str =
    "the file is damaged or was not completely written: copy or export it again";

/// Decoded blocks, least recently used evicted first.
struct BlockCache {
    blocks: HashMap<usize, (Arc<Vec<u8>>, u64)>,
    bytes: usize,
    tick: u64,
    /// Most decoded bytes kept ([`CACHE_BYTES`] unless the caller's budget sets less).
    limit: usize,
}

impl BlockCache {
    fn get(&mut self, index: usize) -> Option<Arc<Vec<u8>>> {
        self.tick += 1;
        let tick = self.tick;
        self.blocks.get_mut(&index).map(|(b, t)| {
            *t = tick;
            b.clone()
        })
    }

    fn put(&mut self, index: usize, block: Arc<Vec<u8>>) {
        self.tick += 1;
        let len = block.len();
        if len > self.limit {
            return;
        }
        self.shrink_to(self.limit - len);
        if let Some((old, _)) = self.blocks.insert(index, (block, self.tick)) {
            self.bytes -= old.len();
        }
        self.bytes += len;
    }

    /// Evict least recently used blocks until at most `bytes` are kept.
    fn shrink_to(&mut self, bytes: usize) {
        while self.bytes > bytes {
            let Some((&oldest, _)) = self.blocks.iter().min_by_key(|(_, (_, t))| *t) else {
                break;
            };
            if let Some((b, _)) = self.blocks.remove(&oldest) {
                self.bytes -= b.len();
            }
        }
    }
}

/// Windowed GeoTIFF reader: strips or tiles, chunky or planar, every sample type of
/// [`SampleType`], no compression, LZW, Deflate, PackBits or ZSTD with predictor 1, 2 or
/// 3, classic TIFF or BigTIFF in either byte order.
///
/// Georeferencing comes from ModelPixelScale + ModelTiepoint or ModelTransformation and
/// the GeoKeys (OGC GeoTIFF 1.1); a pixel-is-point file's transform is shifted by half a
/// cell so that [`Grid::transform`] is in the pixel-is-area convention, as GDAL does. A
/// TIFF without georeferencing tags opens with [`Crs::none`] and the transform
/// `[0, 1, 0, 0, 0, 1]` (x = column, y = row, GDAL's default), and
/// [`GeoTiffReader::is_georeferenced`] returns false. Nodata comes from GDAL's
/// GDAL_NODATA tag (42113) and band descriptions from GDAL_METADATA (42112).
pub struct GeoTiffReader {
    path: PathBuf,
    file: File,
    file_len: u64,
    /// The north-up grid (see [`crate::raster::orientation`]).
    grid: Grid,
    /// How the file stores its rows and columns.
    orientation: Orientation,
    space: RasterSpace,
    georeferenced: bool,
    bands: Vec<BandInfo>,
    sample_type: SampleType,
    spp: usize,
    planar: bool,
    tiled: bool,
    block_w: usize,
    block_h: usize,
    /// Rows per strip as the file states it (`block_h` may be smaller, see open).
    file_block_h: usize,
    across: usize,
    down: usize,
    offsets: Vec<u64>,
    counts: Vec<u64>,
    codec: Codec,
    predictor: u16,
    order: ByteOrder,
    big: bool,
    metadata: Vec<MetadataItem>,
    cache: Mutex<BlockCache>,
}

fn sample_type_of(bits: u64, format: u64) -> Option<SampleType> {
    match (format, bits) {
        (1, 8) => Some(SampleType::U8),
        (1, 16) => Some(SampleType::U16),
        (2, 16) => Some(SampleType::I16),
        (1, 32) => Some(SampleType::U32),
        (2, 32) => Some(SampleType::I32),
        (3, 32) => Some(SampleType::F32),
        (3, 64) => Some(SampleType::F64),
        _ => None,
    }
}

fn format_name(format: u64) -> &'static str {
    match format {
        1 => "unsigned integer",
        2 => "signed integer",
        3 => "floating point",
        _ => "undefined",
    }
}

/// Parse GDAL's nodata text ("-9999", "nan", "-3.4028234663852886e+38").
pub(crate) fn parse_nodata(text: &str) -> Option<f64> {
    let t = text.trim().trim_end_matches('\0').trim();
    if t.is_empty() {
        return None;
    }
    t.parse::<f64>()
        .ok()
        .or_else(|| match t.to_ascii_lowercase().as_str() {
            "nan" | "-nan" | "+nan" => Some(f64::NAN),
            "inf" | "+inf" | "infinity" => Some(f64::INFINITY),
            "-inf" | "-infinity" => Some(f64::NEG_INFINITY),
            _ => None,
        })
}

impl GeoTiffReader {
    /// Open `path` and read its directory and georeferencing. Fails with a message naming
    /// the file and a fix for: a missing file, a non-TIFF, a truncated or corrupt
    /// directory, sample types or compressions terrastack does not read, absurd sizes,
    /// rotated or GCP-based georeferencing, tags that do not define the cells' position
    /// and size ([`model_transform::from_tags`]) and CRS units that are not a length
    /// ([`GeoKeys::unit_problem`]). A file stored south-up or east-to-west opens with the
    /// north-up grid and is read through an index flip ([`Orientation`]).
    pub fn open(path: &Path) -> Result<GeoTiffReader> {
        let file = File::open(path).map_err(|e| Error::io(path, e))?;
        let file_len = file.metadata().map_err(|e| Error::io(path, e))?.len();
        let mut head = vec![0u8; file_len.min(16) as usize];
        tags::read_exact_at(&file, &mut head, 0).map_err(|e| Error::io(path, e))?;
        let bad = |p: String| Error::file(path, p).with_fix(FIX_CORRUPT);
        let header = tags::parse_header(&head).map_err(|p| {
            Error::file(path, p).with_fix(
                "give a GeoTIFF file (.tif); convert other formats with GDAL, or build terrastack with `--features gdal`",
            )
        })?;
        let ifd = tags::read_first_ifd(&file, file_len, &header).map_err(bad)?;
        Self::from_ifd(path, file, file_len, header, ifd)
    }

    fn from_ifd(
        path: &Path,
        file: File,
        file_len: u64,
        header: tags::Header,
        ifd: Ifd,
    ) -> Result<GeoTiffReader> {
        let bad = |p: String| Error::file(path, p).with_fix(FIX_CORRUPT);
        let unsupported = |p: String| {
            Error::file(path, p).with_fix(
                "convert it with GDAL to a supported layout, e.g. `gdal_translate -ot Float32 -co COMPRESS=DEFLATE IN OUT.tif`",
            )
        };
        let need = |tag: u16, what: &str| -> Result<u64> {
            ifd.uint(tag)
                .map_err(bad)?
                .ok_or_else(|| bad(format!("the TIFF directory has no {what} (tag {tag})")))
        };
        let width = need(tags::IMAGE_WIDTH, "image width")?;
        let height = need(tags::IMAGE_LENGTH, "image height")?;
        if width == 0
            || height == 0
            || width > MAX_DIMENSION as u64
            || height > MAX_DIMENSION as u64
        {
            return Err(bad(format!(
                "the image size {width} x {height} is outside 1..={MAX_DIMENSION} cells per side"
            )));
        }
        let (width, height) = (width as usize, height as usize);
        let spp = ifd.uint(tags::SAMPLES_PER_PIXEL).map_err(bad)?.unwrap_or(1);
        if spp == 0 || spp > 65_535 {
            return Err(bad(format!("the file declares {spp} samples per pixel")));
        }
        let spp = spp as usize;
        let bits = ifd
            .uints(tags::BITS_PER_SAMPLE)
            .map_err(bad)?
            .filter(|v| !v.is_empty())
            .unwrap_or(vec![1]);
        let formats = ifd
            .uints(tags::SAMPLE_FORMAT)
            .map_err(bad)?
            .filter(|v| !v.is_empty())
            .unwrap_or(vec![1]);
        if bits.iter().any(|b| *b != bits[0]) || formats.iter().any(|f| *f != formats[0]) {
            return Err(unsupported(
                "its bands have different sample types; terrastack reads files whose bands share one type".into(),
            ));
        }
        let sample_type = sample_type_of(bits[0], formats[0]).ok_or_else(|| {
            unsupported(format!(
                "its samples are {}-bit {}, which terrastack does not read (it reads uint8, uint16, int16, uint32, int32, float32 and float64)",
                bits[0],
                format_name(formats[0])
            ))
        })?;
        let compression_code = ifd.uint(tags::COMPRESSION).map_err(bad)?.unwrap_or(1);
        let codec = Codec::from_tag(compression_code).ok_or_else(|| {
            unsupported(format!(
                "its compression ({}) is not one terrastack reads (none, LZW, Deflate, PackBits, ZSTD)",
                codec::compression_name(compression_code)
            ))
        })?;
        // libtiff (and so GDAL) applies a predictor only with LZW, Deflate and ZSTD among
        // the codecs read here; a Predictor tag beside no compression or PackBits is ignored.
        let predictor = match codec {
            Codec::None | Codec::PackBits => 1,
            _ => ifd.uint(tags::PREDICTOR).map_err(bad)?.unwrap_or(1),
        };
        let is_float = matches!(sample_type, SampleType::F32 | SampleType::F64);
        match (predictor, is_float) {
            (1, _) | (2, false) | (3, true) => {}
            _ => {
                return Err(unsupported(format!(
                    "predictor {predictor} cannot apply to {} samples",
                    sample_type.name()
                )))
            }
        }
        let planar = match ifd
            .uint(tags::PLANAR_CONFIGURATION)
            .map_err(bad)?
            .unwrap_or(1)
        {
            1 => false,
            2 => true,
            p => return Err(bad(format!("unknown PlanarConfiguration {p}"))),
        };
        let planar = planar && spp > 1;

        let tiled = ifd.get(tags::TILE_WIDTH).is_some();
        let (block_w, block_h, offsets, counts) = if tiled {
            let tw = need(tags::TILE_WIDTH, "tile width")?;
            let th = need(tags::TILE_LENGTH, "tile height")?;
            if tw == 0 || th == 0 || tw > MAX_DIMENSION as u64 || th > MAX_DIMENSION as u64 {
                return Err(bad(format!("the tile size {tw} x {th} is not usable")));
            }
            (
                tw as usize,
                th as usize,
                ifd.uints(tags::TILE_OFFSETS).map_err(bad)?,
                ifd.uints(tags::TILE_BYTE_COUNTS).map_err(bad)?,
            )
        } else {
            let rps = ifd
                .uint(tags::ROWS_PER_STRIP)
                .map_err(bad)?
                .unwrap_or(height as u64)
                .clamp(1, height as u64);
            (
                width,
                rps as usize,
                ifd.uints(tags::STRIP_OFFSETS).map_err(bad)?,
                ifd.uints(tags::STRIP_BYTE_COUNTS).map_err(bad)?,
            )
        };
        let block_samples = if planar { 1 } else { spp };
        let what = if tiled { "tile" } else { "strip" };
        let offsets =
            offsets.ok_or_else(|| bad(format!("the TIFF directory has no {what} offsets")))?;
        let row_bytes = block_w as u128 * block_samples as u128 * sample_type.size() as u128;
        let counts = match counts {
            Some(c) => c,
            // Uncompressed files may omit byte counts: every block is full size.
            None if codec == Codec::None => {
                vec![(row_bytes * block_h as u128).min(u64::MAX as u128) as u64; offsets.len()]
            }
            None => return Err(bad(format!("the TIFF directory has no {what} byte counts"))),
        };
        let planes = if planar { spp } else { 1 };
        let n_blocks = width.div_ceil(block_w) * height.div_ceil(block_h) * planes;
        if offsets.len() < n_blocks || counts.len() < n_blocks {
            return Err(bad(format!(
                "the file lists {} {what} offsets and {} byte counts where {n_blocks} are needed",
                offsets.len(),
                counts.len()
            )));
        }
        let file_block_h = block_h;
        let (mut block_h, mut offsets, mut counts) = (block_h, offsets, counts);
        let plane_bytes = row_bytes * height as u128;
        if !tiled
            && codec == Codec::None
            && block_h >= height
            && plane_bytes > VIRTUAL_STRIP_BYTES as u128
            && counts[..planes].iter().all(|c| *c as u128 >= plane_bytes)
        {
            // One uncompressed strip per band plane: read it as strips of `k` rows, so a
            // window reads only the rows it needs (GDAL does the same, "strip chopping").
            let rb = row_bytes as u64;
            let k = (VIRTUAL_STRIP_BYTES as u64 / rb).max(1) as usize;
            let down = height.div_ceil(k);
            let (mut o, mut c) = (Vec::new(), Vec::new());
            for start in &offsets[..planes] {
                for j in 0..down {
                    // Offsets past the end are refused when the strip is read.
                    o.push(start.saturating_add((j * k) as u64 * rb));
                    c.push(k.min(height - j * k) as u64 * rb);
                }
            }
            (block_h, offsets, counts) = (k, o, c);
        }
        let block_bytes = row_bytes * block_h as u128;
        if block_bytes > MAX_BLOCK_BYTES as u128 {
            return Err(unsupported(format!(
                "one of its {what}s holds {block_bytes} bytes once decoded, more than terrastack's limit of {MAX_BLOCK_BYTES}"
            ))
            .with_fix("rewrite it tiled, e.g. `gdal_translate -co TILED=YES IN OUT.tif`"));
        }
        let across = width.div_ceil(block_w);
        let down = height.div_ceil(block_h);

        // Georeferencing.
        let geokeys = match ifd.uints(tags::GEO_KEY_DIRECTORY).map_err(bad)? {
            Some(dir) => {
                let doubles = ifd
                    .doubles(tags::GEO_DOUBLE_PARAMS)
                    .map_err(bad)?
                    .unwrap_or_default();
                let ascii = ifd
                    .get(tags::GEO_ASCII_PARAMS)
                    .map(|e| String::from_utf8_lossy(&e.data).into_owned())
                    .unwrap_or_default();
                Some(GeoKeys::parse(&dir, &doubles, &ascii).map_err(bad)?)
            }
            None => None,
        };
        let space = geokeys
            .as_ref()
            .map(|k| k.raster_space())
            .unwrap_or_default();
        let crs = geokeys.as_ref().map(|k| k.crs()).unwrap_or_else(Crs::none);
        let scale = ifd.doubles(tags::MODEL_PIXEL_SCALE).map_err(bad)?;
        let tiepoints = ifd.doubles(tags::MODEL_TIEPOINT).map_err(bad)?;
        let matrix = ifd.doubles(tags::MODEL_TRANSFORMATION).map_err(bad)?;
        let has_crs = crs.kind != CrsKind::Unknown || crs.epsg.is_some();
        let mut transform = model_transform::from_tags(
            matrix.as_deref(),
            tiepoints.as_deref(),
            scale.as_deref(),
            has_crs,
        )
        .map_err(|p| Error::file(path, p.problem).with_fix(p.fix))?;
        if let Some(problem) = geokeys.as_ref().and_then(|k| k.unit_problem()) {
            return Err(Error::file(path, problem).with_fix(
                "correct the CRS's unit (ProjLinearUnitSizeGeoKey) or assign the CRS by its EPSG code, e.g. `gdal_edit -a_srs EPSG:XXXX FILE`",
            ));
        }
        let georeferenced = transform.is_some();
        if let (Some(t), RasterSpace::Point) = (transform.as_mut(), space) {
            // Pixel-is-point: the tiepoint is a cell centre (OGC GeoTIFF 1.1 §B.2);
            // shift to the corner as GDAL does.
            t[0] -= t[1] * 0.5 + t[2] * 0.5;
            t[3] -= t[4] * 0.5 + t[5] * 0.5;
        }
        let transform = transform.unwrap_or([0.0, 1.0, 0.0, 0.0, 0.0, 1.0]);
        let nodata = match ifd.ascii(tags::GDAL_NODATA) {
            Some(text) => match parse_nodata(&text) {
                Some(v) => Some(v),
                None if text.trim().trim_end_matches('\0').trim().is_empty() => None,
                None => {
                    return Err(Error::file(
                        path,
                        format!(
                            "its nodata tag (GDAL_NODATA) reads {:?}, which is not a number, so \
                             the cells without data cannot be told apart",
                            text.trim_end_matches('\0')
                        ),
                    )
                    .with_fix("rewrite the file with its real nodata value (GDAL: gdal_edit.py -a_nodata VALUE FILE), or remove the tag (-unsetnodata) if no cell is empty"))
                }
            },
            None => None,
        };
        let stored = Grid::new(width, height, transform, crs).map_err(|e| e.in_file(path))?;
        // A plain TIFF keeps GDAL's default transform (rows downward, y = row): it has no
        // north to turn to.
        let orientation = if georeferenced {
            Orientation::of(&stored.transform)
        } else {
            Orientation::default()
        };
        let grid = orientation.normalise(stored).with_nodata(nodata);

        let metadata = ifd
            .ascii(tags::GDAL_METADATA)
            .map(|xml| metadata::parse(&xml))
            .unwrap_or_default();
        let bands = (0..spp)
            .map(|i| BandInfo {
                description: metadata
                    .iter()
                    .find(|m| m.band == Some(i + 1) && m.role.as_deref() == Some("description"))
                    .map(|m| m.value.clone()),
                sample_type,
                nodata,
            })
            .collect();

        Ok(GeoTiffReader {
            path: path.to_path_buf(),
            file,
            file_len,
            grid,
            orientation,
            space,
            georeferenced,
            bands,
            sample_type,
            spp,
            planar,
            tiled,
            block_w,
            block_h,
            file_block_h,
            across,
            down,
            offsets,
            counts,
            codec,
            predictor: predictor as u16,
            order: header.order,
            big: header.big,
            metadata,
            cache: Mutex::new(BlockCache {
                blocks: HashMap::new(),
                bytes: 0,
                tick: 0,
                limit: CACHE_BYTES,
            }),
        })
    }

    /// True when the file carries a transform (ModelPixelScale + ModelTiepoint or
    /// ModelTransformation); false for a plain TIFF, whose grid is then `[0, 1, 0, 0, 0, 1]`.
    pub fn is_georeferenced(&self) -> bool {
        self.georeferenced
    }

    /// How the file stores its rows and columns; [`RasterSource::grid`] is always the
    /// north-up, west-to-east grid and reads are flipped to it.
    pub fn orientation(&self) -> Orientation {
        self.orientation
    }

    /// The stored sample type (all bands share it).
    pub fn sample_type(&self) -> SampleType {
        self.sample_type
    }

    /// Tiles or strips, with their size.
    pub fn layout(&self) -> Layout {
        if self.tiled {
            Layout::Tiled { size: self.block_w }
        } else {
            Layout::Strips {
                rows_per_strip: self.file_block_h,
            }
        }
    }

    /// Block size in cells (width, height): the tile, or (image width, rows per strip).
    pub fn block_size(&self) -> (usize, usize) {
        (self.block_w, self.file_block_h)
    }

    /// Band-sequential (planar) or pixel-interleaved storage.
    pub fn interleave(&self) -> Interleave {
        if self.planar || self.spp == 1 {
            Interleave::Band
        } else {
            Interleave::Pixel
        }
    }

    /// Compression of the stored blocks.
    pub fn compression(&self) -> Compression {
        match self.codec {
            Codec::None => Compression::None,
            Codec::Lzw => Compression::Lzw,
            Codec::Deflate => Compression::Deflate,
            Codec::PackBits => Compression::PackBits,
            Codec::Zstd => Compression::Zstd,
        }
    }

    /// TIFF predictor (1 none, 2 horizontal, 3 floating point).
    pub fn predictor(&self) -> u16 {
        self.predictor
    }

    /// True for BigTIFF, false for classic TIFF.
    pub fn is_bigtiff(&self) -> bool {
        self.big
    }

    /// True when the file is big-endian ("MM").
    pub fn is_big_endian(&self) -> bool {
        self.order == ByteOrder::Big
    }

    /// GDAL metadata items of the file (tag 42112), dataset- and band-level.
    pub fn metadata(&self) -> &[MetadataItem] {
        &self.metadata
    }

    /// Blocks (tiles or strips, every band plane) whose bytes reach past the end of the
    /// file, as a truncated copy leaves them: their count, the total number of blocks, and
    /// the first one's index and end offset. Sparse blocks (offset and count 0) are not
    /// counted. Reads nothing: it compares the directory with the file's length.
    pub fn blocks_past_end(&self) -> (usize, usize, Option<(usize, u64)>) {
        let mut bad = 0;
        let mut first = None;
        for (i, (&o, &c)) in self.offsets.iter().zip(self.counts.iter()).enumerate() {
            if o == 0 && c == 0 {
                continue;
            }
            let end = o.checked_add(c);
            if end.is_none_or(|e| e > self.file_len) {
                bad += 1;
                first.get_or_insert((i, end.unwrap_or(u64::MAX)));
            }
        }
        (bad, self.offsets.len(), first)
    }

    /// Length of the file in bytes when it was opened.
    pub fn file_len(&self) -> u64 {
        self.file_len
    }

    /// Number of rows in block row `block_row` (strips at the bottom may be shorter).
    fn block_rows(&self, block_row: usize) -> usize {
        if self.tiled {
            self.block_h
        } else {
            self.block_h
                .min(self.grid.height - block_row * self.block_h)
        }
    }

    /// Call `f` with the decoded samples (machine byte order) of block `index`.
    ///
    /// Uncompressed blocks are read into a buffer of the calling thread's, reused from
    /// block to block, and are not cached: the operating system's page cache already
    /// holds their bytes, and a copy in [`BlockCache`] would cost a zero-filled
    /// allocation per block on top of the read. Compressed blocks are decoded once and
    /// kept in the cache, since decoding is what costs.
    fn with_block<R>(&self, index: usize, f: impl FnOnce(&[u8]) -> R) -> Result<R> {
        let uncompressed = self.codec == Codec::None;
        if !uncompressed {
            if let Some(b) = self.cache.lock().map_err(|_| self.poisoned())?.get(index) {
                return Ok(f(&b));
            }
        }
        let per_plane = self.across * self.down;
        let block_row = (index % per_plane) / self.across;
        let shape = ChunkShape {
            rows: self.block_rows(block_row),
            row_samples: self.block_w * if self.planar { 1 } else { self.spp },
            stride: if self.planar { 1 } else { self.spp },
            sample_size: self.sample_type.size(),
        };
        let expected = shape.bytes();
        let (offset, count) = (self.offsets[index], self.counts[index]);
        let what = if self.tiled { "tile" } else { "strip" };
        if offset == 0 && count == 0 {
            // A sparse block (GDAL's SPARSE_OK): reads as nodata, or 0 without nodata.
            let fill = self.grid.nodata.unwrap_or(0.0);
            let data =
                super::fill_bytes_native(self.sample_type, fill, expected / shape.sample_size);
            return Ok(f(&data));
        }
        if offset
            .checked_add(count)
            .filter(|e| *e <= self.file_len)
            .is_none()
        {
            return Err(Error::file(
                &self.path,
                format!(
                    "{what} {index} lies past the end of the file (bytes {offset}..{}, file is {} bytes): the file is truncated",
                    offset.saturating_add(count),
                    self.file_len
                ),
            )
            .with_fix(FIX_CORRUPT));
        }
        let corrupt = |p: String| -> Error {
            Error::file(&self.path, format!("{what} {index}: {p}")).with_fix(FIX_CORRUPT)
        };
        if uncompressed {
            let read_len = count.min(expected as u64) as usize;
            if read_len < expected {
                return Err(corrupt(codec::short_block(read_len, expected)));
            }
            return UNCOMPRESSED.with(|scratch| {
                let mut scratch = scratch.borrow_mut();
                if scratch.len() < expected {
                    scratch.resize(expected, 0);
                }
                let data = &mut scratch[..expected];
                tags::read_exact_at(&self.file, data, offset)
                    .map_err(|e| Error::io(&self.path, e))?;
                codec::decode_samples(data, shape, self.order, self.predictor);
                let result = f(data);
                if scratch.len() > SCRATCH_KEEP_BYTES {
                    *scratch = Vec::new();
                }
                Ok(result)
            });
        }
        let mut raw = vec![0u8; count as usize];
        tags::read_exact_at(&self.file, &mut raw, offset).map_err(|e| Error::io(&self.path, e))?;
        let mut data = codec::decompress(self.codec, raw, expected).map_err(corrupt)?;
        codec::decode_samples(&mut data, shape, self.order, self.predictor);
        let data = Arc::new(data);
        self.cache
            .lock()
            .map_err(|_| self.poisoned())?
            .put(index, data.clone());
        Ok(f(&data))
    }

    fn poisoned(&self) -> Error {
        Error::file(
            &self.path,
            "an earlier read of this file failed in another thread",
        )
    }

    /// Copy the part of `window` (cells of the north-up grid) inside the raster from band
    /// `band` into `out` (shaped like the window), converting each sample with `conv`.
    /// Every read goes through here: the window is mapped to the file's stored cells and
    /// the result flipped back to the north-up grid ([`Orientation`]).
    fn copy_window<T: TiffSample, O: Send>(
        &self,
        band: usize,
        window: Window,
        out: &mut Array2<O>,
        conv: impl Fn(T) -> O + Sync + Copy,
    ) -> Result<()> {
        let window = self
            .orientation
            .stored_window(window, self.grid.width, self.grid.height);
        self.copy_stored_window(band, window, out, conv)?;
        self.orientation.reorient(out);
        Ok(())
    }

    /// [`GeoTiffReader::copy_window`] in the file's stored cell order.
    fn copy_stored_window<T: TiffSample, O: Send>(
        &self,
        band: usize,
        window: Window,
        out: &mut Array2<O>,
        conv: impl Fn(T) -> O + Sync + Copy,
    ) -> Result<()> {
        let Some(inter) = window.intersect(&Window::full(&self.grid)) else {
            return Ok(());
        };
        // A constant per instantiation, so sample loops compile to fixed-width loads.
        let ss = std::mem::size_of::<T>();
        let (step, sub) = if self.planar {
            (1, 0)
        } else {
            (self.spp, band - 1)
        };
        let plane = if self.planar {
            (band - 1) * self.across * self.down
        } else {
            0
        };
        let (r0, r1) = (inter.row as usize, inter.row as usize + inter.height);
        let (c0, c1) = (inter.col as usize, inter.col as usize + inter.width);
        // The output cells of each block the window touches, as disjoint views: blocks
        // are decoded and copied in parallel, one per thread at a time.
        let mut pieces: Vec<(usize, usize, ArrayViewMut2<O>)> = Vec::new();
        let inside = out.slice_mut(s![
            (r0 as i64 - window.row) as usize..(r1 as i64 - window.row) as usize,
            (c0 as i64 - window.col) as usize..(c1 as i64 - window.col) as usize
        ]);
        let mut rest_rows = inside;
        for br in r0 / self.block_h..=(r1 - 1) / self.block_h {
            let rows = r1.min((br + 1) * self.block_h) - r0.max(br * self.block_h);
            let (mut band_rows, tail) = rest_rows.split_at(Axis(0), rows);
            rest_rows = tail;
            for bc in c0 / self.block_w..=(c1 - 1) / self.block_w {
                let cols = c1.min((bc + 1) * self.block_w) - c0.max(bc * self.block_w);
                let (piece, tail) = band_rows.split_at(Axis(1), cols);
                band_rows = tail;
                pieces.push((br, bc, piece));
            }
        }
        let copy = |(br, bc, mut piece): (usize, usize, ArrayViewMut2<O>)| -> Result<()> {
            self.with_block(plane + br * self.across + bc, |block| {
                let (by, bx) = (br * self.block_h, bc * self.block_w);
                let (first_row, first_col) = (r0.max(by), c0.max(bx));
                let stride = step * ss;
                for (i, mut out_row) in piece.rows_mut().into_iter().enumerate() {
                    let dst = out_row
                        .as_slice_mut()
                        .expect("a row of a standard-layout array is contiguous");
                    let first =
                        (((first_row + i - by) * self.block_w + first_col - bx) * step + sub) * ss;
                    let src = &block[first..first + (dst.len() - 1) * stride + ss];
                    convert_row(dst, src, step, conv);
                }
            })
        };
        if pieces.len() == 1 {
            pieces.into_iter().try_for_each(copy)
        } else {
            pieces.into_par_iter().try_for_each(copy)
        }
    }

    /// An array for `window`: NaN where it reaches past the raster; elsewhere zeros, which
    /// the allocator gives as untouched zeroed pages (every such cell is overwritten, in
    /// parallel, by the read), in huge pages when the array is large
    /// ([`crate::allocator::prefer_huge_pages`]).
    fn blank<O: Clone>(&self, window: Window, zero: O, outside: O) -> Array2<O> {
        let shape = (window.height, window.width);
        let mut out = Array2::from_elem(shape, zero);
        if let Some(cells) = out.as_slice_mut() {
            crate::allocator::prefer_huge_pages(cells);
        }
        if window.intersect(&Window::full(&self.grid)) != Some(window) {
            out.fill(outside);
        }
        out
    }

    fn read_f32<T: TiffSample>(&self, band: usize, window: Window) -> Result<Array2<f32>> {
        let mut out = self.blank(window, 0.0, f32::NAN);
        // The nodata value as the stored type sees it; a value the type cannot hold
        // matches nothing.
        // ±inf (stored, or a float64 beyond the float32 range) is no elevation or
        // reflectance either: it reads as nodata.
        let nodata = self.grid.nodata.and_then(T::nodata_match);
        let finite = |x: f32| if x.is_finite() { x } else { f32::NAN };
        match nodata {
            Some(nd) => self.copy_window::<T, f32>(band, window, &mut out, move |v| {
                if v.to_f64() == nd {
                    f32::NAN
                } else {
                    finite(v.to_f32())
                }
            })?,
            None => self.copy_window::<T, f32>(band, window, &mut out, |v| finite(v.to_f32()))?,
        }
        Ok(out)
    }

    fn read_f64<T: TiffSample>(&self, band: usize, window: Window) -> Result<Array2<f64>> {
        let mut out = self.blank(window, 0.0, f64::NAN);
        let nodata = self.grid.nodata.and_then(T::nodata_match);
        self.copy_window::<T, f64>(band, window, &mut out, move |v| {
            let x = v.to_f64();
            // ±inf reads as nodata, as in `read_f32`.
            if Some(x) == nodata || !x.is_finite() {
                f64::NAN
            } else {
                x
            }
        })?;
        Ok(out)
    }

    /// Band `band` (1-based) over `window` exactly as stored, for bit-exact round trips.
    /// `T` must be the file's sample type and the window must lie inside the raster;
    /// nodata values are returned as stored. Cells are in the north-up grid's order,
    /// like every read.
    pub fn read_window_as<T: TiffSample>(&self, band: usize, window: Window) -> Result<Array2<T>> {
        check_band(self, band)?;
        if T::TYPE != self.sample_type {
            return Err(Error::file(
                &self.path,
                format!(
                    "its samples are {}, not {}",
                    self.sample_type.name(),
                    T::TYPE.name()
                ),
            )
            .with_fix("read it as the sample type `terrastack info` reports"));
        }
        if window.col < 0
            || window.row < 0
            || window.col as usize + window.width > self.grid.width
            || window.row as usize + window.height > self.grid.height
        {
            return Err(Error::usage(format!(
                "window {window:?} reaches outside the {} x {} raster",
                self.grid.width, self.grid.height
            ))
            .in_file(&self.path));
        }
        let mut out = Array2::from_elem((window.height, window.width), T::zero());
        self.copy_window::<T, T>(band, window, &mut out, |v| v)?;
        Ok(out)
    }
}

/// Convert the samples of `src` (machine byte order, `step` samples apart) into `dst`.
/// A function of its own, with the conversion by value: what the conversion captures (the
/// nodata value) is then a register, not a load through a pointer per sample, and the
/// loop over contiguous samples vectorises.
#[inline(never)]
fn convert_row<T: TiffSample, O>(dst: &mut [O], src: &[u8], step: usize, conv: impl Fn(T) -> O) {
    let ss = std::mem::size_of::<T>();
    if step == 1 {
        for (d, sample) in dst.iter_mut().zip(src.chunks_exact(ss)) {
            *d = conv(T::from_ne(sample));
        }
    } else {
        for (d, sample) in dst.iter_mut().zip(src.chunks(step * ss)) {
            *d = conv(T::from_ne(&sample[..ss]));
        }
    }
}

impl RasterSource for GeoTiffReader {
    fn path(&self) -> &Path {
        &self.path
    }

    fn grid(&self) -> &Grid {
        &self.grid
    }

    fn raster_space(&self) -> RasterSpace {
        self.space
    }

    fn band_count(&self) -> usize {
        self.spp
    }

    /// Metadata of band `band` (1-based). Panics on a band number outside
    /// `1..=band_count()`; check it with [`check_band`] first, or call `try_band_info`.
    fn band_info(&self, band: usize) -> BandInfo {
        self.bands[band - 1].clone()
    }

    /// At most `bytes` of decoded blocks are kept (never more than [`CACHE_BYTES`]).
    fn set_cache_bytes(&self, bytes: usize) {
        if let Ok(mut cache) = self.cache.lock() {
            cache.limit = bytes.min(CACHE_BYTES);
            let limit = cache.limit;
            cache.shrink_to(limit);
        }
    }

    fn read_window(&self, band: usize, window: Window) -> Result<Array2<f32>> {
        check_band(self, band)?;
        match self.sample_type {
            SampleType::U8 => self.read_f32::<u8>(band, window),
            SampleType::U16 => self.read_f32::<u16>(band, window),
            SampleType::I16 => self.read_f32::<i16>(band, window),
            SampleType::U32 => self.read_f32::<u32>(band, window),
            SampleType::I32 => self.read_f32::<i32>(band, window),
            SampleType::F32 => self.read_f32::<f32>(band, window),
            SampleType::F64 => self.read_f32::<f64>(band, window),
        }
    }

    fn read_window_f64(&self, band: usize, window: Window) -> Result<Array2<f64>> {
        check_band(self, band)?;
        match self.sample_type {
            SampleType::U8 => self.read_f64::<u8>(band, window),
            SampleType::U16 => self.read_f64::<u16>(band, window),
            SampleType::I16 => self.read_f64::<i16>(band, window),
            SampleType::U32 => self.read_f64::<u32>(band, window),
            SampleType::I32 => self.read_f64::<i32>(band, window),
            SampleType::F32 => self.read_f64::<f32>(band, window),
            SampleType::F64 => self.read_f64::<f64>(band, window),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn band_numbers_and_cache_limit() {
        use crate::raster::geotiff::{write_geotiff, Layout, WriteOptions};
        let tmp = tempfile::tempdir().unwrap();
        let path = tmp.path().join("two.tif");
        let g = Grid::new(
            64,
            48,
            [0.0, 1.0, 0.0, 48.0, 0.0, -1.0],
            Crs::from_epsg(32633),
        )
        .unwrap();
        let a = Array2::from_shape_fn((48, 64), |(r, c)| (r * 64 + c) as f32);
        let b = a.mapv(|v| -v);
        let o = WriteOptions {
            layout: Layout::Tiled { size: 16 },
            ..WriteOptions::default()
        };
        write_geotiff(&path, &g, &[a.view(), b.view()], &["a", "b"], &o).unwrap();
        let r = GeoTiffReader::open(&path).unwrap();
        assert_eq!(
            r.try_band_info(2).unwrap().description.as_deref(),
            Some("b")
        );
        for bad in [0, 3] {
            let e = r.try_band_info(bad).unwrap_err().to_string();
            assert!(e.contains("two.tif") && e.contains("does not exist"), "{e}");
        }
        assert_eq!(r.blocks_past_end().0, 0);
        let full = Window::full(r.grid());
        let before = r.read_window(1, full).unwrap();
        // A cache smaller than one tile keeps nothing; reads are unchanged.
        r.set_cache_bytes(100);
        assert_eq!(r.cache.lock().unwrap().bytes, 0);
        assert_eq!(r.read_window(1, full).unwrap(), before);
        assert_eq!(r.cache.lock().unwrap().bytes, 0);
        // Two tiles of 16² f32 = 2 KiB: at most two stay.
        r.set_cache_bytes(2048);
        assert_eq!(r.read_window(2, full).unwrap(), b);
        assert!(r.cache.lock().unwrap().bytes <= 2048);
        r.set_cache_bytes(usize::MAX);
        assert_eq!(r.cache.lock().unwrap().limit, CACHE_BYTES);
    }

    #[test]
    fn nodata_text_forms() {
        // Forms GDAL writes into GDAL_NODATA (GDAL GTiff driver documentation).
        assert_eq!(parse_nodata("-9999"), Some(-9999.0));
        assert_eq!(parse_nodata(" 0 \0"), Some(0.0));
        assert!(parse_nodata("nan").unwrap().is_nan());
        assert!(parse_nodata("NaN").unwrap().is_nan());
        assert_eq!(parse_nodata("-inf"), Some(f64::NEG_INFINITY));
        assert_eq!(
            parse_nodata("-3.4028234663852886e+38"),
            Some(f32::MIN as f64)
        );
        assert_eq!(parse_nodata(""), None);
        assert_eq!(parse_nodata("none"), None);
    }
}

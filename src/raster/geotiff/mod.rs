//! Pure-Rust GeoTIFF reading and writing.
//!
//! The container (classic TIFF 6.0 and BigTIFF) is parsed in [`tags`], blocks are
//! (de)compressed and (un)predicted in [`codec`], georeferencing follows the OGC GeoTIFF
//! 1.1 standard in [`geokeys`], and GDAL's documented private tags (GDAL_NODATA 42113,
//! GDAL_METADATA 42112) carry nodata and band descriptions so that GDAL-based tools see
//! the same file terrastack wrote. [`GeoTiffReader`] reads windows and decodes only the
//! blocks a window touches; [`GeoTiffWriter`] streams blocks from many threads.

use std::path::Path;

use ndarray::ArrayView2;

use crate::error::{Error, Result};
use crate::grid::{Grid, RasterSpace};
use crate::raster::SampleType;

pub mod codec;
pub mod file_ranges;
pub mod geokeys;
mod metadata;
pub mod model_transform;
pub mod overview;
mod reader;
pub mod tags;
mod writer;

pub use metadata::MetadataItem;
pub use overview::OverviewResampling;
pub use reader::GeoTiffReader;
pub use writer::{EncodedBlock, GeoTiffWriter};

/// Decoded bytes the reader keeps per open file (least recently used blocks go first).
pub const CACHE_BYTES: usize = 128 << 20;

/// Largest decoded block (tile or strip) read or written, in bytes: guards allocations
/// against corrupt headers and unreadable single-strip giants.
pub const MAX_BLOCK_BYTES: usize = 1 << 30;

/// True when `path` starts with a TIFF or BigTIFF signature.
pub fn is_tiff(path: &Path) -> Result<bool> {
    use std::io::Read;
    let mut f = std::fs::File::open(path).map_err(|e| Error::io(path, e))?;
    let mut head = [0u8; 4];
    let mut n = 0;
    while n < 4 {
        match f.read(&mut head[n..]) {
            Ok(0) => break,
            Ok(k) => n += k,
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
            Err(e) => return Err(Error::io(path, e)),
        }
    }
    Ok(tags::signature(&head[..n]).is_some())
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
/// the floating-point predictor, band-sequential, BigTIFF when needed, laid out as a Cloud
/// Optimized GeoTIFF with overviews.
#[derive(Clone, Debug, PartialEq)]
pub struct WriteOptions {
    pub sample_type: SampleType,
    pub compression: Compression,
    /// TIFF predictor (1 none, 2 horizontal, 3 floating point); `None` picks 3 for floats
    /// and 2 for integers with Deflate, LZW or ZSTD, 1 otherwise. Predictors 2 and 3 are
    /// refused with no compression or PackBits (libtiff-based readers ignore them there).
    pub predictor: Option<u16>,
    pub layout: Layout,
    pub interleave: Interleave,
    pub bigtiff: BigTiff,
    pub raster_space: RasterSpace,
    /// Tiled files only: add reduced-resolution images (overviews) down to one tile and lay
    /// the file out as a Cloud Optimized GeoTIFF (OGC 21-026): every directory first, then
    /// the overviews' tiles from the smallest level up, then the full-resolution tiles
    /// ([`overview`]). The full-resolution image is the first directory, as without
    /// overviews. Ignored for strips. With `false` the directory follows the data.
    pub overviews: bool,
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
            overviews: true,
        }
    }
}

/// A sample type the whole-image writer and the typed reader accept. The conversion
/// methods are implementation details of the GeoTIFF module.
pub trait TiffSample: Copy + Send + Sync + 'static {
    const TYPE: SampleType;
    #[doc(hidden)]
    fn zero() -> Self;
    #[doc(hidden)]
    fn from_ne(bytes: &[u8]) -> Self;
    #[doc(hidden)]
    fn put_le(self, out: &mut [u8]);
    #[doc(hidden)]
    fn to_f64(self) -> f64;
    #[doc(hidden)]
    fn to_f32(self) -> f32;
    /// `v` rounded to nearest and saturated (integers), NaN as `fill`.
    #[doc(hidden)]
    fn from_f32(v: f32, fill: Self) -> Self;
    /// `v` rounded and saturated (integers) or converted (floats).
    #[doc(hidden)]
    fn from_f64_saturating(v: f64) -> Self;
    /// The value a nodata of `v` matches in this type; `None` when the type cannot hold it.
    #[doc(hidden)]
    fn nodata_match(v: f64) -> Option<f64>;
    /// `n` little-endian copies of `v`.
    #[doc(hidden)]
    fn fill_le(v: Self, n: usize) -> Vec<u8> {
        let size = Self::TYPE.size();
        let mut one = vec![0u8; size];
        v.put_le(&mut one);
        one.repeat(n)
    }
}

macro_rules! int_sample {
    ($t:ty, $st:expr) => {
        impl TiffSample for $t {
            const TYPE: SampleType = $st;
            #[inline]
            fn zero() -> Self {
                0
            }
            #[inline]
            fn from_ne(b: &[u8]) -> Self {
                <$t>::from_ne_bytes(b.try_into().expect("sample width"))
            }
            #[inline]
            fn put_le(self, out: &mut [u8]) {
                out.copy_from_slice(&self.to_le_bytes());
            }
            #[inline]
            fn to_f64(self) -> f64 {
                self as f64
            }
            #[inline]
            fn to_f32(self) -> f32 {
                self as f32
            }
            #[inline]
            fn from_f32(v: f32, fill: Self) -> Self {
                if v.is_nan() {
                    fill
                } else {
                    v.round() as $t
                }
            }
            #[inline]
            fn from_f64_saturating(v: f64) -> Self {
                v.round() as $t
            }
            fn nodata_match(v: f64) -> Option<f64> {
                (v.fract() == 0.0 && v >= <$t>::MIN as f64 && v <= <$t>::MAX as f64).then_some(v)
            }
        }
    };
}

int_sample!(u8, SampleType::U8);
int_sample!(u16, SampleType::U16);
int_sample!(i16, SampleType::I16);
int_sample!(u32, SampleType::U32);
int_sample!(i32, SampleType::I32);

impl TiffSample for f32 {
    const TYPE: SampleType = SampleType::F32;
    #[inline]
    fn zero() -> Self {
        0.0
    }
    #[inline]
    fn from_ne(b: &[u8]) -> Self {
        f32::from_ne_bytes(b.try_into().expect("sample width"))
    }
    #[inline]
    fn put_le(self, out: &mut [u8]) {
        out.copy_from_slice(&self.to_le_bytes());
    }
    #[inline]
    fn to_f64(self) -> f64 {
        self as f64
    }
    #[inline]
    fn to_f32(self) -> f32 {
        self
    }
    #[inline]
    fn from_f32(v: f32, _fill: Self) -> Self {
        v
    }
    #[inline]
    fn from_f64_saturating(v: f64) -> Self {
        v as f32
    }
    fn nodata_match(v: f64) -> Option<f64> {
        // GDAL compares float32 samples with the nodata value cast to float32.
        Some(v as f32 as f64)
    }
}

impl TiffSample for f64 {
    const TYPE: SampleType = SampleType::F64;
    #[inline]
    fn zero() -> Self {
        0.0
    }
    #[inline]
    fn from_ne(b: &[u8]) -> Self {
        f64::from_ne_bytes(b.try_into().expect("sample width"))
    }
    #[inline]
    fn put_le(self, out: &mut [u8]) {
        out.copy_from_slice(&self.to_le_bytes());
    }
    #[inline]
    fn to_f64(self) -> f64 {
        self
    }
    #[inline]
    fn to_f32(self) -> f32 {
        self as f32
    }
    #[inline]
    fn from_f32(v: f32, _fill: Self) -> Self {
        v as f64
    }
    #[inline]
    fn from_f64_saturating(v: f64) -> Self {
        v
    }
    fn nodata_match(v: f64) -> Option<f64> {
        Some(v)
    }
}

/// `n` samples of value `v` in the machine's byte order (sparse blocks).
pub(crate) fn fill_bytes_native(t: SampleType, v: f64, n: usize) -> Vec<u8> {
    fn one<T: TiffSample>(v: f64, n: usize) -> Vec<u8> {
        let le = T::fill_le(T::from_f64_saturating(v), 1);
        let mut ne = le.clone();
        if cfg!(target_endian = "big") {
            ne.reverse();
        }
        ne.repeat(n)
    }
    match t {
        SampleType::U8 => one::<u8>(v, n),
        SampleType::U16 => one::<u16>(v, n),
        SampleType::I16 => one::<i16>(v, n),
        SampleType::U32 => one::<u32>(v, n),
        SampleType::I32 => one::<i32>(v, n),
        SampleType::F32 => one::<f32>(v, n),
        SampleType::F64 => one::<f64>(v, n),
    }
}

/// Write whole in-memory bands (all the same shape as `grid`) to `path` in any layout of
/// `options` (its `sample_type` is taken from `T`). Values are written exactly as given.
/// Blocks are compressed in parallel. For small files: demo data, tests. On failure the
/// partly written file is removed.
pub fn write_geotiff<T: TiffSample>(
    path: &Path,
    grid: &Grid,
    bands: &[ArrayView2<T>],
    descriptions: &[&str],
    options: &WriteOptions,
) -> Result<()> {
    writer::write_all(path, grid, bands, descriptions, options)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::grid::{Crs, Window};
    use crate::raster::RasterSource;
    use ndarray::Array2;

    fn utm_grid(w: usize, h: usize) -> Grid {
        Grid::new(
            w,
            h,
            [500_000.0, 0.05, 0.0, 5_200_000.0, 0.0, -0.05],
            Crs::from_epsg(32633),
        )
        .unwrap()
    }

    fn layouts() -> Vec<WriteOptions> {
        let mut v = Vec::new();
        for compression in [
            Compression::None,
            Compression::Deflate,
            Compression::Lzw,
            Compression::Zstd,
            Compression::PackBits,
        ] {
            for layout in [
                Layout::Tiled { size: 16 },
                Layout::Strips { rows_per_strip: 7 },
            ] {
                for interleave in [Interleave::Band, Interleave::Pixel] {
                    v.push(WriteOptions {
                        compression,
                        layout,
                        interleave,
                        ..WriteOptions::default()
                    });
                }
            }
        }
        v
    }

    fn round_trip<T: TiffSample + PartialEq + std::fmt::Debug>(
        f: impl Fn(usize, usize, usize) -> T,
    ) {
        let dir = tempfile::tempdir().unwrap();
        let grid = utm_grid(37, 23).with_nodata(Some(7.0));
        let bands: Vec<Array2<T>> = (0..3)
            .map(|b| Array2::from_shape_fn((23, 37), |(r, c)| f(b, r, c)))
            .collect();
        let views: Vec<_> = bands.iter().map(|b| b.view()).collect();
        for (i, opts) in layouts().iter().enumerate() {
            for bigtiff in [BigTiff::Never, BigTiff::Always] {
                let path = dir.path().join(format!("{i}_{bigtiff:?}.tif"));
                let opts = WriteOptions {
                    bigtiff,
                    ..opts.clone()
                };
                write_geotiff(&path, &grid, &views, &["a", "b", "c"], &opts).unwrap();
                let r = GeoTiffReader::open(&path).unwrap();
                assert_eq!(r.grid(), &grid, "{opts:?}");
                assert_eq!(r.is_bigtiff(), bigtiff == BigTiff::Always);
                assert_eq!(r.compression(), opts.compression);
                assert_eq!(r.layout(), opts.layout);
                for b in 0..3 {
                    let back = r.read_window_as::<T>(b + 1, Window::full(&grid)).unwrap();
                    assert_eq!(back, bands[b], "{opts:?} band {}", b + 1);
                    assert_eq!(
                        r.band_info(b + 1).description.as_deref(),
                        Some(["a", "b", "c"][b])
                    );
                    assert_eq!(r.band_info(b + 1).sample_type, T::TYPE);
                }
            }
        }
    }

    #[test]
    fn every_type_and_layout_round_trips_bit_exact() {
        // Self-consistency: what is written is read back unchanged; the same files are
        // checked against GDAL by tests/xcheck_io.rs with scripts/xcheck_io.py.
        round_trip(|b, r, c| (b * 31 + r * 5 + c) as u8);
        round_trip(|b, r, c| (b * 1000 + r * 300 + c * 7) as u16);
        round_trip(|b, r, c| (b as i16 - 1) * (r as i16 * 100 - c as i16 * 13));
        round_trip(|b, r, c| (b as u32) << 30 | (r * 40_000 + c) as u32);
        round_trip(|b, r, c| -(b as i32) * 1_000_000_007 + (r * c) as i32);
        round_trip(|b, r, c| (b as f32 + 0.1) * (r as f32).sin() * 1e3 + c as f32 / 3.0);
        round_trip(|b, r, c| (b as f64 + 0.1) * (r as f64).cos() * 1e9 + c as f64 / 7.0);
    }

    #[test]
    fn window_reads_nan_outside_and_for_nodata() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("w.tif");
        let grid = utm_grid(40, 30).with_nodata(Some(-9999.0));
        let mut a = Array2::from_shape_fn((30, 40), |(r, c)| (r * 100 + c) as f32);
        a[[5, 6]] = -9999.0;
        write_geotiff(&path, &grid, &[a.view()], &[], &WriteOptions::default()).unwrap();
        let r = GeoTiffReader::open(&path).unwrap();
        let w = r.read_window(1, Window::new(-2, 3, 10, 4)).unwrap();
        assert_eq!(w.dim(), (4, 10));
        assert!(w[[0, 0]].is_nan() && w[[3, 1]].is_nan());
        assert_eq!(w[[0, 2]], 300.0);
        assert!(w[[2, 8]].is_nan()); // cell (6, 5) holds the nodata value
        assert_eq!(w[[3, 9]], 607.0);
        let outside = r.read_window(1, Window::new(100, 100, 3, 3)).unwrap();
        assert!(outside.iter().all(|v| v.is_nan()));
        assert!(r.read_window(2, Window::new(0, 0, 1, 1)).is_err());
    }

    #[test]
    fn streaming_writer_from_many_threads() {
        use rayon::prelude::*;
        let dir = tempfile::tempdir().unwrap();
        let grid = utm_grid(100, 70).with_nodata(Some(f64::NAN));
        let value = |b: usize, r: usize, c: usize| (b * 10_000 + r * 100 + c) as f32 * 0.25;
        for interleave in [Interleave::Band, Interleave::Pixel] {
            let path = dir.path().join(format!("{interleave:?}.tif"));
            let opts = WriteOptions {
                layout: Layout::Tiled { size: 32 },
                interleave,
                ..WriteOptions::default()
            };
            let mut w = GeoTiffWriter::create(&path, &grid, 2, opts).unwrap();
            w.set_band_description(1, "slope_horn");
            w.set_band_description(2, "tpi_r2m");
            let (bw, bh) = w.block_size();
            assert_eq!((bw, bh), (32, 32));
            let jobs: Vec<(usize, usize, usize)> = (1..=2)
                .flat_map(|b| (0..3).flat_map(move |br| (0..4).map(move |bc| (b, bc, br))))
                .collect();
            jobs.par_iter()
                .try_for_each(|&(b, bc, br)| {
                    let h = bh.min(70 - br * bh);
                    let wd = bw.min(100 - bc * bw);
                    let block =
                        Array2::from_shape_fn((h, wd), |(r, c)| value(b, br * bh + r, bc * bw + c));
                    w.write_block(b, bc, br, block.view())
                })
                .unwrap();
            // A block given twice is refused.
            let again = Array2::zeros((32, 32));
            assert!(w.write_block(1, 0, 0, again.view()).is_err());
            w.finish().unwrap();
            let r = GeoTiffReader::open(&path).unwrap();
            assert_eq!(r.band_info(2).description.as_deref(), Some("tpi_r2m"));
            assert!(r.grid().nodata.unwrap().is_nan());
            for b in 1..=2 {
                let a = r.read_window(b, Window::full(&grid)).unwrap();
                assert_eq!(a, Array2::from_shape_fn((70, 100), |(r, c)| value(b, r, c)));
            }
        }
    }

    #[test]
    fn unfinished_blocks_refused_at_finish() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("u.tif");
        let w = GeoTiffWriter::create(
            &path,
            &utm_grid(40, 40),
            1,
            WriteOptions {
                layout: Layout::Tiled { size: 32 },
                ..WriteOptions::default()
            },
        )
        .unwrap();
        w.write_block(1, 0, 0, Array2::zeros((32, 32)).view())
            .unwrap();
        assert!(w
            .write_block(1, 1, 0, Array2::zeros((32, 32)).view())
            .is_err()); // wrong shape
        let e = w.finish().unwrap_err().to_string();
        assert!(e.contains("3 block(s) were never written"), "{e}");
    }

    #[test]
    fn integer_conversion_rounds_saturates_and_fills_nan() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("i.tif");
        let grid = utm_grid(4, 1).with_nodata(Some(65535.0));
        let opts = WriteOptions {
            sample_type: SampleType::U16,
            layout: Layout::Strips { rows_per_strip: 1 },
            ..WriteOptions::default()
        };
        let w = GeoTiffWriter::create(&path, &grid, 1, opts).unwrap();
        let data = Array2::from_shape_vec((1, 4), vec![2.5f32, -3.0, 1e9, f32::NAN]).unwrap();
        w.write_block(1, 0, 0, data.view()).unwrap();
        w.finish().unwrap();
        let r = GeoTiffReader::open(&path).unwrap();
        let raw = r.read_window_as::<u16>(1, Window::full(&grid)).unwrap();
        // Rust's f32::round rounds half away from zero; `as` saturates.
        assert_eq!(raw.as_slice().unwrap(), &[3, 0, 65535, 65535]);
    }

    /// A little-endian classic TIFF built by hand: header, then `data`, then an IFD.
    fn handmade(entries: Vec<(u16, tags::OutValue)>, data: &[u8]) -> Vec<u8> {
        let mut bytes = b"II*\0".to_vec();
        let at = (8 + data.len() as u64 + 1) & !1;
        bytes.extend_from_slice(&(at as u32).to_le_bytes());
        bytes.extend_from_slice(data);
        bytes.resize(at as usize, 0);
        bytes.extend(tags::build_ifd(entries, at, false));
        bytes
    }

    /// Entries of a `w` x `h` single-strip uint8 image whose strip is `count` bytes at 8.
    fn plain_entries(w: u32, h: u32, count: u32) -> Vec<(u16, tags::OutValue)> {
        use tags::OutValue::{Long, Short};
        vec![
            (tags::IMAGE_WIDTH, Long(vec![w])),
            (tags::IMAGE_LENGTH, Long(vec![h])),
            (tags::BITS_PER_SAMPLE, Short(vec![8])),
            (tags::COMPRESSION, Short(vec![1])),
            (tags::STRIP_OFFSETS, Long(vec![8])),
            (tags::ROWS_PER_STRIP, Long(vec![h])),
            (tags::STRIP_BYTE_COUNTS, Long(vec![count])),
        ]
    }

    fn with(
        mut e: Vec<(u16, tags::OutValue)>,
        tag: u16,
        v: tags::OutValue,
    ) -> Vec<(u16, tags::OutValue)> {
        e.retain(|(t, _)| *t != tag);
        e.push((tag, v));
        e
    }

    fn open_bytes(bytes: &[u8]) -> (tempfile::TempDir, std::path::PathBuf, Result<GeoTiffReader>) {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("in.tif");
        std::fs::write(&path, bytes).unwrap();
        let r = GeoTiffReader::open(&path);
        (dir, path, r)
    }

    /// The error of reading the 4 x 3 window of a file that opens, and the file's path.
    fn read_error(bytes: &[u8]) -> (String, String) {
        let (_d, path, r) = open_bytes(bytes);
        let msg = r
            .unwrap()
            .read_window(1, Window::new(0, 0, 4, 3))
            .unwrap_err()
            .to_string();
        (msg, path.display().to_string())
    }

    fn err_text(r: Result<GeoTiffReader>) -> String {
        match r {
            Ok(_) => panic!("the file was accepted"),
            Err(e) => e.to_string(),
        }
    }

    #[test]
    fn plain_tiff_opens_without_georeferencing() {
        let data: Vec<u8> = (0..12).collect();
        let (_d, _p, r) = open_bytes(&handmade(plain_entries(4, 3, 12), &data));
        let r = r.unwrap();
        assert!(!r.is_georeferenced());
        assert_eq!(r.grid().crs, Crs::none());
        assert_eq!(r.grid().transform, [0.0, 1.0, 0.0, 0.0, 0.0, 1.0]);
        let a = r.read_window(1, Window::full(r.grid())).unwrap();
        assert_eq!(a[[2, 3]], 11.0);
    }

    #[test]
    fn model_transformation_and_pixel_is_point() {
        use tags::OutValue::{Double, Short};
        // ModelTransformation row-major 4x4 (OGC GeoTIFF 1.1 §7.3.2 / B.2.4): x = 100 + 2i,
        // y = 50 − 3j at cell centres (pixel-is-point), so the corner of cell (0, 0) is
        // (99, 51.5) in the area convention (closed form: half a cell up and left).
        let m = vec![
            2.0, 0.0, 0.0, 100.0, 0.0, -3.0, 0.0, 50.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 1.0,
        ];
        let (dir, _, ascii) = geokeys::build(&Crs::from_epsg(32633), RasterSpace::Point);
        let e = with(
            plain_entries(4, 3, 12),
            tags::MODEL_TRANSFORMATION,
            Double(m),
        );
        let e = with(e, tags::GEO_KEY_DIRECTORY, Short(dir));
        let e = with(e, tags::GEO_ASCII_PARAMS, tags::OutValue::Ascii(ascii));
        let (_d, _p, r) = open_bytes(&handmade(e, &[0; 12]));
        let r = r.unwrap();
        assert_eq!(r.raster_space(), RasterSpace::Point);
        assert_eq!(r.grid().transform, [99.0, 2.0, 0.0, 51.5, 0.0, -3.0]);
        assert_eq!(r.grid().crs.epsg, Some(32633));
    }

    #[test]
    fn bad_inputs_are_errors_with_fixes() {
        use tags::OutValue::{Double, Long, Short};
        // Missing path.
        let e = GeoTiffReader::open(Path::new("/nonexistent/dsm.tif"))
            .err()
            .unwrap();
        assert!(e.to_string().contains("/nonexistent/dsm.tif"), "{e}");
        // Not a TIFF.
        let t = err_text(open_bytes(b"P6 not a tiff at all").2);
        assert!(t.contains("not a TIFF") && t.contains("fix:"), "{t}");
        assert!(!is_tiff(&open_bytes(b"P6").1).unwrap());
        // Truncated: the directory lies past the end.
        let mut b = handmade(plain_entries(4, 3, 12), &[0; 12]);
        b.truncate(30);
        let t = err_text(open_bytes(&b).2);
        assert!(t.contains("truncated") && t.contains("fix:"), "{t}");
        // Strip offset past the end: opening works, reading names the strip.
        let e = with(
            plain_entries(4, 3, 12),
            tags::STRIP_OFFSETS,
            Long(vec![1_000_000]),
        );
        let (msg, path) = read_error(&handmade(e, &[0; 12]));
        assert!(msg.contains("past the end") && msg.contains(&path), "{msg}");
        // Unsupported sample type: signed 8-bit.
        let e = with(plain_entries(4, 3, 12), tags::SAMPLE_FORMAT, Short(vec![2]));
        let t = err_text(open_bytes(&handmade(e, &[0; 12])).2);
        assert!(
            t.contains("8-bit signed integer") && t.contains("fix:"),
            "{t}"
        );
        // An empty SampleFormat (found by the fuzz target) means the default, unsigned.
        let e = with(plain_entries(4, 3, 12), tags::SAMPLE_FORMAT, Short(vec![]));
        let r = open_bytes(&handmade(e, &[5; 12])).2.unwrap();
        assert_eq!(r.sample_type(), SampleType::U8);
        // Unsupported compression: JPEG.
        let e = with(plain_entries(4, 3, 12), tags::COMPRESSION, Short(vec![7]));
        let t = err_text(open_bytes(&handmade(e, &[0; 12])).2);
        assert!(t.contains("JPEG"), "{t}");
        // Absurd size refused before anything is allocated.
        let e = with(
            plain_entries(4, 3, 12),
            tags::IMAGE_WIDTH,
            Long(vec![u32::MAX]),
        );
        let t = err_text(open_bytes(&handmade(e, &[0; 12])).2);
        assert!(t.contains("outside 1..="), "{t}");
        // Corrupt Deflate data: a read error, not a panic.
        let e = with(plain_entries(4, 3, 12), tags::COMPRESSION, Short(vec![8]));
        let r = open_bytes(&handmade(e, &[0xAB; 12])).2.unwrap();
        assert!(r.read_window(1, Window::new(0, 0, 4, 3)).is_err());
        // Ground-control-point georeferencing is refused with a fix.
        let e = with(
            plain_entries(4, 3, 12),
            tags::MODEL_TIEPOINT,
            Double(vec![
                0.0, 0.0, 0.0, 1.0, 2.0, 0.0, 3.0, 2.0, 0.0, 7.0, 8.0, 0.0,
            ]),
        );
        let t = err_text(open_bytes(&handmade(e, &[0; 12])).2);
        assert!(
            t.contains("ground control points") && t.contains("fix:"),
            "{t}"
        );
        // Rotated transform refused (Grid's rule), named to the file.
        let m = vec![
            2.0, 0.5, 0.0, 100.0, 0.0, -3.0, 0.0, 50.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 1.0,
        ];
        let e = with(
            plain_entries(4, 3, 12),
            tags::MODEL_TRANSFORMATION,
            Double(m),
        );
        let (_d, path, r) = open_bytes(&handmade(e, &[0; 12]));
        let t = err_text(r);
        assert!(
            t.contains("rotated") && t.contains(&path.display().to_string()),
            "{t}"
        );
    }

    #[test]
    fn reader_is_send_and_sync() {
        fn check<T: Send + Sync>() {}
        check::<GeoTiffReader>();
        check::<GeoTiffWriter>();
    }

    #[test]
    fn mutated_files_never_panic() {
        // Bytes of a small valid file flipped in turn (a deterministic stand-in for the
        // fuzz target in fuzz/): opening and reading may fail but must not panic.
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("seed.tif");
        let grid = utm_grid(20, 9).with_nodata(Some(-1.0));
        let a = Array2::from_shape_fn((9, 20), |(r, c)| (r * 20 + c) as f32);
        let opts = WriteOptions {
            layout: Layout::Tiled { size: 16 },
            ..WriteOptions::default()
        };
        write_geotiff(&path, &grid, &[a.view(), a.view()], &["a", "b"], &opts).unwrap();
        let seed = std::fs::read(&path).unwrap();
        let mutated = dir.path().join("m.tif");
        // Every byte of the header and the directory (written last), every 5th of the data.
        let dir_start = u32::from_le_bytes(seed[4..8].try_into().unwrap()) as usize;
        let positions = (0..seed.len()).filter(|i| *i < 8 || *i >= dir_start || i % 5 == 0);
        for i in positions {
            for x in [0x01u8, 0xFF] {
                let mut b = seed.clone();
                b[i] ^= x;
                std::fs::write(&mutated, &b).unwrap();
                if let Ok(r) = GeoTiffReader::open(&mutated) {
                    let g = r.grid().clone();
                    if g.width * g.height <= 1 << 16 {
                        for band in 1..=r.band_count().min(4) {
                            let _ = r.read_window(band, Window::full(&g).grow(2));
                        }
                    }
                }
            }
        }
    }

    #[test]
    fn fuzz_seeds_read_as_gdal_wrote_them() {
        // The seeds in fuzz/corpus/reader/ named gdal_* were written by GDAL 3.10 (through
        // rasterio) from band 1 = 3·(row + col) on a 9 x 7 grid, band 2 its rows reversed.
        let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("fuzz/corpus/reader");
        let mut seen = 0;
        for entry in std::fs::read_dir(&dir).unwrap() {
            let path = entry.unwrap().path();
            let r = GeoTiffReader::open(&path).unwrap();
            let name = path.file_name().unwrap().to_string_lossy().to_string();
            if name.starts_with("gdal_") {
                let a = r.read_window(1, Window::full(r.grid())).unwrap();
                let b = r.read_window(2, Window::full(r.grid())).unwrap();
                for ((row, col), v) in a.indexed_iter() {
                    assert_eq!(*v, (3 * (row + col)) as f32, "{name}");
                    assert_eq!(b[[6 - row, col]], *v, "{name}");
                }
                assert_eq!(r.grid().nodata, Some(7.0));
                assert_eq!(r.band_info(1).description.as_deref(), Some("dsm"));
                seen += 1;
            }
        }
        assert_eq!(seen, 5);
    }

    #[test]
    fn single_uncompressed_strip_is_read_in_parts() {
        // 1536 x 1400 float32 in one uncompressed strip (8.6 MB): read as strips of 1365
        // rows (8 MiB / 6144 bytes per row); a window across the seam reads the same
        // values as written and the file's own layout is still reported.
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("one_strip.tif");
        let grid = utm_grid(1536, 1400);
        let a = Array2::from_shape_fn((1400, 1536), |(r, c)| (r * 1536 + c) as f32);
        let opts = WriteOptions {
            compression: Compression::None,
            layout: Layout::Strips {
                rows_per_strip: 1400,
            },
            ..WriteOptions::default()
        };
        write_geotiff(&path, &grid, &[a.view()], &[], &opts).unwrap();
        let r = GeoTiffReader::open(&path).unwrap();
        assert_eq!(
            r.layout(),
            Layout::Strips {
                rows_per_strip: 1400
            }
        );
        assert_eq!(r.block_size(), (1536, 1400));
        let w = r.read_window(1, Window::new(1530, 1360, 10, 10)).unwrap();
        for ((i, j), v) in w.indexed_iter() {
            let (row, col) = (1360 + i, 1530 + j);
            if col < 1536 {
                assert_eq!(*v, (row * 1536 + col) as f32);
            } else {
                assert!(v.is_nan());
            }
        }
        assert_eq!(r.read_window(1, Window::full(&grid)).unwrap(), a);
    }

    #[test]
    fn uncompressed_blocks_of_any_size_in_turn_and_short_ones_refused() {
        // Uncompressed blocks go through one buffer per thread: a small block after a
        // large one reads only its own bytes, and a block shorter than its image is an
        // error naming it, as for compressed blocks.
        let small: Vec<u8> = (0..12).collect();
        let large: Vec<u8> = (0..64 * 64).map(|i| (i * 7 % 251) as u8).collect();
        let files = [
            handmade(plain_entries(4, 3, 12), &small),
            handmade(plain_entries(64, 64, 64 * 64), &large),
        ];
        let opened: Vec<_> = files.iter().map(|b| open_bytes(b)).collect();
        for k in [0, 1, 0, 1, 0] {
            let r = opened[k].2.as_ref().unwrap();
            let want = if k == 0 { &small } else { &large };
            let got = r.read_window(1, Window::full(r.grid())).unwrap();
            assert!(got.iter().zip(want.iter()).all(|(g, w)| *g == *w as f32));
            assert_eq!(got.len(), want.len());
        }
        let (msg, path) = read_error(&handmade(plain_entries(4, 3, 10), &small));
        assert!(
            msg.contains("strip 0")
                && msg.contains("10 bytes where 12")
                && msg.contains("fix:")
                && msg.contains(&path),
            "{msg}"
        );
    }
}

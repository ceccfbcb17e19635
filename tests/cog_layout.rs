//! The stack's GeoTIFF layout against the Cloud Optimized GeoTIFF standard (OGC 21-026):
//! the file's structure is walked here with a parser of its own (header, IFD chain, tag
//! values; TIFF 6.0 §2 and BigTIFF), sharing no code with terrastack's reader, and the
//! overview images are decoded with the `tiff` crate (image-rs) and compared with a naive
//! 2 x 2 reduction of the full resolution written in this file. Runs under plain
//! `cargo test`.

mod util;

use std::fs::File;
use std::path::Path;

use ndarray::{s, Array2};
use terrastack::grid::Grid;
use terrastack::raster::geotiff::{
    write_geotiff, BigTiff, GeoTiffWriter, Interleave, Layout, OverviewResampling, WriteOptions,
};
use tiff::decoder::{Decoder, DecodingResult, Limits};

/// One IFD as read by [`walk`].
#[derive(Debug)]
struct Dir {
    /// Byte range of the directory (count, entries, next pointer).
    at: (u64, u64),
    /// Tag and byte range of each value stored outside the directory.
    values: Vec<(u16, u64, u64)>,
    width: u64,
    height: u64,
    subfile: u64,
    tile: (u64, u64),
    compression: u64,
    predictor: u64,
    sample_format: Vec<u64>,
    offsets: Vec<u64>,
    counts: Vec<u64>,
    tags: Vec<u16>,
}

fn le(b: &[u8]) -> u64 {
    b.iter().rev().fold(0u64, |a, x| (a << 8) | *x as u64)
}

/// Every IFD of a little-endian TIFF or BigTIFF file, in chain order.
fn walk(bytes: &[u8]) -> (bool, Vec<Dir>) {
    assert_eq!(&bytes[..2], b"II", "little-endian");
    let big = le(&bytes[2..4]) == 43;
    let (count_size, entry_size, word) = if big { (8, 20, 8) } else { (2, 12, 4) };
    let mut at = if big {
        le(&bytes[8..16])
    } else {
        le(&bytes[4..8])
    };
    let mut dirs = Vec::new();
    while at != 0 {
        let a = at as usize;
        let n = le(&bytes[a..a + count_size]) as usize;
        let mut d = Dir {
            at: (at, (a + count_size + n * entry_size + word) as u64),
            values: Vec::new(),
            width: 0,
            height: 0,
            subfile: 0,
            tile: (0, 0),
            compression: 0,
            predictor: 1,
            sample_format: vec![],
            offsets: vec![],
            counts: vec![],
            tags: vec![],
        };
        for i in 0..n {
            let e = &bytes[a + count_size + i * entry_size..][..entry_size];
            let tag = le(&e[0..2]) as u16;
            let typ = le(&e[2..4]);
            let (count, field) = if big {
                (le(&e[4..12]) as usize, &e[12..20])
            } else {
                (le(&e[4..8]) as usize, &e[8..12])
            };
            let size = match typ {
                1 | 2 | 6 | 7 => 1,
                3 | 8 => 2,
                4 | 9 | 11 | 13 => 4,
                _ => 8,
            };
            let data: &[u8] = if count * size <= word {
                &field[..count * size]
            } else {
                let off = le(field) as usize;
                d.values
                    .push((tag, off as u64, (off + count * size) as u64));
                &bytes[off..off + count * size]
            };
            let ints: Vec<u64> = data.chunks_exact(size).map(le).collect();
            d.tags.push(tag);
            match tag {
                254 => d.subfile = ints[0],
                256 => d.width = ints[0],
                257 => d.height = ints[0],
                259 => d.compression = ints[0],
                317 => d.predictor = ints[0],
                322 => d.tile.0 = ints[0],
                323 => d.tile.1 = ints[0],
                324 => d.offsets = ints,
                325 => d.counts = ints,
                339 => d.sample_format = ints,
                _ => {}
            }
        }
        at = le(&bytes[d.at.1 as usize - word..d.at.1 as usize]);
        dirs.push(d);
    }
    (big, dirs)
}

/// Check every COG ordering rule of OGC 21-026 on `path`; returns the IFDs.
fn assert_cog(path: &Path) -> Vec<Dir> {
    let bytes = std::fs::read(path).unwrap();
    let (big, dirs) = walk(&bytes);
    // The full-resolution IFD comes right after the header (recommendation "ifd-order").
    assert_eq!(dirs[0].at.0, if big { 16 } else { 8 });
    assert!(!dirs.is_empty());
    let first_tile = dirs
        .iter()
        .flat_map(|d| d.offsets.iter().copied())
        .min()
        .unwrap();
    for d in &dirs {
        // All IFDs and their tag values lie before any tile data.
        assert!(d.at.1 <= first_tile, "{d:?}");
        for v in &d.values {
            assert!(v.2 <= first_tile, "a tag value at {v:?} follows tile data");
        }
        // Tiled (requirement "tiling"), square tiles, one tiling for all levels.
        assert_eq!(d.tile, dirs[0].tile);
        assert_eq!(d.tile.0, d.tile.1);
        assert_eq!(d.compression, dirs[0].compression);
        assert_eq!(d.predictor, dirs[0].predictor);
        assert_eq!(d.sample_format, dirs[0].sample_format);
        for (o, c) in d.offsets.iter().zip(&d.counts) {
            assert!(o + c <= bytes.len() as u64);
        }
    }
    // The tile offsets and byte counts of every IFD follow all the IFDs.
    // (recommendation "ifd-order", item 8).
    let last_ifd_end = dirs.iter().map(|d| d.at.1).max().unwrap();
    for d in &dirs {
        for (tag, start, _) in &d.values {
            if *tag == 324 || *tag == 325 {
                assert!(
                    *start >= last_ifd_end,
                    "tag {tag} at {start} among the IFDs"
                );
            }
        }
    }
    // The IFDs come in chain order, largest level first.
    assert!(dirs.windows(2).all(|p| p[0].at.1 <= p[1].at.0));
    // Full resolution first and not marked reduced; every other IFD is an overview
    // (NewSubfileType bit 0), each halving the previous (rounding up) and smaller.
    assert_eq!(dirs[0].subfile & 1, 0);
    let tile = dirs[0].tile.0;
    for k in 1..dirs.len() {
        assert_eq!(dirs[k].subfile, 1, "IFD {k}");
        assert_eq!(dirs[k].width, dirs[k - 1].width.div_ceil(2));
        assert_eq!(dirs[k].height, dirs[k - 1].height.div_ceil(2));
        // GeoKeys only on the full resolution (OGC 21-026 §7, "Georeference Keys").
        assert!(!dirs[k].tags.contains(&34735));
    }
    // The last level fits one tile (TilesAcross = TilesDown = 1); the one before does not.
    let last = dirs.last().unwrap();
    assert!(last.width <= tile && last.height <= tile);
    if dirs.len() > 1 {
        let before = &dirs[dirs.len() - 2];
        assert!(before.width > tile || before.height > tile);
    } else {
        assert!(dirs[0].width <= tile && dirs[0].height <= tile);
    }
    // Tile data: the smallest overview first, the full resolution last; each level's
    // tiles fill one contiguous range.
    for k in 0..dirs.len() {
        let start = *dirs[k].offsets.iter().min().unwrap();
        if k + 1 < dirs.len() {
            let smaller_end = dirs[k + 1]
                .offsets
                .iter()
                .zip(&dirs[k + 1].counts)
                .map(|(o, c)| o + c)
                .max()
                .unwrap();
            assert!(smaller_end <= start, "level {} follows level {k}", k + 1);
        }
        let end = dirs[k]
            .offsets
            .iter()
            .zip(&dirs[k].counts)
            .map(|(o, c)| o + c)
            .max()
            .unwrap();
        assert_eq!(end - start, dirs[k].counts.iter().sum::<u64>(), "level {k}");
    }
    dirs
}

/// Image `level` (0 = full resolution) of a one- or many-band f32 file decoded with the
/// `tiff` crate: one array per band.
fn decode_level(path: &Path, level: usize) -> Vec<Array2<f32>> {
    let mut dec = Decoder::new(File::open(path).unwrap())
        .unwrap()
        .with_limits(Limits::unlimited());
    for _ in 0..level {
        dec.next_image().unwrap();
    }
    let (w, h) = dec.dimensions().unwrap();
    let (w, h) = (w as usize, h as usize);
    let samples = dec
        .find_tag_unsigned::<u16>(tiff::tags::Tag::SamplesPerPixel)
        .unwrap()
        .unwrap_or(1) as usize;
    let planar = dec
        .find_tag_unsigned::<u16>(tiff::tags::Tag::PlanarConfiguration)
        .unwrap()
        .unwrap_or(1)
        == 2;
    let (cw, ch) = dec.chunk_dimensions();
    let (cw, ch) = (cw as usize, ch as usize);
    let across = w.div_ceil(cw);
    let per_plane = across * h.div_ceil(ch);
    let planes = if planar { samples } else { 1 };
    let per_chunk = if planar { 1 } else { samples };
    let mut bands = vec![Array2::from_elem((h, w), f32::NAN); samples];
    for idx in 0..per_plane * planes {
        let (plane, t) = (idx / per_plane, idx % per_plane);
        let (c0, r0) = ((t % across) * cw, (t / across) * ch);
        let (dw, dh) = dec.chunk_data_dimensions(idx as u32);
        let DecodingResult::F32(values) = dec.read_chunk(idx as u32).unwrap() else {
            panic!("float32 expected");
        };
        let (dw, dh) = (dw as usize, dh as usize);
        for r in 0..dh.min(h - r0) {
            for c in 0..dw.min(w - c0) {
                for s in 0..per_chunk {
                    let band = if planar { plane } else { s };
                    bands[band][[r0 + r, c0 + c]] = values[(r * dw + c) * per_chunk + s];
                }
            }
        }
    }
    bands
}

/// The naive reference: each cell the mean of the valid cells of the 2 x 2 it covers.
fn halve(a: &Array2<f32>) -> Array2<f32> {
    let (h, w) = a.dim();
    Array2::from_shape_fn((h.div_ceil(2), w.div_ceil(2)), |(r, c)| {
        let v: Vec<f64> = a
            .slice(s![2 * r..(2 * r + 2).min(h), 2 * c..(2 * c + 2).min(w)])
            .iter()
            .filter(|v| !v.is_nan())
            .map(|v| *v as f64)
            .collect();
        if v.is_empty() {
            f32::NAN
        } else {
            (v.iter().sum::<f64>() / v.len() as f64) as f32
        }
    })
}

/// A smooth surface with nodata holes (a NaN block and scattered NaN cells).
fn surface(w: usize, h: usize) -> Array2<f32> {
    Array2::from_shape_fn((h, w), |(r, c)| {
        if (r * 7 + c * 3) % 89 == 0 || (300..340).contains(&r) && (200..260).contains(&c) {
            f32::NAN
        } else {
            (120.0 + 0.21 * c as f64 - 0.13 * r as f64 + (c as f64 / 17.0).sin() * 4.0) as f32
        }
    })
}

fn grid(w: usize, h: usize) -> Grid {
    util::utm_grid(w, h, 0.5).with_nodata(Some(f64::NAN))
}

/// Write `bands` as a stack writes them: band-sequential, encoded tiles appended in tile
/// order, in a pool of `threads` threads.
fn write_stack(path: &Path, g: &Grid, bands: &[Array2<f32>], o: WriteOptions, threads: usize) {
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .unwrap();
    pool.install(|| {
        let mut w = GeoTiffWriter::create(path, g, bands.len(), o).unwrap();
        w.set_band_units(1, "m");
        w.set_band_description(1, "elevation");
        if bands.len() > 1 {
            w.set_band_units(2, "degrees");
            w.set_band_overview(2, OverviewResampling::Circular);
        }
        let (tw, th) = w.block_size();
        let (across, down) = w.block_grid();
        for (b, data) in bands.iter().enumerate() {
            for tr in 0..down {
                for tc in 0..across {
                    let (c0, r0) = (tc * tw, tr * th);
                    let view =
                        data.slice(s![r0..(r0 + th).min(g.height), c0..(c0 + tw).min(g.width)]);
                    let e = w.encode_block(b + 1, tc, tr, view).unwrap();
                    w.write_encoded(e).unwrap();
                }
            }
        }
        w.finish().unwrap();
    });
}

/// Fails when `dir` holds a hidden file: a writer's temporary names start with a dot.
fn assert_no_temporary_files(dir: &Path) {
    let left: Vec<_> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .filter(|n| n.starts_with('.'))
        .collect();
    assert!(left.is_empty(), "{left:?}");
}

fn options(tile: usize) -> WriteOptions {
    WriteOptions {
        layout: Layout::Tiled { size: tile },
        ..WriteOptions::default()
    }
}

#[test]
fn stack_files_follow_the_cog_ordering_rules_and_overviews_are_2x2_means() {
    let dir = util::tempdir();
    let (w, h) = (1100, 700);
    let g = grid(w, h);
    let elevation = surface(w, h);
    // Aspect 359° and 1° in alternate columns: every 2 x 2 mean direction is north.
    let aspect = Array2::from_shape_fn((h, w), |(r, c)| {
        if r == 5 && c == 5 {
            f32::NAN
        } else if c % 2 == 0 {
            359.0
        } else {
            1.0
        }
    });
    let path = dir.path().join("stack.tif");
    write_stack(&path, &g, &[elevation.clone(), aspect], options(128), 2);
    let dirs = assert_cog(&path);
    // 1100 x 700 in 128-cell tiles: 550 x 350, 275 x 175, 138 x 88, 69 x 44.
    let sizes: Vec<(u64, u64)> = dirs.iter().map(|d| (d.width, d.height)).collect();
    assert_eq!(
        sizes,
        vec![(1100, 700), (550, 350), (275, 175), (138, 88), (69, 44)]
    );
    // Readers that ignore overviews see the full resolution unchanged (the `tiff` crate
    // reads the first image; terrastack's reader too).
    let full = decode_level(&path, 0);
    let same = |a: &Array2<f32>, b: &Array2<f32>| {
        a.iter()
            .zip(b.iter())
            .all(|(x, y)| x.to_bits() == y.to_bits() || x.is_nan() && y.is_nan())
    };
    assert!(same(&full[0], &elevation));
    let ours = util::band_bits(&path);
    assert_eq!(
        ours[0],
        elevation.iter().map(|v| v.to_bits()).collect::<Vec<_>>()
    );
    // Each overview level is the NaN-aware 2 x 2 mean of the level above (float32 of the
    // float64 mean of the float32 values above, so equal to rounding).
    let mut expected = elevation.clone();
    for level in 1..dirs.len() {
        expected = halve(&expected);
        let got = decode_level(&path, level);
        assert_eq!(got[0].dim(), expected.dim());
        for (x, y) in got[0].iter().zip(expected.iter()) {
            assert!(
                x.is_nan() && y.is_nan() || (x - y).abs() <= 1e-5 * y.abs(),
                "level {level}: {x} vs {y}"
            );
        }
        expected = got[0].clone();
        // Aspect: 359° and 1° average to north (0° or a hair below 360°), never 180°;
        // near the one nodata cell {359, 1, 359} average to 359.67° (within 1° of north).
        let north = got[1].iter().filter(|v| v.min(360.0 - *v) < 1e-3).count();
        assert!(north >= got[1].len() - 1, "level {level}");
        for v in got[1].iter() {
            assert!(v.min(360.0 - v) <= 1.0, "level {level}: aspect {v}");
        }
    }
}

#[test]
fn layouts_and_determinism() {
    let dir = util::tempdir();
    let (w, h) = (600, 530);
    let g = grid(w, h);
    let a = surface(w, h);
    let b = a.mapv(|v| v * 0.5 - 3.0);
    // Bytes do not depend on the thread count.
    let one = dir.path().join("one.tif");
    let four = dir.path().join("four.tif");
    write_stack(&one, &g, &[a.clone(), b.clone()], options(256), 1);
    write_stack(&four, &g, &[a.clone(), b.clone()], options(256), 4);
    assert_eq!(std::fs::read(&one).unwrap(), std::fs::read(&four).unwrap());
    // Pixel-interleaved and BigTIFF files follow the same rules; a raster of one tile
    // has no overview but the same layout.
    for (name, o) in [
        (
            "pixel.tif",
            WriteOptions {
                interleave: Interleave::Pixel,
                ..options(128)
            },
        ),
        (
            "big.tif",
            WriteOptions {
                bigtiff: BigTiff::Always,
                ..options(128)
            },
        ),
        ("single.tif", options(1024)),
    ] {
        let path = dir.path().join(name);
        write_geotiff(&path, &g, &[a.view(), b.view()], &["a", "b"], &o).unwrap();
        let dirs = assert_cog(&path);
        assert_eq!(
            dirs.len(),
            if name == "single.tif" { 1 } else { 4 },
            "{name}"
        );
        let l1 = decode_level(&path, dirs.len() - 1);
        assert_eq!(l1.len(), 2);
        let full = decode_level(&path, 0);
        assert!(full[1]
            .iter()
            .zip(b.iter())
            .all(|(x, y)| x.to_bits() == y.to_bits()));
        // No spill file is left beside the output.
        assert_no_temporary_files(dir.path());
    }
    // Without overviews the directory follows the data, as before.
    let flat = dir.path().join("flat.tif");
    let o = WriteOptions {
        overviews: false,
        ..options(128)
    };
    write_geotiff(&flat, &g, &[a.view()], &["a"], &o).unwrap();
    let (_, dirs) = walk(&std::fs::read(&flat).unwrap());
    assert_eq!(dirs.len(), 1);
    assert!(dirs[0].at.0 > dirs[0].offsets[0]);
}

/// Write `bands` with `write_block`; with `read_back`, change a band's resampling after the
/// first block and back again, which makes the writer build overview level 1 by reading
/// back the full-resolution tiles instead of from the reductions it keeps while writing.
fn write_blocks(path: &Path, g: &Grid, bands: &[Array2<f32>], o: WriteOptions, read_back: bool) {
    let mut w = GeoTiffWriter::create(path, g, bands.len(), o).unwrap();
    w.set_band_overview(1, OverviewResampling::Circular);
    if bands.len() > 2 {
        w.set_band_overview(3, OverviewResampling::Nearest);
    }
    let (tw, th) = w.block_size();
    let (across, down) = w.block_grid();
    let mut first = true;
    for tr in 0..down {
        for tc in 0..across {
            for (b, data) in bands.iter().enumerate() {
                let (c0, r0) = (tc * tw, tr * th);
                let view = data.slice(s![r0..(r0 + th).min(g.height), c0..(c0 + tw).min(g.width)]);
                w.write_block(b + 1, tc, tr, view).unwrap();
                if first && read_back {
                    w.set_band_overview(1, OverviewResampling::Average);
                    w.set_band_overview(1, OverviewResampling::Circular);
                }
                first = false;
            }
        }
    }
    w.finish().unwrap();
}

#[test]
fn level_one_kept_while_writing_equals_level_one_read_back() {
    // Both ways of making overview level 1 give the same file, byte for byte: for float
    // bands, for integers with a nodata value, band-sequential and pixel-interleaved (each
    // both ways), with
    // edge tiles cut by the raster's size (odd widths and heights), circular, average and
    // nearest bands.
    let dir = util::tempdir();
    let (w, h) = (333, 271);
    let aspect = Array2::from_shape_fn((h, w), |(r, c)| {
        if (r + 2 * c) % 37 == 0 {
            f32::NAN
        } else {
            ((r * 13 + c * 29) % 3600) as f32 * 0.1
        }
    });
    let elevation = surface(w, h);
    let classes = Array2::from_shape_fn((h, w), |(r, c)| ((r / 7 + c / 5) % 9) as f32);
    let bands = [aspect, elevation, classes];
    for (name, g, o) in [
        ("f32-band", grid(w, h), options(64)),
        (
            "f32-pixel",
            grid(w, h),
            WriteOptions {
                interleave: Interleave::Pixel,
                ..options(64)
            },
        ),
        (
            "u16-band",
            util::utm_grid(w, h, 0.5).with_nodata(Some(4.0)),
            WriteOptions {
                sample_type: terrastack::raster::SampleType::U16,
                ..options(32)
            },
        ),
        (
            "u16-pixel",
            util::utm_grid(w, h, 0.5).with_nodata(Some(4.0)),
            WriteOptions {
                interleave: Interleave::Pixel,
                sample_type: terrastack::raster::SampleType::U16,
                ..options(32)
            },
        ),
    ] {
        let kept = dir.path().join(format!("{name}-kept.tif"));
        let read = dir.path().join(format!("{name}-read.tif"));
        write_blocks(&kept, &g, &bands, o.clone(), false);
        write_blocks(&read, &g, &bands, o, true);
        assert_cog(&kept);
        assert_eq!(
            std::fs::read(&kept).unwrap(),
            std::fs::read(&read).unwrap(),
            "{name}"
        );
    }
    // The writer's temporary files are gone.
    assert_no_temporary_files(dir.path());
}

/// Each band of `got` holds the cells of the same band of `want`, NaN where it is NaN.
fn assert_same_cells(got: &[Array2<f32>], want: &[Array2<f32>]) {
    assert_eq!(got.len(), want.len());
    for (g, w) in got.iter().zip(want) {
        assert!(g
            .iter()
            .zip(w)
            .all(|(a, b)| a == b || a.is_nan() && b.is_nan()));
    }
}

/// Values that Deflate cannot shrink much (so that a few megacells make more than
/// `IN_PLACE_MIN_BYTES` of tiles), with a pattern of nodata cells.
fn rough(w: usize, h: usize, seed: u64) -> Array2<f32> {
    Array2::from_shape_fn((h, w), |(r, c)| {
        let bits = terrastack::random::mix64(seed ^ ((r as u64) << 32 | c as u64));
        if bits.is_multiple_of(97) {
            f32::NAN
        } else {
            (100.0 + terrastack::random::unit_f64(bits) * 50.0) as f32
        }
    })
}

#[test]
fn large_files_finished_in_the_spill_file_equal_copied_ones() {
    use terrastack::raster::geotiff::file_ranges::{
        in_place_count, insert_at_front, set_in_place_allowed, IN_PLACE_ALIGN, IN_PLACE_MIN_BYTES,
    };
    let dir = util::tempdir();
    let (w, h) = (2100, 2050);
    let g = grid(w, h);
    let bands = [rough(w, h, 1), rough(w, h, 2)];
    let in_place = dir.path().join("in-place.tif");
    let copied = dir.path().join("copied.tif");
    let before = in_place_count();
    write_stack(&in_place, &g, &bands, options(512), 2);
    let used = in_place_count() > before;
    set_in_place_allowed(false);
    write_stack(&copied, &g, &bands, options(512), 2);
    set_in_place_allowed(true);
    let bytes = std::fs::read(&in_place).unwrap();
    assert_eq!(
        bytes,
        std::fs::read(&copied).unwrap(),
        "the same bytes both ways"
    );
    assert_no_temporary_files(dir.path());
    // Where this file system can insert a range, the in-place way was taken.
    let probe = std::fs::OpenOptions::new()
        .read(true)
        .write(true)
        .create(true)
        .truncate(true)
        .open(dir.path().join("probe"))
        .unwrap();
    probe.set_len(2 * IN_PLACE_ALIGN).unwrap();
    assert_eq!(used, insert_at_front(&probe, IN_PLACE_ALIGN).unwrap());
    // A Cloud Optimized file whose full resolution is large, starting on an aligned offset,
    // read back by an independent decoder at full resolution and at overview level 1.
    let dirs = assert_cog(&in_place);
    let first = *dirs[0].offsets.iter().min().unwrap();
    assert_eq!(first % IN_PLACE_ALIGN, 0);
    assert!(dirs[0].counts.iter().sum::<u64>() >= IN_PLACE_MIN_BYTES);
    assert_eq!(
        bytes.len() as u64,
        first + dirs[0].counts.iter().sum::<u64>()
    );
    assert_same_cells(&decode_level(&in_place, 0), &bands);
    // Written through a symbolic link, the link stays and the file it names gets the bytes.
    #[cfg(unix)]
    {
        let target = dir.path().join("target.tif");
        let link = dir.path().join("link.tif");
        std::fs::write(&target, b"old").unwrap();
        std::os::unix::fs::symlink(&target, &link).unwrap();
        write_stack(&link, &g, &bands, options(512), 2);
        assert!(std::fs::symlink_metadata(&link)
            .unwrap()
            .file_type()
            .is_symlink());
        assert_eq!(std::fs::read(&target).unwrap(), bytes);
        assert_no_temporary_files(dir.path());
    }
    let level1 = decode_level(&in_place, 1);
    let naive = halve(&bands[0]);
    assert_eq!(level1[0].dim(), naive.dim());
    for (a, b) in level1[0].iter().zip(&naive) {
        assert!(
            a.is_nan() && b.is_nan() || (a - b).abs() <= 1e-4 * b.abs(),
            "{a} {b}"
        );
    }
}

#[test]
fn space_allocated_ahead_leaves_the_bytes_as_they_were() {
    use terrastack::raster::geotiff::file_ranges::{reserve_count, set_reserve_allowed};
    use terrastack::raster::geotiff::Compression;
    let dir = util::tempdir();
    let (w, h) = (1500, 1300);
    let g = grid(w, h);
    let bands = [rough(w, h, 3), rough(w, h, 4)];
    let plain = |compression| WriteOptions {
        compression,
        overviews: false,
        ..options(256)
    };
    let cases = [
        // Compressed blocks: the file grows by steps past the 4 MiB of the first.
        ("deflate-plain", plain(Compression::Deflate)),
        // Uncompressed: the tile data allocated at once.
        ("none-plain", plain(Compression::None)),
        (
            "none-cog",
            WriteOptions {
                compression: Compression::None,
                ..options(256)
            },
        ),
        ("deflate-cog", options(256)),
    ];
    for (name, o) in cases {
        let ahead = dir.path().join(format!("{name}-ahead.tif"));
        let before = reserve_count();
        write_stack(&ahead, &g, &bands, o.clone(), 2);
        let reserved = reserve_count() > before;
        set_reserve_allowed(false);
        let grown = dir.path().join(format!("{name}-grown.tif"));
        write_stack(&grown, &g, &bands, o, 2);
        set_reserve_allowed(true);
        let bytes = std::fs::read(&ahead).unwrap();
        let other = std::fs::read(&grown).unwrap();
        assert!(
            bytes == other,
            "{name}: the same bytes both ways ({} and {} bytes)",
            bytes.len(),
            other.len()
        );
        // Nothing allocated past the content: the file ends with its last tile or directory.
        let (_, dirs) = walk(&bytes);
        let end = dirs
            .iter()
            .flat_map(|d| {
                let tiles = d.offsets.iter().zip(&d.counts).map(|(o, c)| o + c);
                let values = d.values.iter().map(|v| v.2);
                tiles.chain(values).chain([d.at.1])
            })
            .max()
            .unwrap();
        assert_eq!(bytes.len() as u64, end, "{name}");
        let full = decode_level(&ahead, 0);
        assert_same_cells(&full, &bands);
        // Where this file system allocates ahead (ext4, XFS, tmpfs on Linux), it was used.
        let probe = std::fs::File::create(dir.path().join("probe")).unwrap();
        let can = terrastack::raster::geotiff::file_ranges::reserve(&probe, 4096);
        assert!(!can || reserved, "{name}: space was allocated ahead");
    }
    assert_no_temporary_files(dir.path());
}

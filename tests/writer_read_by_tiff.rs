//! terrastack's GeoTIFF writer read back by an independent decoder: the `tiff` crate
//! (image-rs), which shares no code with terrastack's reader. Every layout the stack
//! writer can produce (tiles with partial edge tiles, strips, band-sequential and
//! pixel-interleaved bands, Deflate/LZW/none, the horizontal and floating-point
//! predictors, BigTIFF) must decode to the very values that were written, bit for bit.
//! Runs under plain `cargo test`.

mod util;

use std::fs::File;
use std::path::Path;

use ndarray::Array2;
use terrastack::raster::geotiff::{
    write_geotiff, BigTiff, Compression, Interleave, Layout, TiffSample, WriteOptions,
};
use tiff::decoder::{Decoder, DecodingResult, Limits};
use tiff::tags::Tag;
use util::{tempdir, utm_grid};

/// Band `b` of a closed-form test surface, with a few NaN cells (nodata) for floats.
fn band_f32(width: usize, height: usize, b: usize) -> Array2<f32> {
    Array2::from_shape_fn((height, width), |(r, c)| {
        if (r * 7 + c * 3 + b).is_multiple_of(97) {
            f32::NAN
        } else {
            (150.0 + b as f64 * 10.0 + 0.37 * c as f64 - 0.21 * r as f64
                + (c as f64 / 9.0).sin() * (r as f64 / 13.0).cos()) as f32
        }
    })
}

/// Every sample of the file's image, as one `Vec<f64>` per band in row-major order, read
/// chunk by chunk with the `tiff` crate (planar files hold one band per chunk).
fn decode_bands(path: &Path) -> (usize, usize, Vec<Vec<f64>>) {
    let mut dec = Decoder::new(File::open(path).unwrap())
        .unwrap()
        .with_limits(Limits::unlimited());
    let (w, h) = dec.dimensions().unwrap();
    let (w, h) = (w as usize, h as usize);
    let samples = dec
        .find_tag_unsigned::<u16>(Tag::SamplesPerPixel)
        .unwrap()
        .unwrap_or(1) as usize;
    let planar = dec
        .find_tag_unsigned::<u16>(Tag::PlanarConfiguration)
        .unwrap()
        .unwrap_or(1)
        == 2;
    let (cw, ch) = dec.chunk_dimensions();
    let (cw, ch) = (cw as usize, ch as usize);
    let across = w.div_ceil(cw);
    let per_plane = across * h.div_ceil(ch);
    let planes = if planar { samples } else { 1 };
    let per_chunk = if planar { 1 } else { samples };
    let mut bands = vec![vec![f64::NAN; w * h]; samples];
    for idx in 0..per_plane * planes {
        let (plane, t) = (idx / per_plane, idx % per_plane);
        let (c0, r0) = ((t % across) * cw, (t / across) * ch);
        let (dw, dh) = dec.chunk_data_dimensions(idx as u32);
        let values: Vec<f64> = match dec.read_chunk(idx as u32).unwrap() {
            DecodingResult::F32(v) => v.into_iter().map(f64::from).collect(),
            DecodingResult::F64(v) => v,
            DecodingResult::U8(v) => v.into_iter().map(f64::from).collect(),
            DecodingResult::U16(v) => v.into_iter().map(f64::from).collect(),
            DecodingResult::I16(v) => v.into_iter().map(f64::from).collect(),
            DecodingResult::U32(v) => v.into_iter().map(f64::from).collect(),
            DecodingResult::I32(v) => v.into_iter().map(f64::from).collect(),
            _ => panic!("unexpected sample type"),
        };
        // `values` holds dw x dh cells of the chunk, rows dw apart. The crate reports the
        // padding of planar tiles past the first plane as none (it decodes the whole
        // padded tile then), so only the part inside the image is copied.
        let (dw, dh) = (dw as usize, dh as usize);
        assert_eq!(values.len(), dw * dh * per_chunk);
        for r in 0..dh.min(h - r0) {
            for c in 0..dw.min(w - c0) {
                for s in 0..per_chunk {
                    let band = if planar { plane } else { s };
                    bands[band][(r0 + r) * w + c0 + c] = values[(r * dw + c) * per_chunk + s];
                }
            }
        }
    }
    (w, h, bands)
}

/// Write `bands` with `options`, decode with the `tiff` crate, and compare every sample
/// with what was written (NaN where NaN was written).
fn round_trip<T: TiffSample + Into<f64>>(bands: &[Array2<T>], options: &WriteOptions) {
    let dir = tempdir();
    let path = dir.path().join("written.tif");
    let (h, w) = bands[0].dim();
    let views: Vec<_> = bands.iter().map(|b| b.view()).collect();
    let names: Vec<String> = (1..=bands.len()).map(|i| format!("band_{i}")).collect();
    let names: Vec<&str> = names.iter().map(String::as_str).collect();
    write_geotiff(&path, &utm_grid(w, h, 0.5), &views, &names, options).unwrap();

    let (dw, dh, decoded) = decode_bands(&path);
    assert_eq!((dw, dh), (w, h), "{options:?}");
    assert_eq!(decoded.len(), bands.len(), "{options:?}");
    for (b, (want, got)) in bands.iter().zip(&decoded).enumerate() {
        for ((r, c), &v) in want.indexed_iter() {
            let v: f64 = v.into();
            let g = got[r * w + c];
            assert!(
                (v.is_nan() && g.is_nan()) || v.to_bits() == g.to_bits(),
                "band {b} cell ({r}, {c}): wrote {v}, the tiff crate read {g} with {options:?}"
            );
        }
    }
}

#[test]
fn stack_layout_tiled_deflate_float_predictor_band_sequential() {
    // The stack's own layout (WriteOptions::default()), with partial tiles on both edges.
    let bands: Vec<_> = (0..3).map(|b| band_f32(700, 530, b)).collect();
    let options = WriteOptions {
        layout: Layout::Tiled { size: 256 },
        ..WriteOptions::default()
    };
    round_trip(&bands, &options);
}

#[test]
fn pixel_interleaved_lzw_float_predictor() {
    let bands: Vec<_> = (0..3).map(|b| band_f32(300, 200, b)).collect();
    let options = WriteOptions {
        compression: Compression::Lzw,
        interleave: Interleave::Pixel,
        layout: Layout::Tiled { size: 128 },
        ..WriteOptions::default()
    };
    round_trip(&bands, &options);
}

#[test]
fn strips_uncompressed_and_deflate() {
    let bands = vec![band_f32(333, 101, 0)];
    for compression in [Compression::None, Compression::Deflate] {
        let options = WriteOptions {
            compression,
            predictor: Some(if compression == Compression::None {
                1
            } else {
                3
            }),
            layout: Layout::Strips { rows_per_strip: 16 },
            ..WriteOptions::default()
        };
        round_trip(&bands, &options);
    }
}

#[test]
fn bigtiff_is_read_the_same() {
    let bands: Vec<_> = (0..2).map(|b| band_f32(260, 140, b)).collect();
    let options = WriteOptions {
        bigtiff: BigTiff::Always,
        layout: Layout::Tiled { size: 128 },
        ..WriteOptions::default()
    };
    round_trip(&bands, &options);
}

#[test]
fn integer_bands_with_horizontal_predictor() {
    // Reflectance-like u16 digital numbers: Deflate with the horizontal predictor (2).
    let band = Array2::from_shape_fn((150, 210), |(r, c)| ((r * 131 + c * 17) % 10_000) as u16);
    let options = WriteOptions {
        sample_type: <u16 as TiffSample>::TYPE,
        predictor: Some(2),
        layout: Layout::Tiled { size: 64 },
        ..WriteOptions::default()
    };
    round_trip(&[band.clone(), band.mapv(|v| 10_000 - v)], &options);
}

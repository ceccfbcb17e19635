//! Compression and prediction of one strip or tile.
//!
//! Codecs: none (TIFF code 1), LZW (5, TIFF 6.0 §13, MSB-first codes with the early code
//! width change; the pre-6.0 LSB-first variant is also read), Deflate (8 and the older
//! 32946, a zlib stream as in the TIFF Technical Note 2 / Adobe Photoshop TIFF spec),
//! PackBits (32773, TIFF 6.0 §9, rows packed separately) and ZSTD (50000, the code GDAL
//! documents for its ZSTD compression).
//!
//! Deflate is libdeflate's (bundled C source, built with the crate; one compressor and one
//! decompressor per thread): it compresses a whole block in one call, about twice as fast
//! as zlib at the same level, and its output for a given input and level is the same on
//! every machine. A stream that decodes to more bytes than its block holds (libdeflate
//! needs the whole output room up front) is read by flate2's streaming decoder instead,
//! which stops at the block's size.
//!
//! Predictors: 2, horizontal differencing of integer samples (TIFF 6.0 §14), and 3, the
//! floating-point predictor of Adobe's TIFF Technical Note 3 (1995): each row's samples
//! are split into byte planes, most significant first, then differenced byte-wise.
//! Decoding returns samples in the machine's byte order.

use std::io::Read;

use super::tags::{ByteOrder, Problem};

/// A strip/tile codec.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Codec {
    None,
    Lzw,
    Deflate,
    PackBits,
    Zstd,
}

impl Codec {
    /// The codec for a TIFF Compression tag value, if terrastack reads it.
    pub fn from_tag(code: u64) -> Option<Codec> {
        match code {
            1 => Some(Codec::None),
            5 => Some(Codec::Lzw),
            8 | 32946 => Some(Codec::Deflate),
            32773 => Some(Codec::PackBits),
            50000 => Some(Codec::Zstd),
            _ => None,
        }
    }

    /// The Compression tag value written for this codec.
    pub fn tag(self) -> u16 {
        match self {
            Codec::None => 1,
            Codec::Lzw => 5,
            Codec::Deflate => 8,
            Codec::PackBits => 32773,
            Codec::Zstd => 50000,
        }
    }
}

/// Name of a Compression tag value, for messages.
pub fn compression_name(code: u64) -> String {
    match code {
        1 => "none".into(),
        2 => "CCITT RLE".into(),
        3 | 4 => "CCITT fax".into(),
        5 => "LZW".into(),
        6 | 7 => "JPEG".into(),
        8 | 32946 => "Deflate".into(),
        32773 => "PackBits".into(),
        34887 => "LERC".into(),
        34925 => "LZMA".into(),
        50000 => "ZSTD".into(),
        50001 => "WebP".into(),
        50002 => "JPEG XL".into(),
        c => format!("code {c}"),
    }
}

/// libdeflate level used when writing. Measured on 512² float32 tiles with the
/// floating-point predictor, Cloud Optimized stacks with overviews from
/// `scripts/bench_build.py`: slope and aspect of a 4000² DSM, level 1 0.14 % larger than
/// level 2 (0.8 % larger than GDAL's COG driver at its default level 6) and 7 % less
/// build time on one thread; the default 33-band recipe at 2000², level 1 0.3 % smaller
/// than level 2. zlib at level 6 (GDAL's default `ZLEVEL`) takes about three times as
/// long as libdeflate at level 2.
pub const DEFLATE_LEVEL: i32 = 1;
/// ZSTD level used when writing (GDAL's documented default `ZSTD_LEVEL`).
pub const ZSTD_LEVEL: i32 = 9;

/// Decompress one chunk whose decoded size must be `expected` bytes. Longer output is cut
/// to `expected`; shorter output is a problem (a truncated or corrupt chunk). Output is
/// never allowed to grow past `expected`, whatever the input claims.
pub fn decompress(codec: Codec, raw: Vec<u8>, expected: usize) -> Result<Vec<u8>, Problem> {
    // Start at a plausible size and grow: a corrupt header may promise far more than the
    // data holds.
    let data = &raw[..];
    let start = expected.min(data.len().saturating_mul(64).max(4 << 20));
    let mut out = match codec {
        Codec::None => {
            let mut raw = raw;
            raw.truncate(expected);
            raw
        }
        Codec::Deflate => deflate_decode(data, expected, start)?,
        Codec::Zstd => {
            let mut out = Vec::with_capacity(start);
            let decoder = zstd::stream::read::Decoder::new(data)
                .map_err(|e| format!("ZSTD data is corrupt ({e})"))?;
            decoder
                .take(expected as u64)
                .read_to_end(&mut out)
                .map_err(|e| format!("ZSTD data is corrupt ({e})"))?;
            out
        }
        Codec::Lzw => lzw_decode(data, expected, start)?,
        Codec::PackBits => packbits_decode(data, expected),
    };
    if out.len() < expected {
        return Err(short_block(out.len(), expected));
    }
    out.truncate(expected);
    Ok(out)
}

/// The problem of a block that holds `len` bytes where `expected` were expected.
pub fn short_block(len: usize, expected: usize) -> Problem {
    format!(
        "a block decodes to {len} bytes where {expected} were expected (truncated or corrupt data)"
    )
}

thread_local! {
    static DEFLATE_IN: std::cell::RefCell<libdeflater::Decompressor> =
        std::cell::RefCell::new(libdeflater::Decompressor::new());
    static DEFLATE_OUT: std::cell::RefCell<Option<libdeflater::Compressor>> =
        const { std::cell::RefCell::new(None) };
}

/// Decode a zlib stream into at most `expected` bytes: libdeflate in one call when the
/// stream fits the block, else flate2's streaming decoder cut at `expected`.
fn deflate_decode(data: &[u8], expected: usize, start: usize) -> Result<Vec<u8>, Problem> {
    let corrupt = |e: &dyn std::fmt::Display| format!("Deflate data is corrupt ({e})");
    let streamed = || {
        let mut out = Vec::with_capacity(start);
        flate2::read::ZlibDecoder::new(data)
            .take(expected as u64)
            .read_to_end(&mut out)
            .map_err(|e| corrupt(&e))?;
        Ok(out)
    };
    // A block far larger than its data could hold (`start` < `expected`) is not
    // allocated whole up front: the streaming decoder grows to what the data gives.
    if start < expected {
        return streamed();
    }
    let mut out = vec![0u8; expected];
    let fast = DEFLATE_IN.with(|d| d.borrow_mut().zlib_decompress(data, &mut out));
    match fast {
        Ok(n) => {
            out.truncate(n);
            Ok(out)
        }
        Err(libdeflater::DecompressionError::BadData) => Err(corrupt(&"bad data or checksum")),
        Err(libdeflater::DecompressionError::InsufficientSpace) => streamed(),
    }
}

/// zlib stream of `data` at [`DEFLATE_LEVEL`].
fn deflate_encode(data: &[u8]) -> Result<Vec<u8>, Problem> {
    DEFLATE_OUT.with(|c| {
        let mut c = c.borrow_mut();
        let c = c.get_or_insert_with(|| {
            libdeflater::Compressor::new(
                libdeflater::CompressionLvl::new(DEFLATE_LEVEL).expect("a libdeflate level"),
            )
        });
        let mut out = vec![0u8; c.zlib_compress_bound(data.len())];
        let n = c
            .zlib_compress(data, &mut out)
            .map_err(|e| format!("Deflate compression failed ({e})"))?;
        out.truncate(n);
        Ok(out)
    })
}

fn lzw_decode(data: &[u8], expected: usize, start: usize) -> Result<Vec<u8>, Problem> {
    use weezl::{decode::Decoder, BitOrder, LzwStatus};
    // Pre-6.0 LSB-first streams start with a zero byte and an odd second byte (libtiff's
    // test for "old-style" LZW, from memory).
    let old_style = data.len() >= 2 && data[0] == 0 && data[1] & 1 == 1;
    let mut decoder = if old_style {
        Decoder::new(BitOrder::Lsb, 8)
    } else {
        Decoder::with_tiff_size_switch(BitOrder::Msb, 8)
    };
    let mut out = vec![0u8; start];
    let mut inp = data;
    let mut filled = 0;
    while filled < expected {
        if filled == out.len() {
            out.resize(expected.min(out.len().saturating_mul(2)), 0);
        }
        let r = decoder.decode_bytes(inp, &mut out[filled..]);
        filled += r.consumed_out;
        inp = &inp[r.consumed_in..];
        match r.status {
            Ok(LzwStatus::Ok) => {}
            Ok(LzwStatus::Done) | Ok(LzwStatus::NoProgress) => break,
            Err(e) => return Err(format!("LZW data is corrupt ({e})")),
        }
    }
    out.truncate(filled);
    Ok(out)
}

fn packbits_decode(data: &[u8], expected: usize) -> Vec<u8> {
    let mut out = Vec::with_capacity(expected.min(data.len().saturating_mul(4)));
    let mut i = 0;
    while i < data.len() && out.len() < expected {
        let n = data[i] as i8;
        i += 1;
        if n >= 0 {
            let len = (n as usize + 1).min(data.len() - i);
            out.extend_from_slice(&data[i..i + len]);
            i += len;
        } else if n != -128 {
            if i >= data.len() {
                break;
            }
            let len = 1 - n as isize;
            out.extend(std::iter::repeat_n(data[i], len as usize));
            i += 1;
        }
    }
    out
}

/// PackBits-encode `data`, each row of `row_bytes` bytes on its own (TIFF 6.0 §9).
fn packbits_encode(data: &[u8], row_bytes: usize) -> Vec<u8> {
    let mut out = Vec::with_capacity(data.len() + data.len() / 64 + 2);
    for row in data.chunks(row_bytes.max(1)) {
        let mut i = 0;
        while i < row.len() {
            // Length of the run of equal bytes starting at i.
            let mut run = 1;
            while i + run < row.len() && run < 128 && row[i + run] == row[i] {
                run += 1;
            }
            if run >= 3 {
                out.push((1 - run as isize) as i8 as u8);
                out.push(row[i]);
                i += run;
                continue;
            }
            // Literal: up to 128 bytes, stopping before a run of three.
            let start = i;
            while i < row.len() && i - start < 128 {
                if i + 2 < row.len() && row[i] == row[i + 1] && row[i] == row[i + 2] {
                    break;
                }
                i += 1;
            }
            out.push((i - start - 1) as u8);
            out.extend_from_slice(&row[start..i]);
        }
    }
    out
}

/// Compress one chunk; `row_bytes` is the length of one row (PackBits packs rows apart).
pub fn compress(codec: Codec, raw: Vec<u8>, row_bytes: usize) -> Result<Vec<u8>, Problem> {
    let data = &raw[..];
    match codec {
        Codec::None => Ok(raw),
        Codec::Deflate => deflate_encode(data),
        Codec::Zstd => zstd::bulk::compress(data, ZSTD_LEVEL)
            .map_err(|e| format!("ZSTD compression failed ({e})")),
        Codec::Lzw => weezl::encode::Encoder::with_tiff_size_switch(weezl::BitOrder::Msb, 8)
            .encode(data)
            .map_err(|e| format!("LZW compression failed ({e})")),
        Codec::PackBits => Ok(packbits_encode(data, row_bytes)),
    }
}

/// Shape of a decoded chunk, for the predictors: `rows` rows of `row_samples` samples of
/// `sample_size` bytes, with `stride` samples per pixel (1 for band-sequential chunks).
#[derive(Clone, Copy, Debug)]
pub struct ChunkShape {
    pub rows: usize,
    pub row_samples: usize,
    pub stride: usize,
    pub sample_size: usize,
}

impl ChunkShape {
    pub fn bytes(&self) -> usize {
        self.rows * self.row_samples * self.sample_size
    }
}

macro_rules! hor_acc {
    ($ty:ty, $buf:expr, $shape:expr) => {{
        let ss = std::mem::size_of::<$ty>();
        let row_bytes = $shape.row_samples * ss;
        let stride = $shape.stride;
        for row in $buf.chunks_exact_mut(row_bytes) {
            for i in stride..$shape.row_samples {
                let prev = <$ty>::from_ne_bytes(
                    row[(i - stride) * ss..(i - stride + 1) * ss]
                        .try_into()
                        .unwrap(),
                );
                let cur = <$ty>::from_ne_bytes(row[i * ss..(i + 1) * ss].try_into().unwrap());
                row[i * ss..(i + 1) * ss].copy_from_slice(&cur.wrapping_add(prev).to_ne_bytes());
            }
        }
    }};
}

macro_rules! hor_diff_le {
    ($ty:ty, $buf:expr, $shape:expr) => {{
        let ss = std::mem::size_of::<$ty>();
        let row_bytes = $shape.row_samples * ss;
        let stride = $shape.stride;
        for row in $buf.chunks_exact_mut(row_bytes) {
            for i in (stride..$shape.row_samples).rev() {
                let prev = <$ty>::from_le_bytes(
                    row[(i - stride) * ss..(i - stride + 1) * ss]
                        .try_into()
                        .unwrap(),
                );
                let cur = <$ty>::from_le_bytes(row[i * ss..(i + 1) * ss].try_into().unwrap());
                row[i * ss..(i + 1) * ss].copy_from_slice(&cur.wrapping_sub(prev).to_le_bytes());
            }
        }
    }};
}

/// Predictor 3 byte planes (most significant first, `planes[k·n + s]`) back into `n`
/// samples of `N` bytes in the machine's byte order. One plane at a time, so each pass
/// reads one plane in order (the compiler vectorises it).
fn unshuffle<const N: usize>(row: &mut [u8], planes: &[u8], n: usize) {
    for (k, plane) in planes.chunks_exact(n).take(N).enumerate() {
        let byte = if cfg!(target_endian = "little") {
            N - 1 - k
        } else {
            k
        };
        for (out, &b) in row.chunks_exact_mut(N).zip(plane) {
            out[byte] = b;
        }
    }
}

/// `n` little-endian samples of `N` bytes into predictor 3 byte planes (most
/// significant first), one plane at a time.
fn shuffle<const N: usize>(row: &[u8], planes: &mut [u8], n: usize) {
    for (k, plane) in planes.chunks_exact_mut(n).take(N).enumerate() {
        for (p, sample) in plane.iter_mut().zip(row.chunks_exact(N)) {
            *p = sample[N - 1 - k];
        }
    }
}

/// Turn a decompressed chunk in file byte order `order` into samples in the machine's
/// byte order, undoing `predictor` (1, 2 or 3).
pub fn decode_samples(buf: &mut [u8], shape: ChunkShape, order: ByteOrder, predictor: u16) {
    let ss = shape.sample_size;
    if predictor == 3 {
        let n = shape.row_samples;
        let row_bytes = n * ss;
        let mut tmp = vec![0u8; row_bytes];
        for row in buf.chunks_exact_mut(row_bytes) {
            // Undo the byte differences into `tmp` (a running sum for one sample per
            // pixel), then put the planes back together into the row.
            let stride = shape.stride.min(row_bytes);
            if stride == 1 {
                let mut acc = 0u8;
                for (t, &d) in tmp.iter_mut().zip(row.iter()) {
                    acc = acc.wrapping_add(d);
                    *t = acc;
                }
            } else {
                tmp[..stride].copy_from_slice(&row[..stride]);
                for i in stride..row_bytes {
                    tmp[i] = row[i].wrapping_add(tmp[i - stride]);
                }
            }
            match ss {
                4 => unshuffle::<4>(row, &tmp, n),
                8 => unshuffle::<8>(row, &tmp, n),
                2 => unshuffle::<2>(row, &tmp, n),
                _ => unshuffle::<1>(row, &tmp, n),
            }
        }
        return;
    }
    if order != ByteOrder::native() && ss > 1 {
        for s in buf.chunks_exact_mut(ss) {
            s.reverse();
        }
    }
    if predictor == 2 {
        match ss {
            1 => hor_acc!(u8, buf, shape),
            2 => hor_acc!(u16, buf, shape),
            4 => hor_acc!(u32, buf, shape),
            _ => hor_acc!(u64, buf, shape),
        }
    }
}

/// Apply `predictor` (1, 2 or 3) to a chunk of little-endian samples, in place, giving
/// the bytes to compress for a little-endian file.
pub fn encode_samples(buf: &mut [u8], shape: ChunkShape, predictor: u16) {
    let ss = shape.sample_size;
    match predictor {
        2 => match ss {
            1 => hor_diff_le!(u8, buf, shape),
            2 => hor_diff_le!(u16, buf, shape),
            4 => hor_diff_le!(u32, buf, shape),
            _ => hor_diff_le!(u64, buf, shape),
        },
        3 => {
            let n = shape.row_samples;
            let row_bytes = n * ss;
            let mut tmp = vec![0u8; row_bytes];
            for row in buf.chunks_exact_mut(row_bytes) {
                match ss {
                    4 => shuffle::<4>(row, &mut tmp, n),
                    8 => shuffle::<8>(row, &mut tmp, n),
                    2 => shuffle::<2>(row, &mut tmp, n),
                    _ => shuffle::<1>(row, &mut tmp, n),
                }
                // Byte differences of the planes, written straight into the row.
                let stride = shape.stride.min(row_bytes);
                row[..stride].copy_from_slice(&tmp[..stride]);
                for ((d, &cur), &prev) in row[stride..]
                    .iter_mut()
                    .zip(&tmp[stride..])
                    .zip(&tmp[..row_bytes - stride])
                {
                    *d = cur.wrapping_sub(prev);
                }
            }
        }
        _ => {}
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn packbits_worked_example() {
        // The worked example of TIFF 6.0 §9 (p. 42): packed and unpacked bytes.
        let packed: [u8; 15] = [
            0xFE, 0xAA, 0x02, 0x80, 0x00, 0x2A, 0xFD, 0xAA, 0x03, 0x80, 0x00, 0x2A, 0x22, 0xF7,
            0xAA,
        ];
        let unpacked: [u8; 24] = [
            0xAA, 0xAA, 0xAA, 0x80, 0x00, 0x2A, 0xAA, 0xAA, 0xAA, 0xAA, 0x80, 0x00, 0x2A, 0x22,
            0xAA, 0xAA, 0xAA, 0xAA, 0xAA, 0xAA, 0xAA, 0xAA, 0xAA, 0xAA,
        ];
        assert_eq!(packbits_decode(&packed, 24), unpacked);
        let ours = packbits_encode(&unpacked, 24);
        assert_eq!(packbits_decode(&ours, 24), unpacked);
        assert!(ours.len() <= packed.len());
    }

    #[test]
    fn every_codec_round_trips() {
        let data: Vec<u8> = (0..5000u32)
            .map(|i| ((i * 7) % 13 + (i / 300)) as u8)
            .collect();
        for codec in [
            Codec::None,
            Codec::Lzw,
            Codec::Deflate,
            Codec::PackBits,
            Codec::Zstd,
        ] {
            let c = compress(codec, data.clone(), 100).unwrap();
            assert_eq!(
                decompress(codec, c.clone(), data.len()).unwrap(),
                data,
                "{codec:?}"
            );
            // Asking for more than the stream holds is a problem, not a panic.
            assert!(
                decompress(codec, c.clone(), data.len() + 1).is_err(),
                "{codec:?}"
            );
        }
    }

    #[test]
    fn deflate_streams_are_zlib_streams_both_ways() {
        // Ours decoded by flate2 (zlib-rs, an independent implementation), and zlib-rs's
        // decoded by ours, including a stream holding more than its block (cut to it).
        use std::io::Write;
        let data: Vec<u8> = (0..300_000u32)
            .map(|i| ((i % 251) ^ (i / 977)) as u8)
            .collect();
        let ours = compress(Codec::Deflate, data.clone(), 1000).unwrap();
        let mut back = Vec::new();
        flate2::read::ZlibDecoder::new(&ours[..])
            .read_to_end(&mut back)
            .unwrap();
        assert_eq!(back, data);
        let mut enc = flate2::write::ZlibEncoder::new(Vec::new(), flate2::Compression::new(6));
        enc.write_all(&data).unwrap();
        let theirs = enc.finish().unwrap();
        assert_eq!(
            decompress(Codec::Deflate, theirs.clone(), data.len()).unwrap(),
            data
        );
        assert_eq!(
            decompress(Codec::Deflate, theirs, 1000).unwrap(),
            data[..1000]
        );
        // Same input, same bytes (the determinism of the output files rests on it).
        assert_eq!(compress(Codec::Deflate, data.clone(), 1000).unwrap(), ours);
        // A corrupt stream is a problem.
        let mut bad = ours.clone();
        bad[ours.len() / 2] ^= 0x55;
        assert!(decompress(Codec::Deflate, bad, data.len()).is_err());
    }

    #[test]
    fn predictor_2_worked_numbers() {
        // TIFF 6.0 §14: a row 10, 12, 15, 15 of uint16 differences to 10, 2, 3, 0.
        let shape = ChunkShape {
            rows: 1,
            row_samples: 4,
            stride: 1,
            sample_size: 2,
        };
        let mut buf: Vec<u8> = [10u16, 12, 15, 15]
            .iter()
            .flat_map(|v| v.to_le_bytes())
            .collect();
        encode_samples(&mut buf, shape, 2);
        let diffs: Vec<u16> = buf
            .chunks(2)
            .map(|b| u16::from_le_bytes([b[0], b[1]]))
            .collect();
        assert_eq!(diffs, [10, 2, 3, 0]);
        decode_samples(&mut buf, shape, ByteOrder::Little, 2);
        let back: Vec<u16> = buf
            .chunks(2)
            .map(|b| u16::from_ne_bytes([b[0], b[1]]))
            .collect();
        assert_eq!(back, [10, 12, 15, 15]);
    }

    #[test]
    fn predictor_3_layout_and_round_trip() {
        // Adobe Technical Note 3: bytes of 1.0f32 (0x3F800000) and 2.0f32 (0x40000000) go
        // to planes MSB first: [3F 40 | 80 00 | 00 00 | 00 00], then byte differences.
        let shape = ChunkShape {
            rows: 1,
            row_samples: 2,
            stride: 1,
            sample_size: 4,
        };
        let mut buf: Vec<u8> = [1.0f32, 2.0].iter().flat_map(|v| v.to_le_bytes()).collect();
        encode_samples(&mut buf, shape, 3);
        assert_eq!(buf, [0x3F, 0x01, 0x40, 0x80, 0x00, 0x00, 0x00, 0x00]);
        decode_samples(&mut buf, shape, ByteOrder::Little, 3);
        let back: Vec<f32> = buf
            .chunks(4)
            .map(|b| f32::from_ne_bytes(b.try_into().unwrap()))
            .collect();
        assert_eq!(back, [1.0, 2.0]);
    }
}

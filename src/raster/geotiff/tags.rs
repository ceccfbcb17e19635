//! The TIFF container: header, image file directory (IFD) and tag values, for classic TIFF
//! (TIFF 6.0, Adobe 1992, §2 "TIFF Structure") and BigTIFF (64-bit offsets, version 43, as
//! documented by libtiff), in either byte order.
//!
//! Reading is defensive: every offset and count is checked against the file's length
//! before anything is allocated, and problems come back as plain sentences that the
//! reader attaches to the file's path. Writing builds one IFD in little-endian order.

use std::fs::File;

/// A problem found while parsing, as a sentence; the caller adds the path and the fix.
pub type Problem = String;

// Baseline and extension tags, TIFF 6.0 Appendix A.
/// NewSubfileType (TIFF 6.0 §8): bit 0 set marks a reduced-resolution image (an overview).
pub const NEW_SUBFILE_TYPE: u16 = 254;
pub const IMAGE_WIDTH: u16 = 256;
pub const IMAGE_LENGTH: u16 = 257;
pub const BITS_PER_SAMPLE: u16 = 258;
pub const COMPRESSION: u16 = 259;
pub const PHOTOMETRIC: u16 = 262;
pub const STRIP_OFFSETS: u16 = 273;
pub const SAMPLES_PER_PIXEL: u16 = 277;
pub const ROWS_PER_STRIP: u16 = 278;
pub const STRIP_BYTE_COUNTS: u16 = 279;
pub const PLANAR_CONFIGURATION: u16 = 284;
pub const PREDICTOR: u16 = 317;
pub const TILE_WIDTH: u16 = 322;
pub const TILE_LENGTH: u16 = 323;
pub const TILE_OFFSETS: u16 = 324;
pub const TILE_BYTE_COUNTS: u16 = 325;
pub const EXTRA_SAMPLES: u16 = 338;
pub const SAMPLE_FORMAT: u16 = 339;
// GeoTIFF tags, OGC GeoTIFF 1.1 (OGC 19-008r4) §7.
pub const MODEL_PIXEL_SCALE: u16 = 33550;
pub const MODEL_TIEPOINT: u16 = 33922;
pub const MODEL_TRANSFORMATION: u16 = 34264;
pub const GEO_KEY_DIRECTORY: u16 = 34735;
pub const GEO_DOUBLE_PARAMS: u16 = 34736;
pub const GEO_ASCII_PARAMS: u16 = 34737;
// GDAL's private tags, documented in GDAL's GTiff driver page.
pub const GDAL_METADATA: u16 = 42112;
pub const GDAL_NODATA: u16 = 42113;

// Field types, TIFF 6.0 §2 plus BigTIFF's 64-bit types.
pub const TYPE_BYTE: u16 = 1;
pub const TYPE_ASCII: u16 = 2;
pub const TYPE_SHORT: u16 = 3;
pub const TYPE_LONG: u16 = 4;
pub const TYPE_DOUBLE: u16 = 12;
pub const TYPE_LONG8: u16 = 16;

/// Largest out-of-line tag value read, in bytes. Real files stay far below it (a 400
/// megapixel, 64-band stack in 512-cell tiles needs under 1 MB of offsets).
const MAX_TAG_BYTES: u64 = 256 << 20;
/// Largest number of entries accepted in one IFD.
const MAX_ENTRIES: u64 = 4096;

/// Byte order of a file.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ByteOrder {
    Little,
    Big,
}

impl ByteOrder {
    /// The order of the machine running terrastack.
    pub fn native() -> ByteOrder {
        if cfg!(target_endian = "little") {
            ByteOrder::Little
        } else {
            ByteOrder::Big
        }
    }

    fn u16(self, b: &[u8]) -> u16 {
        let a = [b[0], b[1]];
        match self {
            ByteOrder::Little => u16::from_le_bytes(a),
            ByteOrder::Big => u16::from_be_bytes(a),
        }
    }

    fn u32(self, b: &[u8]) -> u32 {
        let a = [b[0], b[1], b[2], b[3]];
        match self {
            ByteOrder::Little => u32::from_le_bytes(a),
            ByteOrder::Big => u32::from_be_bytes(a),
        }
    }

    fn u64(self, b: &[u8]) -> u64 {
        let mut a = [0u8; 8];
        a.copy_from_slice(&b[..8]);
        match self {
            ByteOrder::Little => u64::from_le_bytes(a),
            ByteOrder::Big => u64::from_be_bytes(a),
        }
    }
}

/// Size in bytes of one value of TIFF field type `typ`, or `None` for unknown types
/// (which readers must skip, TIFF 6.0 §2).
pub fn type_size(typ: u16) -> Option<u64> {
    match typ {
        1 | 2 | 6 | 7 => Some(1),
        3 | 8 => Some(2),
        4 | 9 | 11 | 13 => Some(4),
        5 | 10 | 12 | 16 | 17 | 18 => Some(8),
        _ => None,
    }
}

/// Read exactly `buf.len()` bytes at `offset` without moving any shared cursor, so that
/// several threads can read one file at once.
pub fn read_exact_at(file: &File, buf: &mut [u8], offset: u64) -> std::io::Result<()> {
    #[cfg(unix)]
    {
        std::os::unix::fs::FileExt::read_exact_at(file, buf, offset)
    }
    #[cfg(windows)]
    {
        let mut done = 0;
        while done < buf.len() {
            let n = std::os::windows::fs::FileExt::seek_read(
                file,
                &mut buf[done..],
                offset + done as u64,
            )?;
            if n == 0 {
                return Err(std::io::ErrorKind::UnexpectedEof.into());
            }
            done += n;
        }
        Ok(())
    }
}

/// Write all of `buf` at `offset` without moving any shared cursor.
pub fn write_all_at(file: &File, buf: &[u8], offset: u64) -> std::io::Result<()> {
    #[cfg(unix)]
    {
        std::os::unix::fs::FileExt::write_all_at(file, buf, offset)
    }
    #[cfg(windows)]
    {
        let mut done = 0;
        while done < buf.len() {
            let n = std::os::windows::fs::FileExt::seek_write(
                file,
                &buf[done..],
                offset + done as u64,
            )?;
            if n == 0 {
                return Err(std::io::ErrorKind::WriteZero.into());
            }
            done += n;
        }
        Ok(())
    }
}

/// The fixed part of a TIFF file.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Header {
    pub order: ByteOrder,
    /// BigTIFF (version 43) rather than classic TIFF (version 42).
    pub big: bool,
    pub first_ifd: u64,
}

/// Recognise a TIFF or BigTIFF signature in the first bytes of a file.
pub fn signature(bytes: &[u8]) -> Option<(ByteOrder, bool)> {
    if bytes.len() < 4 {
        return None;
    }
    let order = match &bytes[..2] {
        b"II" => ByteOrder::Little,
        b"MM" => ByteOrder::Big,
        _ => return None,
    };
    match order.u16(&bytes[2..4]) {
        42 => Some((order, false)),
        43 => Some((order, true)),
        _ => None,
    }
}

/// Parse the header from the first 16 bytes (or fewer, for tiny files).
pub fn parse_header(bytes: &[u8]) -> Result<Header, Problem> {
    let (order, big) =
        signature(bytes).ok_or_else(|| "not a TIFF file (no TIFF signature)".to_string())?;
    if big {
        if bytes.len() < 16 {
            return Err("the BigTIFF header is truncated".into());
        }
        if order.u16(&bytes[4..6]) != 8 {
            return Err("the BigTIFF header declares an offset size other than 8".into());
        }
        Ok(Header {
            order,
            big,
            first_ifd: order.u64(&bytes[8..16]),
        })
    } else {
        if bytes.len() < 8 {
            return Err("the TIFF header is truncated".into());
        }
        Ok(Header {
            order,
            big,
            first_ifd: order.u32(&bytes[4..8]) as u64,
        })
    }
}

/// One IFD entry with its value bytes (in the file's byte order).
#[derive(Clone, Debug)]
pub struct Entry {
    pub tag: u16,
    pub typ: u16,
    pub count: u64,
    pub data: Vec<u8>,
}

/// The entries of one IFD, with the byte order needed to decode them.
#[derive(Clone, Debug)]
pub struct Ifd {
    pub order: ByteOrder,
    pub entries: Vec<Entry>,
}

fn read_bytes(file: &File, file_len: u64, offset: u64, len: u64) -> Result<Vec<u8>, Problem> {
    let end = offset
        .checked_add(len)
        .ok_or_else(|| format!("a directory offset ({offset}) overflows"))?;
    if end > file_len {
        return Err(format!(
            "the file is truncated: it is {file_len} bytes long but its directory points to bytes {offset}..{end}"
        ));
    }
    let mut buf = vec![0u8; len as usize];
    read_exact_at(file, &mut buf, offset)
        .map_err(|e| format!("read failed at byte {offset}: {e}"))?;
    Ok(buf)
}

/// Read the IFD at `header.first_ifd` and every value it points to.
pub fn read_first_ifd(file: &File, file_len: u64, header: &Header) -> Result<Ifd, Problem> {
    let at = header.first_ifd;
    if at == 0 {
        return Err("the file holds no image (its first directory offset is 0)".into());
    }
    read_ifd_at(file, file_len, header, at).map(|(ifd, _)| ifd)
}

/// Read the IFD at file offset `at` and every value it points to; also returns the offset
/// of the next IFD (0 when it is the last).
pub fn read_ifd_at(
    file: &File,
    file_len: u64,
    header: &Header,
    at: u64,
) -> Result<(Ifd, u64), Problem> {
    let order = header.order;
    let (count_size, entry_size, value_size) = if header.big { (8, 20, 8) } else { (2, 12, 4) };
    let count_bytes = read_bytes(file, file_len, at, count_size)?;
    let n = if header.big {
        order.u64(&count_bytes)
    } else {
        order.u16(&count_bytes) as u64
    };
    if n == 0 || n > MAX_ENTRIES {
        return Err(format!(
            "the image directory has an implausible {n} entries"
        ));
    }
    let raw = read_bytes(
        file,
        file_len,
        at.saturating_add(count_size),
        n * entry_size,
    )?;
    let mut entries = Vec::with_capacity(n as usize);
    for e in raw.chunks_exact(entry_size as usize) {
        let tag = order.u16(&e[0..2]);
        let typ = order.u16(&e[2..4]);
        let count = if header.big {
            order.u64(&e[4..12])
        } else {
            order.u32(&e[4..8]) as u64
        };
        let value_field = if header.big { &e[12..20] } else { &e[8..12] };
        let Some(size) = type_size(typ) else {
            continue;
        };
        let total = count
            .checked_mul(size)
            .filter(|t| *t <= MAX_TAG_BYTES)
            .ok_or_else(|| format!("tag {tag} declares an implausible {count} values"))?;
        let data = if total <= value_size {
            value_field[..total as usize].to_vec()
        } else {
            let offset = if header.big {
                order.u64(value_field)
            } else {
                order.u32(value_field) as u64
            };
            read_bytes(file, file_len, offset, total).map_err(|p| format!("tag {tag}: {p}"))?
        };
        entries.push(Entry {
            tag,
            typ,
            count,
            data,
        });
    }
    let next_at = at.saturating_add(count_size).saturating_add(n * entry_size);
    let next_bytes = read_bytes(file, file_len, next_at, value_size)?;
    let next = if header.big {
        order.u64(&next_bytes)
    } else {
        order.u32(&next_bytes) as u64
    };
    Ok((Ifd { order, entries }, next))
}

impl Ifd {
    /// The entry for `tag`, if present.
    pub fn get(&self, tag: u16) -> Option<&Entry> {
        self.entries.iter().find(|e| e.tag == tag)
    }

    /// Integer values of `tag` (BYTE, SHORT, LONG, LONG8 and their signed forms).
    pub fn uints(&self, tag: u16) -> Result<Option<Vec<u64>>, Problem> {
        let Some(e) = self.get(tag) else {
            return Ok(None);
        };
        let o = self.order;
        let v: Vec<u64> = match e.typ {
            1 | 7 => e.data.iter().map(|b| *b as u64).collect(),
            6 => e.data.iter().map(|b| *b as i8 as i64 as u64).collect(),
            3 => e.data.chunks_exact(2).map(|b| o.u16(b) as u64).collect(),
            8 => e
                .data
                .chunks_exact(2)
                .map(|b| o.u16(b) as i16 as i64 as u64)
                .collect(),
            4 | 13 => e.data.chunks_exact(4).map(|b| o.u32(b) as u64).collect(),
            9 => e
                .data
                .chunks_exact(4)
                .map(|b| o.u32(b) as i32 as i64 as u64)
                .collect(),
            16..=18 => e.data.chunks_exact(8).map(|b| o.u64(b)).collect(),
            t => {
                return Err(format!(
                    "tag {tag} has field type {t} where integers were expected"
                ))
            }
        };
        Ok(Some(v))
    }

    /// The single integer value of `tag` (the first when several are stored).
    pub fn uint(&self, tag: u16) -> Result<Option<u64>, Problem> {
        Ok(self.uints(tag)?.and_then(|v| v.first().copied()))
    }

    /// Floating-point values of `tag` (DOUBLE or FLOAT; integers are converted).
    pub fn doubles(&self, tag: u16) -> Result<Option<Vec<f64>>, Problem> {
        let Some(e) = self.get(tag) else {
            return Ok(None);
        };
        let o = self.order;
        match e.typ {
            12 => Ok(Some(
                e.data
                    .chunks_exact(8)
                    .map(|b| f64::from_bits(o.u64(b)))
                    .collect(),
            )),
            11 => Ok(Some(
                e.data
                    .chunks_exact(4)
                    .map(|b| f32::from_bits(o.u32(b)) as f64)
                    .collect(),
            )),
            _ => Ok(self
                .uints(tag)?
                .map(|v| v.into_iter().map(|x| x as f64).collect())),
        }
    }

    /// Text of an ASCII tag, up to the first NUL.
    pub fn ascii(&self, tag: u16) -> Option<String> {
        let e = self.get(tag)?;
        let end = e.data.iter().position(|b| *b == 0).unwrap_or(e.data.len());
        Some(String::from_utf8_lossy(&e.data[..end]).into_owned())
    }
}

/// A value to write into an IFD (little-endian).
#[derive(Clone, Debug)]
pub enum OutValue {
    Short(Vec<u16>),
    Long(Vec<u32>),
    Long8(Vec<u64>),
    Double(Vec<f64>),
    Ascii(String),
}

impl OutValue {
    fn typ(&self) -> u16 {
        match self {
            OutValue::Short(_) => TYPE_SHORT,
            OutValue::Long(_) => TYPE_LONG,
            OutValue::Long8(_) => TYPE_LONG8,
            OutValue::Double(_) => TYPE_DOUBLE,
            OutValue::Ascii(_) => TYPE_ASCII,
        }
    }

    fn bytes(&self) -> (u64, Vec<u8>) {
        match self {
            OutValue::Short(v) => (
                v.len() as u64,
                v.iter().flat_map(|x| x.to_le_bytes()).collect(),
            ),
            OutValue::Long(v) => (
                v.len() as u64,
                v.iter().flat_map(|x| x.to_le_bytes()).collect(),
            ),
            OutValue::Long8(v) => (
                v.len() as u64,
                v.iter().flat_map(|x| x.to_le_bytes()).collect(),
            ),
            OutValue::Double(v) => (
                v.len() as u64,
                v.iter().flat_map(|x| x.to_le_bytes()).collect(),
            ),
            OutValue::Ascii(s) => {
                let mut b = s.as_bytes().to_vec();
                b.push(0);
                (b.len() as u64, b)
            }
        }
    }
}

/// Serialise one little-endian IFD placed at file offset `at` (even), followed by the
/// values that do not fit in their entries. Entries are sorted by tag (TIFF 6.0 §2).
/// Returns the bytes to write at `at`.
pub fn build_ifd(entries: Vec<(u16, OutValue)>, at: u64, big: bool) -> Vec<u8> {
    build_ifd_split(entries, at, big, 0, &[], 0).0
}

/// Like [`build_ifd`], with the offset of the next IFD (`next`, 0 for the last) and the
/// out-of-line values of the tags in `late` placed apart, at file offset `late_at` (even):
/// returns the IFD with its other values, and the late values (each starting on an even
/// offset). Cloud Optimized GeoTIFF files keep the tile offsets and byte counts of every
/// IFD after all the IFDs (OGC 21-026, recommendation "ifd-order").
pub fn build_ifd_split(
    mut entries: Vec<(u16, OutValue)>,
    at: u64,
    big: bool,
    next: u64,
    late: &[u16],
    late_at: u64,
) -> (Vec<u8>, Vec<u8>) {
    entries.sort_by_key(|(tag, _)| *tag);
    let mut late_bytes: Vec<u8> = Vec::new();
    let n = entries.len() as u64;
    let (count_size, entry_size, value_size, next_size) = if big {
        (8u64, 20u64, 8usize, 8u64)
    } else {
        (2, 12, 4, 4)
    };
    let mut out = Vec::new();
    let mut extra: Vec<u8> = Vec::new();
    let extra_start = at + count_size + n * entry_size + next_size;
    if big {
        out.extend_from_slice(&n.to_le_bytes());
    } else {
        out.extend_from_slice(&(n as u16).to_le_bytes());
    }
    for (tag, value) in &entries {
        let (count, bytes) = value.bytes();
        out.extend_from_slice(&tag.to_le_bytes());
        out.extend_from_slice(&value.typ().to_le_bytes());
        if big {
            out.extend_from_slice(&count.to_le_bytes());
        } else {
            out.extend_from_slice(&(count as u32).to_le_bytes());
        }
        if bytes.len() <= value_size {
            let mut field = bytes.clone();
            field.resize(value_size, 0);
            out.extend_from_slice(&field);
        } else if late.contains(tag) {
            if late_bytes.len() % 2 == 1 {
                late_bytes.push(0);
            }
            let offset = late_at + late_bytes.len() as u64;
            late_bytes.extend_from_slice(&bytes);
            if big {
                out.extend_from_slice(&offset.to_le_bytes());
            } else {
                out.extend_from_slice(&(offset as u32).to_le_bytes());
            }
        } else {
            if extra.len() % 2 == 1 {
                extra.push(0);
            }
            let offset = extra_start + extra.len() as u64;
            extra.extend_from_slice(&bytes);
            if big {
                out.extend_from_slice(&offset.to_le_bytes());
            } else {
                out.extend_from_slice(&(offset as u32).to_le_bytes());
            }
        }
    }
    if big {
        out.extend_from_slice(&next.to_le_bytes());
    } else {
        out.extend_from_slice(&(next as u32).to_le_bytes());
    }
    debug_assert_eq!(out.len() as u64, count_size + n * entry_size + next_size);
    out.extend_from_slice(&extra);
    (out, late_bytes)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn signatures() {
        // Byte patterns from TIFF 6.0 §2 (II*\0, MM\0*) and BigTIFF (version 43).
        assert_eq!(signature(b"II*\0"), Some((ByteOrder::Little, false)));
        assert_eq!(signature(b"MM\0*"), Some((ByteOrder::Big, false)));
        assert_eq!(signature(b"II+\0"), Some((ByteOrder::Little, true)));
        assert_eq!(signature(b"MM\0+"), Some((ByteOrder::Big, true)));
        assert_eq!(signature(b"\x89PNG"), None);
        assert_eq!(signature(b"II"), None);
    }

    #[test]
    fn ifd_round_trip_classic_and_big() {
        for big in [false, true] {
            let entries = vec![
                (IMAGE_LENGTH, OutValue::Long(vec![7])),
                (IMAGE_WIDTH, OutValue::Long(vec![300_000])),
                (BITS_PER_SAMPLE, OutValue::Short(vec![16, 16, 16])),
                (MODEL_PIXEL_SCALE, OutValue::Double(vec![0.5, 0.25, 0.0])),
                (GDAL_NODATA, OutValue::Ascii("-9999".into())),
                (TILE_OFFSETS, OutValue::Long8(vec![1 << 40, 3])),
            ];
            let at = if big { 16 } else { 8 };
            let ifd_bytes = build_ifd(entries, at, big);
            let mut file_bytes = if big {
                let mut h = b"II+\0\x08\0\0\0".to_vec();
                h.extend_from_slice(&16u64.to_le_bytes());
                h
            } else {
                b"II*\0\x08\0\0\0".to_vec()
            };
            file_bytes.extend_from_slice(&ifd_bytes);
            let tmp = tempfile::NamedTempFile::new().unwrap();
            std::fs::write(tmp.path(), &file_bytes).unwrap();
            let f = File::open(tmp.path()).unwrap();
            let header = parse_header(&file_bytes[..16]).unwrap();
            assert_eq!(header.big, big);
            let ifd = read_first_ifd(&f, file_bytes.len() as u64, &header).unwrap();
            assert_eq!(ifd.uint(IMAGE_WIDTH).unwrap(), Some(300_000));
            assert_eq!(ifd.uint(IMAGE_LENGTH).unwrap(), Some(7));
            assert_eq!(ifd.uints(BITS_PER_SAMPLE).unwrap(), Some(vec![16, 16, 16]));
            assert_eq!(
                ifd.doubles(MODEL_PIXEL_SCALE).unwrap(),
                Some(vec![0.5, 0.25, 0.0])
            );
            assert_eq!(ifd.ascii(GDAL_NODATA).as_deref(), Some("-9999"));
            assert_eq!(ifd.uints(TILE_OFFSETS).unwrap(), Some(vec![1 << 40, 3]));
            // Sorted by tag, as TIFF 6.0 §2 requires.
            let tags: Vec<u16> = ifd.entries.iter().map(|e| e.tag).collect();
            let mut sorted = tags.clone();
            sorted.sort();
            assert_eq!(tags, sorted);
        }
    }

    #[test]
    fn truncated_directory_is_a_problem_not_a_panic() {
        let mut bytes = b"II*\0\x08\0\0\0".to_vec();
        bytes.extend_from_slice(&5u16.to_le_bytes()); // 5 entries promised, none present
        let tmp = tempfile::NamedTempFile::new().unwrap();
        std::fs::write(tmp.path(), &bytes).unwrap();
        let f = File::open(tmp.path()).unwrap();
        let header = parse_header(&bytes).unwrap();
        let p = read_first_ifd(&f, bytes.len() as u64, &header).unwrap_err();
        assert!(p.contains("truncated"), "{p}");
    }
}

//! Moving byte ranges of files: between two files, inside one file, and making room at the
//! front of a file without moving its bytes (Linux `fallocate` with
//! `FALLOC_FL_INSERT_RANGE`, fallocate(2)). The Cloud Optimized writer uses them to turn its
//! spill file into the output (see [`IN_PLACE_ALIGN`]).

use std::fs::File;
use std::io::{Error, ErrorKind, Result};
use std::path::Path;
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};

use super::tags::{read_exact_at, write_all_at};

/// The room made at the front of a spill file is a multiple of this many bytes: 64 KiB,
/// a multiple of the block size of the usual Linux file systems (4 KiB on ext4 and XFS,
/// up to 64 KiB), as `FALLOC_FL_INSERT_RANGE` requires (fallocate(2)).
pub const IN_PLACE_ALIGN: u64 = 64 << 10;

/// Full-resolution tile data from which a Cloud Optimized file is finished in place: from
/// 16 MiB, the at most 64 KiB of alignment is under 0.4 % of the file. Smaller files are
/// copied (their layout has no alignment).
pub const IN_PLACE_MIN_BYTES: u64 = 16 << 20;

static IN_PLACE_ALLOWED: AtomicBool = AtomicBool::new(true);
static IN_PLACE_DONE: AtomicUsize = AtomicUsize::new(0);
static RESERVE_ALLOWED: AtomicBool = AtomicBool::new(true);
static RESERVE_DONE: AtomicUsize = AtomicUsize::new(0);

/// Allow or forbid [`insert_at_front`] in this process (tests compare both ways: the
/// bytes are the same, so the switch cannot change what any file holds).
pub fn set_in_place_allowed(allowed: bool) {
    IN_PLACE_ALLOWED.store(allowed, Ordering::SeqCst);
}

/// How many times [`insert_at_front`] has made room in this process.
pub fn in_place_count() -> usize {
    IN_PLACE_DONE.load(Ordering::SeqCst)
}

/// Insert `len` zero bytes (a hole) at the start of `file`, shifting its content without
/// copying it. `Ok(false)` when the system or the file system cannot (another OS, tmpfs,
/// ext4 without extents, a block size that does not divide `len`) or in-place finishing
/// is switched off: the caller then copies instead.
pub fn insert_at_front(file: &File, len: u64) -> Result<bool> {
    if !IN_PLACE_ALLOWED.load(Ordering::SeqCst) || len == 0 {
        return Ok(false);
    }
    let inserted = insert_range(file, len)?;
    if inserted {
        IN_PLACE_DONE.fetch_add(1, Ordering::SeqCst);
    }
    Ok(inserted)
}

/// Whether renaming another file over `path` leaves every name of the file as it was:
/// `path` is a regular file with no other hard link. A symbolic link would be replaced by
/// the file (instead of the file it points to being written), another hard link would
/// keep the old content.
pub fn replaceable_by_rename(path: &Path) -> Result<bool> {
    let meta = std::fs::symlink_metadata(path)?;
    #[cfg(unix)]
    {
        use std::os::unix::fs::MetadataExt;
        Ok(meta.file_type().is_file() && meta.nlink() == 1)
    }
    #[cfg(not(unix))]
    {
        Ok(meta.file_type().is_file())
    }
}

#[cfg(all(target_os = "linux", target_pointer_width = "64"))]
fn insert_range(file: &File, len: u64) -> Result<bool> {
    use std::os::fd::AsRawFd;
    let Ok(len) = libc::off_t::try_from(len) else {
        return Ok(false);
    };
    // SAFETY: fallocate reads no memory of ours; the descriptor is open for writing.
    let r = unsafe { libc::fallocate(file.as_raw_fd(), libc::FALLOC_FL_INSERT_RANGE, 0, len) };
    if r == 0 {
        return Ok(true);
    }
    let e = Error::last_os_error();
    match e.raw_os_error() {
        Some(libc::EOPNOTSUPP | libc::EINVAL | libc::ENOSYS | libc::ENODEV) => Ok(false),
        _ => Err(e),
    }
}

#[cfg(not(all(target_os = "linux", target_pointer_width = "64")))]
fn insert_range(_file: &File, _len: u64) -> Result<bool> {
    Ok(false)
}

/// Allocate the first `len` bytes of `file` on disk ahead of writing them (fallocate(2),
/// mode 0: the file grows to at least `len` bytes, the new bytes read as zeros); true when
/// done. Writes into allocated space skip the file system's per-page reservation: on ext4,
/// writing an uncompressed 4096² float32 GeoTIFF (64 MiB) into the page cache took less than
/// half the time (`scripts/bench_io.py`). Advice only: where the system cannot (another OS,
/// a file system without fallocate, a disk without that much room) nothing happens, and a
/// write that really lacks room fails as it would have. The caller sets the final length.
pub fn reserve(file: &File, len: u64) -> bool {
    if !RESERVE_ALLOWED.load(Ordering::SeqCst) || !reserve_space(file, len) {
        return false;
    }
    RESERVE_DONE.fetch_add(1, Ordering::SeqCst);
    true
}

/// Allow or forbid [`reserve`] in this process (tests compare both ways: a reservation
/// cannot change what a finished file holds).
pub fn set_reserve_allowed(allowed: bool) {
    RESERVE_ALLOWED.store(allowed, Ordering::SeqCst);
}

/// How many times [`reserve`] has allocated space in this process.
pub fn reserve_count() -> usize {
    RESERVE_DONE.load(Ordering::SeqCst)
}

#[cfg(all(target_os = "linux", target_pointer_width = "64"))]
fn reserve_space(file: &File, len: u64) -> bool {
    use std::os::fd::AsRawFd;
    let Ok(len) = libc::off_t::try_from(len) else {
        return false;
    };
    // SAFETY: fallocate reads no memory of ours; the descriptor is open for writing.
    len > 0 && unsafe { libc::fallocate(file.as_raw_fd(), 0, 0, len) } == 0
}

#[cfg(not(all(target_os = "linux", target_pointer_width = "64")))]
fn reserve_space(_file: &File, _len: u64) -> bool {
    false
}

/// Copy `len` bytes at `from` in `src` to `to` in `dst` (in the kernel where the system
/// can: `std::io::copy` between files).
pub fn copy_range(src: &File, from: u64, len: u64, dst: &File, to: u64) -> Result<()> {
    use std::io::{Read, Seek, SeekFrom};
    let mut s = src;
    s.seek(SeekFrom::Start(from))?;
    let mut d = dst;
    d.seek(SeekFrom::Start(to))?;
    let copied = std::io::copy(&mut s.take(len), &mut d)?;
    if copied != len {
        return Err(short(copied, len));
    }
    Ok(())
}

/// Copy `len` bytes at `from` to `to` inside `file`; the two ranges must not overlap.
pub fn copy_within(file: &File, from: u64, len: u64, to: u64) -> Result<()> {
    debug_assert!(from + len <= to || to + len <= from, "overlapping ranges");
    let mut buf = vec![0u8; (len.min(4 << 20)) as usize];
    let mut done = 0u64;
    while done < len {
        let n = (len - done).min(buf.len() as u64) as usize;
        read_exact_at(file, &mut buf[..n], from + done).map_err(|e| match e.kind() {
            ErrorKind::UnexpectedEof => short(done, len),
            _ => e,
        })?;
        write_all_at(file, &buf[..n], to + done)?;
        done += n as u64;
    }
    Ok(())
}

fn short(copied: u64, len: u64) -> Error {
    Error::new(
        ErrorKind::UnexpectedEof,
        format!("the spill file ended after {copied} of {len} bytes"),
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A new empty file at `path`, open for reading and writing.
    fn scratch(path: &Path) -> File {
        std::fs::OpenOptions::new()
            .read(true)
            .write(true)
            .create(true)
            .truncate(true)
            .open(path)
            .unwrap()
    }

    #[test]
    fn copy_within_moves_bytes_forward_and_back() {
        let dir = tempfile::tempdir().unwrap();
        let f = scratch(&dir.path().join("f"));
        let bytes: Vec<u8> = (0..100u8).collect();
        write_all_at(&f, &bytes, 0).unwrap();
        copy_within(&f, 80, 20, 0).unwrap();
        copy_within(&f, 20, 10, 60).unwrap();
        let mut back = vec![0u8; 100];
        read_exact_at(&f, &mut back, 0).unwrap();
        assert_eq!(&back[..20], &bytes[80..]);
        assert_eq!(&back[60..70], &bytes[20..30]);
        assert_eq!(&back[20..60], &bytes[20..60]);
        let err = copy_within(&f, 90, 20, 0).unwrap_err();
        assert_eq!(err.kind(), ErrorKind::UnexpectedEof);
    }

    #[test]
    fn insert_at_front_shifts_content_or_declines() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("f");
        let f = scratch(&path);
        let bytes: Vec<u8> = (0..3 * IN_PLACE_ALIGN).map(|i| (i % 251) as u8).collect();
        write_all_at(&f, &bytes, 0).unwrap();
        let inserted = insert_at_front(&f, IN_PLACE_ALIGN).unwrap();
        let back = std::fs::read(&path).unwrap();
        if inserted {
            assert_eq!(back.len() as u64, 4 * IN_PLACE_ALIGN);
            assert!(back[..IN_PLACE_ALIGN as usize].iter().all(|&b| b == 0));
            assert_eq!(&back[IN_PLACE_ALIGN as usize..], &bytes[..]);
        } else {
            assert_eq!(back, bytes, "a declined insert leaves the file alone");
        }
    }
}

//! How the C allocator (glibc's malloc, which Rust programs use by default on Linux) keeps
//! freed memory. A build allocates and frees tile-sized buffers (a few MiB) thousands of
//! times; with glibc's defaults each one can be mapped, zeroed by the kernel and unmapped
//! again, a tenth of a one-thread build's time spent in page faults. Keeping freed memory
//! for reuse, within the `--memory` budget, avoids that; results do not change. The
//! `build` and `batch` commands call [`keep_freed_memory`] once their options are parsed;
//! a program using the library can do the same before it starts its work.
//!
//! Large arrays whose memory the kernel has not handed out yet (a whole-raster read) can
//! be backed by 2 MiB pages instead of 4 KiB ones ([`prefer_huge_pages`]): one page fault
//! where there were 512. numpy does the same for its large arrays on Linux (numpy
//! documentation, "Global state: madvise hugepage on Linux").

/// Let each allocator arena keep up to a share of `memory_bytes` free for reuse: the
/// budget spread over `threads` arenas and four times over, between 4 and 64 MiB
/// (`M_TRIM_THRESHOLD`), and serve blocks up to that size from the arenas instead of
/// fresh mappings (`M_MMAP_THRESHOLD`, at most 32 MiB). mallopt(3).
pub fn keep_freed_memory(memory_bytes: u64, threads: usize) {
    let share = memory_bytes / (4 * threads.max(1) as u64);
    let trim = share.clamp(4 << 20, 64 << 20);
    set(trim, trim.min(32 << 20));
}

/// The threads a command runs when `--threads` is not given: one per core.
pub fn threads_or_cores(threads: Option<usize>) -> usize {
    threads.unwrap_or_else(|| std::thread::available_parallelism().map_or(1, |n| n.get()))
}

/// Smallest buffer [`prefer_huge_pages`] advises: two huge pages, so that at least one
/// lies wholly inside a buffer of any alignment.
pub const HUGE_PAGE_MIN_BYTES: usize = 4 << 20;

/// Ask the kernel to back the 2 MiB-aligned part of `buf` with transparent huge pages
/// (madvise(2) `MADV_HUGEPAGE`), when `buf` holds at least [`HUGE_PAGE_MIN_BYTES`].
/// Advice only: contents never change; pages not yet touched are then faulted in 2 MiB at
/// a time, where the system's setting
/// (`/sys/kernel/mm/transparent_hugepage/enabled`, "madvise" or "always") allows it. A
/// refusal is ignored. Does nothing off Linux.
pub fn prefer_huge_pages<T>(buf: &mut [T]) {
    let bytes = std::mem::size_of_val(buf);
    if bytes < HUGE_PAGE_MIN_BYTES {
        return;
    }
    advise_huge(buf.as_mut_ptr() as usize, bytes);
}

#[cfg(target_os = "linux")]
fn advise_huge(start: usize, bytes: usize) {
    const HUGE: usize = 2 << 20;
    let first = start.next_multiple_of(HUGE);
    let end = (start + bytes) / HUGE * HUGE;
    if end > first {
        // SAFETY: the range lies inside a buffer the caller holds exclusively, and
        // MADV_HUGEPAGE changes how its pages are backed, never their contents.
        unsafe {
            libc::madvise(first as *mut libc::c_void, end - first, libc::MADV_HUGEPAGE);
        }
    }
}

#[cfg(not(target_os = "linux"))]
fn advise_huge(_start: usize, _bytes: usize) {}

#[cfg(all(target_os = "linux", target_env = "gnu"))]
fn set(trim: u64, mmap: u64) {
    // SAFETY: mallopt only changes two of the allocator's thresholds; it is called before
    // the command starts its worker threads. A refused value leaves glibc's default.
    unsafe {
        libc::mallopt(libc::M_TRIM_THRESHOLD, trim as libc::c_int);
        libc::mallopt(libc::M_MMAP_THRESHOLD, mmap as libc::c_int);
    }
}

#[cfg(not(all(target_os = "linux", target_env = "gnu")))]
fn set(_trim: u64, _mmap: u64) {}

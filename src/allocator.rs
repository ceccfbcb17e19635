//! How the C allocator (glibc's malloc, which Rust programs use by default on Linux) keeps
//! freed memory. A build allocates and frees tile-sized buffers (a few MiB) thousands of
//! times; with glibc's defaults each one can be mapped, zeroed by the kernel and unmapped
//! again, a tenth of a one-thread build's time spent in page faults. Keeping freed memory
//! for reuse, within the `--memory` budget, avoids that; results do not change. The
//! `build` and `batch` commands call [`keep_freed_memory`] once their options are parsed;
//! a program using the library can do the same before it starts its work.

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

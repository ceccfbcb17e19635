//! Fuzz target for the GeoTIFF reader: any bytes, written to a temporary file, must open
//! or fail with an error, and every window of what opens must read or fail with an
//! error, never panic or allocate without bound.
//!
//! Run with `cargo +nightly fuzz run reader fuzz/corpus/reader` from the repository root.

#![no_main]

use std::io::Write;

use libfuzzer_sys::fuzz_target;
use terrastack::raster::geotiff::GeoTiffReader;
use terrastack::raster::RasterSource;
use terrastack::Window;

/// Window side in cells; windows overlap the raster's edges by one cell.
const STEP: usize = 64;
/// Most windows read per input, so that a header declaring a huge raster stays quick.
const MAX_WINDOWS: usize = 256;

fuzz_target!(|data: &[u8]| {
    let Ok(mut file) = tempfile::NamedTempFile::new() else {
        return;
    };
    if file.write_all(data).and_then(|_| file.flush()).is_err() {
        return;
    }
    let Ok(reader) = GeoTiffReader::open(file.path()) else {
        return;
    };
    let grid = reader.grid().clone();
    let mut budget = MAX_WINDOWS;
    for band in 1..=reader.band_count() {
        let _ = reader.band_info(band);
        for row in (0..grid.height).step_by(STEP) {
            for col in (0..grid.width).step_by(STEP) {
                if budget == 0 {
                    return;
                }
                budget -= 1;
                let window = Window::new(col as i64 - 1, row as i64 - 1, STEP + 2, STEP + 2);
                if let Ok(block) = reader.read_window(band, window) {
                    assert_eq!(block.dim(), (STEP + 2, STEP + 2));
                }
            }
        }
    }
});

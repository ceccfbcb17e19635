//! The one ordered tile writer: blocks of a raster are computed and compressed in
//! parallel, a wave at a time, and their tiles appended to the GeoTIFF in block order.
//!
//! A wave holds at most `wave` blocks, so no more than that many blocks (their arrays and
//! compressed tiles) are in memory at once: the caller sizes the wave from its memory
//! budget and thread count. Within a block, tiles are appended band by band in band order,
//! each band's tiles row by row, whatever order the caller encoded them in. The file's
//! bytes therefore depend only on the blocks and their values, never on which thread
//! finished first: the determinism the executor and the multi-temporal stack promise.
//!
//! Built on the writer's public API only ([`GeoTiffWriter::encode_block`] and
//! [`GeoTiffWriter::write_encoded`]), so a change of the file layout below it leaves
//! this loop alone.

use ndarray::{s, ArrayView2};
use rayon::prelude::*;

use crate::error::Result;
use crate::grid::Window;
use crate::raster::geotiff::{EncodedBlock, GeoTiffWriter};

/// The encoded tiles of one block, collected while the block is computed.
pub struct BlockTiles<'w> {
    writer: &'w GeoTiffWriter,
    window: Window,
    /// (band, encoded tile), in the order encoded.
    tiles: Vec<(usize, EncodedBlock)>,
}

impl BlockTiles<'_> {
    /// The block being computed.
    pub fn window(&self) -> Window {
        self.window
    }

    /// Compress band `band` (1-based) of the block: `data` covers the whole block and is
    /// cut into the writer's tiles. The block must start on a tile boundary.
    pub fn encode(&mut self, band: usize, data: ArrayView2<f32>) -> Result<()> {
        let (bw, bh) = self.writer.block_size();
        let (rows, cols) = data.dim();
        for r0 in (0..rows).step_by(bh) {
            for c0 in (0..cols).step_by(bw) {
                let view = data.slice(s![r0..(r0 + bh).min(rows), c0..(c0 + bw).min(cols)]);
                let tile_col = (self.window.col as usize + c0) / bw;
                let tile_row = (self.window.row as usize + r0) / bh;
                let encoded = self.writer.encode_block(band, tile_col, tile_row, view)?;
                self.tiles.push((band, encoded));
            }
        }
        Ok(())
    }
}

/// Waves of blocks written in order through one writer.
pub struct OrderedTiles<'a> {
    writer: &'a GeoTiffWriter,
    blocks: &'a [Window],
    wave: usize,
    next: usize,
}

impl<'a> OrderedTiles<'a> {
    /// Write `blocks` (in this order) through `writer`, at most `wave` blocks at a time.
    pub fn new(writer: &'a GeoTiffWriter, blocks: &'a [Window], wave: usize) -> OrderedTiles<'a> {
        OrderedTiles {
            writer,
            blocks,
            wave: wave.max(1),
            next: 0,
        }
    }

    /// Blocks written so far.
    pub fn done(&self) -> usize {
        self.next
    }

    /// Compute the next wave with `compute` (on the current rayon pool, one block per
    /// task), append every block's tiles in block order, and return what `compute`
    /// returned for each block, in block order; `None` once every block is written.
    ///
    /// The first failing block, in block order, stops the wave: the blocks before it are
    /// appended, and its error is returned.
    pub fn next_wave<T, F>(&mut self, compute: F) -> Result<Option<Vec<T>>>
    where
        T: Send,
        F: Fn(Window, &mut BlockTiles<'a>) -> Result<T> + Sync,
    {
        if self.next >= self.blocks.len() {
            return Ok(None);
        }
        let end = (self.next + self.wave).min(self.blocks.len());
        let writer = self.writer;
        let results: Vec<Result<(T, BlockTiles<'a>)>> = self.blocks[self.next..end]
            .par_iter()
            .map(|w| {
                let mut tiles = BlockTiles {
                    writer,
                    window: *w,
                    tiles: Vec::new(),
                };
                let value = compute(*w, &mut tiles)?;
                Ok((value, tiles))
            })
            .collect();
        self.next = end;
        let mut values = Vec::with_capacity(results.len());
        for r in results {
            let (value, mut tiles) = r?;
            // Stable: a band's tiles keep their row-major order.
            tiles.tiles.sort_by_key(|(band, _)| *band);
            for (_, encoded) in tiles.tiles {
                self.writer.write_encoded(encoded)?;
            }
            values.push(value);
        }
        Ok(Some(values))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::grid::{Crs, Grid};
    use crate::raster::geotiff::{Layout, WriteOptions};
    use ndarray::Array2;

    /// A writer of `bands` bands on a UTM grid of 1 m cells, in 16-cell tiles.
    fn tiled_writer(
        path: &std::path::Path,
        width: usize,
        height: usize,
        bands: usize,
    ) -> (Grid, GeoTiffWriter) {
        let grid = Grid::new(
            width,
            height,
            [500_000.0, 1.0, 0.0, 5_000_000.0, 0.0, -1.0],
            Crs::from_epsg(32633),
        )
        .unwrap();
        let options = WriteOptions {
            layout: Layout::Tiled { size: 16 },
            ..WriteOptions::default()
        };
        let writer = GeoTiffWriter::create(path, &grid, bands, options).unwrap();
        (grid, writer)
    }

    /// A 3-band raster written through the sink with `wave` blocks at a time on a pool of
    /// `threads`, encoding bands in reverse order; returns the file's bytes.
    fn write(dir: &std::path::Path, wave: usize, threads: usize, block: usize) -> Vec<u8> {
        let path = dir.join(format!("t{wave}_{threads}_{block}.tif"));
        let (grid, writer) = tiled_writer(&path, 70, 45, 3);
        let mut blocks = Vec::new();
        for row in (0..grid.height).step_by(block) {
            for col in (0..grid.width).step_by(block) {
                blocks.push(Window::new(
                    col as i64,
                    row as i64,
                    block.min(grid.width - col),
                    block.min(grid.height - row),
                ));
            }
        }
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap();
        pool.install(|| {
            let mut sink = OrderedTiles::new(&writer, &blocks, wave);
            let mut seen = Vec::new();
            while let Some(values) = sink
                .next_wave(|w, tiles| {
                    for band in (1..=3).rev() {
                        let data = Array2::from_shape_fn((w.height, w.width), |(r, c)| {
                            ((w.row as usize + r) * 1000 + w.col as usize + c) as f32
                                + band as f32 * 0.25
                        });
                        tiles.encode(band, data.view())?;
                    }
                    Ok(w)
                })
                .unwrap()
            {
                seen.extend(values);
            }
            assert_eq!(seen, blocks, "values come back in block order");
            assert_eq!(sink.done(), blocks.len());
        });
        writer.finish().unwrap();
        let back = crate::raster::open(&path).unwrap();
        for band in 1..=3 {
            let a = back.read_window(band, Window::full(back.grid())).unwrap();
            assert_eq!(a[[44, 69]], (44 * 1000 + 69) as f32 + band as f32 * 0.25);
        }
        std::fs::read(&path).unwrap()
    }

    #[test]
    fn bytes_do_not_depend_on_wave_or_threads() {
        let dir = tempfile::tempdir().unwrap();
        let one = write(dir.path(), 1, 1, 32);
        assert_eq!(one, write(dir.path(), 3, 2, 32));
        assert_eq!(one, write(dir.path(), 100, 4, 32));
    }

    #[test]
    fn a_failing_block_stops_the_wave_with_its_error() {
        let dir = tempfile::tempdir().unwrap();
        let (_, writer) = tiled_writer(&dir.path().join("f.tif"), 32, 16, 1);
        let blocks = [Window::new(0, 0, 16, 16), Window::new(16, 0, 16, 16)];
        let mut sink = OrderedTiles::new(&writer, &blocks, 2);
        let e = sink
            .next_wave(|w, tiles| {
                if w.col == 16 {
                    return Err(crate::error::Error::usage("block two fails"));
                }
                tiles.encode(1, Array2::<f32>::zeros((16, 16)).view())
            })
            .unwrap_err();
        assert!(e.to_string().contains("block two fails"), "{e}");
    }
}

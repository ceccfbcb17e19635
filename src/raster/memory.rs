//! An in-memory raster: layers computed on the fly, tests and benchmarks.

use std::path::{Path, PathBuf};

use ndarray::Array2;

use super::{check_band, BandInfo, RasterSource, SampleType};
use crate::error::{Error, Result};
use crate::grid::{Grid, Window};

/// A raster held in memory: layers computed on the fly, tests and benchmarks. Reads
/// follow [`RasterSource`]: the grid's nodata value and cells outside the raster are NaN.
#[derive(Clone, Debug)]
pub struct MemoryRaster {
    path: PathBuf,
    grid: Grid,
    bands: Vec<Array2<f32>>,
}

impl MemoryRaster {
    /// A raster called `name` (used in messages as its path) with `bands`, each shaped
    /// (grid.height, grid.width).
    pub fn new(
        name: impl Into<PathBuf>,
        grid: Grid,
        bands: Vec<Array2<f32>>,
    ) -> Result<MemoryRaster> {
        let path = name.into();
        if bands.is_empty() {
            return Err(Error::file(
                &path,
                "an in-memory raster needs at least one band",
            ));
        }
        for (i, b) in bands.iter().enumerate() {
            if b.dim() != (grid.height, grid.width) {
                return Err(Error::file(
                    &path,
                    format!(
                        "band {} is {} x {} cells but the grid is {} x {}",
                        i + 1,
                        b.ncols(),
                        b.nrows(),
                        grid.width,
                        grid.height
                    ),
                ));
            }
        }
        Ok(MemoryRaster { path, grid, bands })
    }
}

impl RasterSource for MemoryRaster {
    fn path(&self) -> &Path {
        &self.path
    }

    fn grid(&self) -> &Grid {
        &self.grid
    }

    fn band_count(&self) -> usize {
        self.bands.len()
    }

    fn band_info(&self, _band: usize) -> BandInfo {
        BandInfo {
            description: None,
            sample_type: SampleType::F32,
            nodata: self.grid.nodata,
        }
    }

    fn read_window(&self, band: usize, window: Window) -> Result<Array2<f32>> {
        check_band(self, band)?;
        let data = &self.bands[band - 1];
        let nodata = self.grid.nodata.map(|v| v as f32);
        let mut out = Array2::from_elem((window.height, window.width), f32::NAN);
        if let Some(inside) = window.intersect(&Window::full(&self.grid)) {
            for r in 0..inside.height {
                let sr = inside.row as usize + r;
                let orow = (inside.row - window.row) as usize + r;
                for c in 0..inside.width {
                    let sc = inside.col as usize + c;
                    let v = data[[sr, sc]];
                    out[[orow, (inside.col - window.col) as usize + c]] =
                        if Some(v) == nodata { f32::NAN } else { v };
                }
            }
        }
        Ok(out)
    }
}

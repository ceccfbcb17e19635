//! The stack's JSON sidecar (`stack.json`, format `terrastack-stack/1`) and per-band
//! statistics.
//!
//! The layout is the contract of docs/design.md ("The stack"): other tools read it, so fields
//! are only ever added. Statistics are exact (every valid cell, no sampling) and
//! deterministic: each block keeps its own partial sums, and partials are merged in block
//! order, never in the order threads finish.

use std::path::Path;

use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};
use crate::grid::{Crs, Grid};

/// The `format` value of this version of the sidecar.
pub const STACK_FORMAT: &str = "terrastack-stack/1";

/// `stack.json`.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct StackMetadata {
    pub format: String,
    pub grid: GridMetadata,
    /// Always "NaN": every band stores nodata as NaN.
    pub nodata: String,
    pub bands: Vec<BandMetadata>,
    pub sources: Vec<SourceMetadata>,
    /// The resolved recipe the stack was built from.
    pub parameters: serde_json::Value,
    pub software: SoftwareMetadata,
}

impl StackMetadata {
    /// Write the sidecar's text (pretty-printed JSON and a final newline) to `path`, the
    /// temporary path of `stack.json` in an output folder (`stack::output::OutputDir`).
    pub fn write_to(&self, path: &Path) -> Result<()> {
        let text = serde_json::to_string_pretty(self).expect("stack metadata serialises");
        std::fs::write(path, text + "\n").map_err(|e| Error::io(path, e))
    }
}

/// Size, transform (GDAL order) and CRS of the stack.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct GridMetadata {
    pub width: usize,
    pub height: usize,
    pub transform: [f64; 6],
    pub crs: CrsMetadata,
}

/// The stack's CRS: EPSG code and WKT, each null when unknown.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct CrsMetadata {
    pub epsg: Option<u32>,
    pub wkt: Option<String>,
}

impl GridMetadata {
    pub fn from_grid(grid: &Grid) -> GridMetadata {
        GridMetadata {
            width: grid.width,
            height: grid.height,
            transform: grid.transform,
            crs: CrsMetadata::from_crs(&grid.crs),
        }
    }
}

impl CrsMetadata {
    pub fn from_crs(crs: &Crs) -> CrsMetadata {
        CrsMetadata {
            epsg: crs.epsg,
            wkt: crs.wkt.clone(),
        }
    }
}

/// One band of the stack.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct BandMetadata {
    /// 1-based band number in `stack.tif`.
    pub index: usize,
    /// Band name, also the band description in `stack.tif`.
    pub name: String,
    /// One of docs/design.md's feature keys (slope, tpi, ndvi, reflectance, expression, …).
    pub feature: String,
    /// Estimator or variant ("horn", "disc", …); null when there is only one.
    pub method: Option<String>,
    /// Window radius in metres for windowed features.
    pub scale_m: Option<f64>,
    /// Window size in cells (2·radius + 1) on the stack's grid.
    pub window_px: Option<usize>,
    /// "degrees", "metres", "1/m" or "unitless".
    pub units: String,
    /// "dsm", or the band role(s) of the orthomosaic it comes from.
    pub source: String,
    /// ISO 8601 date of the flight (multi-temporal stacks), else null.
    pub date: Option<String>,
    pub stats: BandStats,
    /// Fields for spectral bands and other producers: role, source file, reflectance
    /// scale and offset, resampling, expression text; the plausibility records
    /// `outside_valid_range` (index bands) and `outside_plausible_range` (reflectance and
    /// elevation bands), see `stack::plausibility`.
    #[serde(flatten)]
    pub extra: serde_json::Map<String, serde_json::Value>,
}

/// One input file.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct SourceMetadata {
    /// "dsm", "ortho", or a band role for one-file-per-band inputs.
    pub role: String,
    pub path: String,
    /// Hex SHA-256 of the file's bytes.
    pub sha256: String,
}

/// Name and version of the program that wrote the stack.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct SoftwareMetadata {
    pub name: String,
    pub version: String,
}

impl Default for SoftwareMetadata {
    fn default() -> Self {
        SoftwareMetadata {
            name: "terrastack".into(),
            version: env!("CARGO_PKG_VERSION").into(),
        }
    }
}

/// Statistics of a band's valid (non-NaN) cells. All null when no cell is valid (also the
/// default, before a band is computed).
#[derive(Clone, Debug, Default, Serialize, Deserialize, PartialEq)]
pub struct BandStats {
    pub min: Option<f64>,
    pub max: Option<f64>,
    pub mean: Option<f64>,
    /// Population standard deviation.
    pub std: Option<f64>,
    /// Valid cells / all cells of the grid.
    pub valid_fraction: f64,
}

/// Values summarised at a time by [`StatsAccumulator::from_values`] before they are merged.
pub const STATS_CHUNK: usize = 4096;

/// Partial statistics of one block: count, min, max, mean and the sum of squared
/// deviations from the mean (two passes per chunk of [`STATS_CHUNK`] values), merged
/// pairwise by Chan, Golub & LeVeque 1979 ("Updating formulae and a pairwise algorithm for
/// computing sample variances").
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct StatsAccumulator {
    pub count: u64,
    pub min: f64,
    pub max: f64,
    pub mean: f64,
    pub m2: f64,
}

impl Default for StatsAccumulator {
    fn default() -> Self {
        StatsAccumulator {
            count: 0,
            min: f64::INFINITY,
            max: f64::NEG_INFINITY,
            mean: 0.0,
            m2: 0.0,
        }
    }
}

impl StatsAccumulator {
    /// Statistics of the non-NaN values in `values`: chunks of [`STATS_CHUNK`] values, each
    /// summarised in two passes (count, sum, min and max, then the squared deviations from
    /// the chunk's mean) over eight interleaved partial sums that the compiler can keep in
    /// vector registers, merged in order by [`Self::merge`] (Chan, Golub & LeVeque 1979).
    /// The same values in the same order always give the same bits.
    pub fn from_values(values: &[f32]) -> StatsAccumulator {
        let mut acc = StatsAccumulator::default();
        for chunk in values.chunks(STATS_CHUNK) {
            acc.merge(&StatsAccumulator::of_chunk(chunk));
        }
        acc
    }

    /// [`Self::from_values`] of an array's cells, in memory order.
    pub fn from_array<S, D>(values: &ndarray::ArrayBase<S, D>) -> StatsAccumulator
    where
        S: ndarray::Data<Elem = f32>,
        D: ndarray::Dimension,
    {
        match values.as_slice_memory_order() {
            Some(cells) => StatsAccumulator::from_values(cells),
            None => StatsAccumulator::from_values(&values.iter().copied().collect::<Vec<f32>>()),
        }
    }

    /// One chunk, two passes; NaN cells are left out of every sum (a NaN compares false,
    /// so it never becomes the minimum or the maximum).
    fn of_chunk(chunk: &[f32]) -> StatsAccumulator {
        const LANES: usize = 8;
        let mut count = [0u32; LANES];
        let mut sum = [0.0f64; LANES];
        let mut lo = [f32::INFINITY; LANES];
        let mut hi = [f32::NEG_INFINITY; LANES];
        let mut lane = |l: usize, v: f32| {
            let valid = !v.is_nan();
            count[l] += valid as u32;
            sum[l] += if valid { v as f64 } else { 0.0 };
            lo[l] = if v < lo[l] { v } else { lo[l] };
            hi[l] = if v > hi[l] { v } else { hi[l] };
        };
        let groups = chunk.chunks_exact(LANES);
        let rest = groups.remainder();
        for g in groups {
            for (l, &v) in g.iter().enumerate() {
                lane(l, v);
            }
        }
        for (l, &v) in rest.iter().enumerate() {
            lane(l, v);
        }
        let n: u64 = count.iter().map(|&c| c as u64).sum();
        if n == 0 {
            return StatsAccumulator::default();
        }
        let mean = sum.iter().sum::<f64>() / n as f64;
        let mut m2 = [0.0f64; LANES];
        let groups = chunk.chunks_exact(LANES);
        let rest = groups.remainder();
        for g in groups {
            for (l, &v) in g.iter().enumerate() {
                let d = v as f64 - mean;
                m2[l] += if v.is_nan() { 0.0 } else { d * d };
            }
        }
        for (l, &v) in rest.iter().enumerate() {
            let d = v as f64 - mean;
            m2[l] += if v.is_nan() { 0.0 } else { d * d };
        }
        StatsAccumulator {
            count: n,
            min: lo.iter().copied().fold(f32::INFINITY, f32::min) as f64,
            max: hi.iter().copied().fold(f32::NEG_INFINITY, f32::max) as f64,
            mean,
            m2: m2.iter().sum(),
        }
    }

    /// Merge `other` into `self` (Chan et al. 1979). Merging the same partials in the same
    /// order always gives the same bits.
    pub fn merge(&mut self, other: &StatsAccumulator) {
        if other.count == 0 {
            return;
        }
        if self.count == 0 {
            *self = *other;
            return;
        }
        let n = (self.count + other.count) as f64;
        let delta = other.mean - self.mean;
        let (na, nb) = (self.count as f64, other.count as f64);
        self.mean += delta * nb / n;
        self.m2 += other.m2 + delta * delta * na * nb / n;
        self.count += other.count;
        self.min = self.min.min(other.min);
        self.max = self.max.max(other.max);
    }

    /// Final statistics for a grid of `total_cells` cells.
    pub fn finish(&self, total_cells: u64) -> BandStats {
        let valid_fraction = if total_cells == 0 {
            0.0
        } else {
            self.count as f64 / total_cells as f64
        };
        if self.count == 0 {
            return BandStats {
                min: None,
                max: None,
                mean: None,
                std: None,
                valid_fraction,
            };
        }
        BandStats {
            min: Some(self.min),
            max: Some(self.max),
            mean: Some(self.mean),
            std: Some((self.m2 / self.count as f64).max(0.0).sqrt()),
            valid_fraction,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    #[test]
    fn stats_of_known_values() {
        // 2, 4, 4, 4, 5, 5, 7, 9: mean 5, population std 2 (textbook example, common practice).
        let v = [
            2.0f32,
            4.0,
            4.0,
            4.0,
            5.0,
            5.0,
            7.0,
            9.0,
            f32::NAN,
            f32::NAN,
        ];
        let s = StatsAccumulator::from_values(&v).finish(10);
        assert_eq!(s.min, Some(2.0));
        assert_eq!(s.max, Some(9.0));
        assert_relative_eq!(s.mean.unwrap(), 5.0, epsilon = 1e-12);
        assert_relative_eq!(s.std.unwrap(), 2.0, epsilon = 1e-12);
        assert_relative_eq!(s.valid_fraction, 0.8);
    }

    #[test]
    fn merged_partials_equal_one_pass() {
        let v: Vec<f32> = (0..1000)
            .map(|i| ((i * 37) % 101) as f32 * 0.25 + 1000.0)
            .collect();
        let whole = StatsAccumulator::from_values(&v).finish(1000);
        let mut acc = StatsAccumulator::default();
        for chunk in v.chunks(77) {
            acc.merge(&StatsAccumulator::from_values(chunk));
        }
        let merged = acc.finish(1000);
        assert_relative_eq!(merged.mean.unwrap(), whole.mean.unwrap(), epsilon = 1e-9);
        assert_relative_eq!(merged.std.unwrap(), whole.std.unwrap(), epsilon = 1e-9);
        assert_eq!(merged.min, whole.min);
    }

    #[test]
    fn integers_across_chunks_match_closed_form() {
        // 0, 1, ..., n − 1: mean (n − 1)/2, population variance (n² − 1)/12 (closed form);
        // NaNs in between, past several chunks and not a multiple of the lanes.
        let n = 3 * STATS_CHUNK + 123;
        let mut v = Vec::new();
        for i in 0..n {
            v.push(i as f32);
            if i % 5 == 0 {
                v.push(f32::NAN);
            }
        }
        let s = StatsAccumulator::from_values(&v).finish(v.len() as u64);
        let nf = n as f64;
        assert_eq!(s.min, Some(0.0));
        assert_eq!(s.max, Some(nf - 1.0));
        assert_relative_eq!(s.mean.unwrap(), (nf - 1.0) / 2.0, max_relative = 1e-14);
        assert_relative_eq!(
            s.std.unwrap(),
            ((nf * nf - 1.0) / 12.0).sqrt(),
            max_relative = 1e-12
        );
        let array = ndarray::Array2::from_shape_vec((1, v.len()), v.clone()).unwrap();
        assert_eq!(
            StatsAccumulator::from_array(&array),
            StatsAccumulator::from_values(&v)
        );
        let transposed = array.t().to_owned();
        assert_eq!(
            StatsAccumulator::from_array(&transposed.t()),
            StatsAccumulator::from_values(&v)
        );
    }

    #[test]
    fn all_nodata_gives_nulls() {
        let s = StatsAccumulator::from_values(&[f32::NAN; 4]).finish(4);
        assert_eq!(s.mean, None);
        assert_eq!(s.valid_fraction, 0.0);
        let json = serde_json::to_string(&s).unwrap();
        assert!(json.contains("\"min\":null"));
    }
}

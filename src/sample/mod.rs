//! Training tables for classifiers: the stack's values at labelled points, circles and
//! polygons, with cross-validation folds that never split a sample.
//!
//! The flow is: read the samples ([`inputs`]) → move them into the stack's CRS → find the
//! cells each one covers ([`cells`]) → check the set ([`checks`]) → read the stack's
//! values, only in the windows the samples touch → assign folds ([`folds`]) to the samples
//! that made rows → write the table ([`table`]) atomically.
//!
//! - [`inputs`]: CSV and GeoJSON sample files.
//! - [`cells`]: cells whose centre lies inside a circle or polygon.
//! - [`checks`]: samples outside the stack, overlaps of different classes, small classes.
//! - [`folds`]: seeded stratified folds, per sample or per spatial block.
//! - [`table`]: the table's columns, CSV writing and its atomic writing.
//! - [`geoparquet`]: the table as GeoParquet.
//! - [`separability`]: per band ANOVA F and Jeffries–Matusita distances of the classes,
//!   groups of correlated bands; printed and written as `TABLE.separability.json`.
//!
//! Pixels are read in chunks of 512 x 512 cells aligned to the stack's origin (the
//! stack's tile size), each chunk only over the bounding box of the sample cells inside
//! it, one band at a time: memory is bounded by the chunk and the table, never by the
//! stack. Chunks are read in parallel; the table does not depend on the thread count.

pub mod cells;
pub mod checks;
pub mod folds;
pub mod geoparquet;
pub mod inputs;
pub mod separability;
pub mod table;

use std::collections::BTreeMap;
use std::fmt;
use std::path::{Path, PathBuf};

use rayon::prelude::*;

use crate::error::{Error, Result};
use crate::grid::{Grid, Window};
use crate::raster::RasterSource;
use crate::stack::sidecar::StackMetadata;

use cells::Footprint;
use checks::CheckReport;
use inputs::{Sample, SampleFile};
use table::{Precision, Row, SampleTable};

/// Seed used when none is given (any fixed value serves).
pub const DEFAULT_SEED: u64 = 1;

/// Folds when none are asked for: 5, a usual choice for k-fold cross-validation (common
/// practice).
pub const DEFAULT_FOLDS: usize = 5;

/// Side of the chunks pixels are read in, in cells.
const CHUNK: i64 = 512;

/// One row per sample instead of one per cell.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Aggregate {
    /// Arithmetic mean of the sample's cells, per band (float64).
    Mean,
    /// Median of the sample's cells, per band; the mean of the two middle values for an
    /// even count.
    Median,
}

/// How a training table is made.
#[derive(Clone, Debug, PartialEq)]
pub struct SampleOptions {
    /// Number of folds (at least 2).
    pub folds: usize,
    /// Seed of the fold shuffle.
    pub seed: u64,
    /// Side of square spatial blocks in metres; `None` assigns folds per sample.
    pub block_size_m: Option<f64>,
    /// One row per sample with this statistic; `None` gives one row per cell.
    pub aggregate: Option<Aggregate>,
    /// Keep cells with nodata in some band (empty fields) instead of dropping them.
    pub keep_nodata: bool,
    /// Turn any check finding into a failure.
    pub strict: bool,
    /// CSV column / GeoJSON property holding the class; `None`: `class` (CSV also `label`).
    pub class_field: Option<String>,
    /// Sample coordinates are WGS84 longitude/latitude (transformed through GDAL).
    pub lonlat: bool,
    /// Bands whose |Pearson r| reaches this are grouped in the separability report.
    pub correlation_threshold: f64,
}

impl Default for SampleOptions {
    fn default() -> Self {
        SampleOptions {
            folds: DEFAULT_FOLDS,
            seed: DEFAULT_SEED,
            block_size_m: None,
            aggregate: None,
            keep_nodata: false,
            strict: false,
            class_field: None,
            lonlat: false,
            correlation_threshold: separability::DEFAULT_CORRELATION_THRESHOLD,
        }
    }
}

/// A finished stack opened for sampling.
pub struct Stack {
    pub dir: PathBuf,
    pub metadata: StackMetadata,
    pub source: Box<dyn RasterSource>,
    /// Band names in band order (from `stack.json`).
    pub band_names: Vec<String>,
}

/// Open the stack in folder `dir`: its `stack.json` (which marks a finished stack) and
/// `stack.tif`, checked against each other.
pub fn open_stack(dir: &Path) -> Result<Stack> {
    if !dir.is_dir() {
        let hint = if dir.is_file() {
            "give --stack the folder holding stack.tif and stack.json, not a file"
        } else {
            "check the path; --stack takes a folder made by `terrastack build`"
        };
        return Err(Error::file(dir, "not a stack folder").with_fix(hint));
    }
    let json_path = dir.join("stack.json");
    if !json_path.is_file() {
        return Err(Error::file(
            dir,
            "the folder has no stack.json, so it does not hold a finished stack",
        )
        .with_fix("build the stack with `terrastack build --out DIR` (stack.json is written last), or point --stack at the right folder"));
    }
    let text = std::fs::read_to_string(&json_path).map_err(|e| Error::io(&json_path, e))?;
    let metadata: StackMetadata = serde_json::from_str(&text).map_err(|e| {
        Error::file(&json_path, format!("not a terrastack stack sidecar: {e}"))
            .with_fix("rebuild the stack with `terrastack build`")
    })?;
    if !metadata.format.starts_with("terrastack-stack/") {
        return Err(
            Error::file(&json_path, format!("unknown format '{}'", metadata.format))
                .with_fix("rebuild the stack with this version of terrastack"),
        );
    }
    let tif_path = dir.join("stack.tif");
    let source = crate::raster::open(&tif_path)?;
    let grid = source.grid();
    let g = &metadata.grid;
    let same = grid.width == g.width
        && grid.height == g.height
        && grid
            .transform
            .iter()
            .zip(g.transform.iter())
            .all(|(a, b)| (a - b).abs() <= 1e-9 * a.abs().max(b.abs()).max(1.0));
    if !same {
        return Err(Error::file(
            &tif_path,
            format!(
                "its grid ({} x {}, transform {:?}) differs from stack.json's ({} x {}, transform {:?})",
                grid.width, grid.height, grid.transform, g.width, g.height, g.transform
            ),
        )
        .with_fix("the folder mixes files of two stacks; rebuild it with `terrastack build --force`"));
    }
    let mut bands = metadata.bands.clone();
    bands.sort_by_key(|b| b.index);
    let indices_ok = bands.iter().enumerate().all(|(i, b)| b.index == i + 1);
    if !indices_ok || bands.len() != source.band_count() {
        return Err(Error::file(
            &json_path,
            format!(
                "it lists {} band(s) (indices {:?}) but stack.tif has {}",
                bands.len(),
                bands.iter().map(|b| b.index).collect::<Vec<_>>(),
                source.band_count()
            ),
        )
        .with_fix("rebuild the stack with `terrastack build --force`"));
    }
    Ok(Stack {
        dir: dir.to_path_buf(),
        band_names: bands.into_iter().map(|b| b.name).collect(),
        metadata,
        source,
    })
}

/// Move the samples of `file` into the CRS of `grid`. A CRS the file declares by EPSG
/// code (GeoJSON's `crs` member) must be the stack's; WGS84 lon/lat (`lonlat`) and the
/// layer CRS of files read through OGR are transformed through GDAL. Without the `gdal`
/// feature, lon/lat is accepted only when the stack itself is in EPSG:4326.
pub fn to_stack_crs(file: &mut SampleFile, grid: &Grid, lonlat: bool) -> Result<()> {
    let stack_crs = grid.crs.label();
    let declared = file
        .declared_epsg
        .or(file.layer_crs.as_ref().and_then(|c| c.epsg));
    if let Some(declared) = declared {
        if lonlat && declared != 4326 {
            return Err(Error::file(
                &file.path,
                format!("the file declares EPSG:{declared}, but --lonlat says its coordinates are WGS84 lon/lat"),
            )
            .with_fix("drop --lonlat, or reproject the samples to EPSG:4326"));
        }
        if !lonlat && file.layer_crs.is_none() && grid.crs.epsg.is_some_and(|e| e != declared) {
            let hint = if declared == 4326 {
                "add --lonlat to transform WGS84 lon/lat into the stack's CRS".to_string()
            } else {
                format!("reproject the samples to {stack_crs}")
            };
            return Err(Error::file(
                &file.path,
                format!("the samples are in EPSG:{declared}, the stack in {stack_crs}"),
            )
            .with_fix(hint));
        }
    }
    let from = if lonlat {
        crate::grid::Crs::from_epsg(4326)
    } else {
        match file.layer_crs.clone() {
            Some(crs) => crs,
            None => return Ok(()),
        }
    };
    if from.epsg.is_some() && from.epsg == grid.crs.epsg {
        return Ok(());
    }
    transform_samples(file, &from, grid)
}

/// Transform every sample position of `file` from `from` into the CRS of `grid`.
#[cfg(feature = "gdal")]
fn transform_samples(file: &mut SampleFile, from: &crate::grid::Crs, grid: &Grid) -> Result<()> {
    if crate::raster::gdal::same_crs(from, &grid.crs) {
        return Ok(());
    }
    let mut points: Vec<(f64, f64)> = Vec::new();
    for s in &mut file.samples {
        s.shape.for_each_position(|x, y| points.push((*x, *y)));
    }
    crate::raster::gdal::transform_points(from, &grid.crs, &mut points)
        .map_err(|e| e.in_file(&file.path))?;
    let mut it = points.into_iter();
    for s in &mut file.samples {
        s.shape.for_each_position(|x, y| {
            if let Some((px, py)) = it.next() {
                *x = px;
                *y = py;
            }
        });
    }
    Ok(())
}

/// Without GDAL no transformation is possible.
#[cfg(not(feature = "gdal"))]
fn transform_samples(file: &mut SampleFile, from: &crate::grid::Crs, grid: &Grid) -> Result<()> {
    let stack_crs = grid.crs.label();
    Err(Error::file(
        &file.path,
        format!(
            "samples in {} must be transformed into the stack's CRS ({stack_crs}), which needs GDAL",
            from.label()
        ),
    )
    .with_fix(format!(
        "build terrastack with `--features gdal`, or give the coordinates in {stack_crs} and drop --lonlat"
    )))
}

/// Everything decided before a pixel is read.
#[derive(Clone, Debug, PartialEq)]
pub struct SamplePlan {
    /// Cells of each sample inside the stack.
    pub footprints: Vec<Footprint>,
    /// Class names in name order.
    pub classes: Vec<String>,
    /// Each sample's class index into `classes`.
    pub labels: Vec<usize>,
    /// Each sample's spatial block (block folds only).
    pub blocks: Option<Vec<(i64, i64)>>,
    pub report: CheckReport,
}

/// Refuse fold counts below 2 and block sizes that are not positive metres.
pub fn check_options(options: &SampleOptions) -> Result<()> {
    if options.folds < 2 {
        return Err(Error::usage(format!(
            "--folds {} is too few: cross-validation needs at least 2 folds",
            options.folds
        ))
        .with_fix("give --folds 2 or more (5 and 10 are usual)"));
    }
    if let Some(b) = options.block_size_m {
        if !(b.is_finite() && b > 0.0) {
            return Err(Error::usage(format!(
                "--block-size {b} is not a positive number of metres"
            ))
            .with_fix("give the block side in metres, e.g. --block-size 50"));
        }
    }
    let r = options.correlation_threshold;
    if !(r.is_finite() && r > 0.0 && r <= 1.0) {
        return Err(Error::usage(format!(
            "--correlation-threshold {r} is not a correlation in (0, 1]"
        ))
        .with_fix("give the |r| above which bands count as redundant, e.g. 0.9"));
    }
    Ok(())
}

/// Cells, checks and folds for `samples` (already in the CRS of `grid`).
pub fn plan(grid: &Grid, samples: &[Sample], options: &SampleOptions) -> Result<SamplePlan> {
    check_options(options)?;
    let footprints = samples
        .iter()
        .map(|s| cells::shape_cells(grid, &s.shape))
        .collect::<Result<Vec<_>>>()?;
    let mut classes: Vec<String> = samples.iter().map(|s| s.class.clone()).collect();
    classes.sort();
    classes.dedup();
    let labels: Vec<usize> = samples
        .iter()
        .map(|s| classes.binary_search(&s.class).unwrap_or(0))
        .collect();
    let blocks = match options.block_size_m {
        None => None,
        Some(side) => {
            let layout = folds::BlockLayout::new(grid, side)?;
            Some(
                samples
                    .iter()
                    .map(|s| {
                        let (x, y) = s.shape.anchor();
                        layout.block_of(grid, x, y)
                    })
                    .collect::<Vec<_>>(),
            )
        }
    };
    let report = checks::check_samples(
        samples,
        &footprints,
        &labels,
        &classes,
        options.folds,
        blocks.as_deref(),
    );
    Ok(SamplePlan {
        footprints,
        classes,
        labels,
        blocks,
        report,
    })
}

/// Folds (0-based) of the samples that made rows (`has_rows[i]`); `None` for the others
/// (outside the stack, or only nodata cells), which therefore never unbalance the folds.
/// Per sample, or per spatial block when the plan has blocks (see [`folds`]).
pub fn assign_folds(
    plan: &SamplePlan,
    has_rows: &[bool],
    options: &SampleOptions,
) -> Vec<Option<usize>> {
    let used: Vec<usize> = (0..has_rows.len()).filter(|&i| has_rows[i]).collect();
    let labels: Vec<usize> = used.iter().map(|&i| plan.labels[i]).collect();
    let n_classes = plan.classes.len();
    let assigned = match &plan.blocks {
        None => folds::stratified_folds(&labels, n_classes, options.folds, options.seed),
        Some(blocks) => {
            let blocks: Vec<(i64, i64)> = used.iter().map(|&i| blocks[i]).collect();
            folds::block_folds(&blocks, &labels, n_classes, options.folds, options.seed).0
        }
    };
    let mut out = vec![None; has_rows.len()];
    for (&i, f) in used.iter().zip(assigned) {
        out[i] = Some(f);
    }
    out
}

/// Values of every sample cell in every band: a vector of `cells × bands` values, cells in
/// the order of the footprints (sample by sample, row-major within a sample).
pub fn read_cell_values(source: &dyn RasterSource, footprints: &[Footprint]) -> Result<Vec<f32>> {
    let bands = source.band_count();
    let cells: Vec<(i64, i64)> = footprints
        .iter()
        .flat_map(|f| f.cells.iter().copied())
        .collect();
    let mut chunks: BTreeMap<(i64, i64), Vec<usize>> = BTreeMap::new();
    for (i, &(c, r)) in cells.iter().enumerate() {
        chunks
            .entry((r.div_euclid(CHUNK), c.div_euclid(CHUNK)))
            .or_default()
            .push(i);
    }
    let chunks: Vec<Vec<usize>> = chunks.into_values().collect();
    let read: Vec<Vec<f32>> = chunks
        .par_iter()
        .map(|idx| {
            let (mut c0, mut r0, mut c1, mut r1) = (i64::MAX, i64::MAX, i64::MIN, i64::MIN);
            for &i in idx {
                let (c, r) = cells[i];
                c0 = c0.min(c);
                r0 = r0.min(r);
                c1 = c1.max(c);
                r1 = r1.max(r);
            }
            let window = Window::new(c0, r0, (c1 - c0 + 1) as usize, (r1 - r0 + 1) as usize);
            let mut out = vec![f32::NAN; idx.len() * bands];
            for band in 1..=bands {
                let a = source.read_window(band, window)?;
                for (k, &i) in idx.iter().enumerate() {
                    let (c, r) = cells[i];
                    out[k * bands + band - 1] = a[[(r - r0) as usize, (c - c0) as usize]];
                }
            }
            Ok(out)
        })
        .collect::<Result<Vec<_>>>()?;
    let mut values = vec![f32::NAN; cells.len() * bands];
    for (idx, vals) in chunks.iter().zip(read) {
        for (k, &i) in idx.iter().enumerate() {
            values[i * bands..(i + 1) * bands].copy_from_slice(&vals[k * bands..(k + 1) * bands]);
        }
    }
    Ok(values)
}

/// Median of `v` (sorted in place), the mean of the two middle values for an even count;
/// NaN when empty.
fn median(v: &mut [f64]) -> f64 {
    if v.is_empty() {
        return f64::NAN;
    }
    v.sort_by(f64::total_cmp);
    let n = v.len();
    if n % 2 == 1 {
        v[n / 2]
    } else {
        (v[n / 2 - 1] + v[n / 2]) / 2.0
    }
}

/// Counts of a finished table.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct SampleCounts {
    /// Sample cells inside the stack.
    pub cells: usize,
    /// Cells with nodata in at least one band.
    pub nodata_cells: usize,
    /// Whether those cells were kept (empty fields) or dropped.
    pub nodata_kept: bool,
    /// Ids of samples inside the stack that produced no row (every cell nodata).
    pub samples_without_rows: Vec<String>,
}

/// Build the table rows from the plan and the stack's values.
pub fn build_table(
    grid: &Grid,
    source: &dyn RasterSource,
    band_names: &[String],
    samples: &[Sample],
    plan: &SamplePlan,
    options: &SampleOptions,
) -> Result<(SampleTable, SampleCounts)> {
    let bands = band_names.len();
    let values = read_cell_values(source, &plan.footprints)?;
    let mut counts = SampleCounts {
        nodata_kept: options.keep_nodata,
        ..SampleCounts::default()
    };
    let mut rows = Vec::new();
    let mut offset = 0usize;
    for (s, fp) in plan.footprints.iter().enumerate() {
        let mut kept: Vec<(usize, &[f32])> = Vec::with_capacity(fp.cells.len());
        for (k, _) in fp.cells.iter().enumerate() {
            let v = &values[(offset + k) * bands..(offset + k + 1) * bands];
            let has_nodata = v.iter().any(|x| x.is_nan());
            counts.cells += 1;
            if has_nodata {
                counts.nodata_cells += 1;
                if !options.keep_nodata {
                    continue;
                }
            }
            kept.push((k, v));
        }
        offset += fp.cells.len();
        if fp.cells.is_empty() {
            continue;
        }
        if kept.is_empty() {
            counts.samples_without_rows.push(samples[s].id.clone());
            continue;
        }
        match options.aggregate {
            None => {
                for (k, v) in kept {
                    let (c, r) = fp.cells[k];
                    let (x, y) = grid.cell_centre(c as f64, r as f64);
                    rows.push(Row {
                        sample: s,
                        x,
                        y,
                        cells: 1,
                        values: v.iter().map(|&x| x as f64).collect(),
                    });
                }
            }
            Some(stat) => {
                let (x, y) = samples[s].shape.anchor();
                let mut out = Vec::with_capacity(bands);
                let mut column: Vec<f64> = Vec::with_capacity(kept.len());
                for b in 0..bands {
                    column.clear();
                    column.extend(
                        kept.iter()
                            .map(|(_, v)| v[b] as f64)
                            .filter(|x| !x.is_nan()),
                    );
                    out.push(match stat {
                        Aggregate::Mean if column.is_empty() => f64::NAN,
                        Aggregate::Mean => column.iter().sum::<f64>() / column.len() as f64,
                        Aggregate::Median => median(&mut column),
                    });
                }
                rows.push(Row {
                    sample: s,
                    x,
                    y,
                    cells: kept.len(),
                    values: out,
                });
            }
        }
    }
    let precision = match options.aggregate {
        None => Precision::F32,
        Some(_) => Precision::F64,
    };
    Ok((
        SampleTable {
            band_names: band_names.to_vec(),
            precision,
            rows,
        },
        counts,
    ))
}

/// What a run did, for the printed summary.
#[derive(Clone, Debug, PartialEq)]
pub struct SampleSummary {
    pub out: PathBuf,
    pub samples: usize,
    pub classes: Vec<String>,
    pub folds: usize,
    /// Distinct spatial blocks holding samples with rows (block folds only).
    pub blocks: Option<usize>,
    /// Ids of samples reaching past the stack's edge (cells outside are not sampled).
    pub clipped: Vec<String>,
    pub counts: SampleCounts,
    pub rows: usize,
    /// Samples with rows per class (rows of `classes`) and fold (columns).
    pub per_fold: Vec<Vec<usize>>,
    pub report: CheckReport,
    /// Which bands separate the classes, as written to `separability_path`.
    pub separability: separability::Separability,
    pub separability_path: PathBuf,
}

/// The separability report written beside table `out`: `NAME.separability.json` for
/// `NAME.csv`, and `NAME.parquet.separability.json` for `NAME.parquet` (any other file
/// name keeps its extension), so that the CSV and GeoParquet tables of one name in one
/// folder each have their own report.
pub fn separability_path(out: &Path) -> PathBuf {
    let is_csv = out
        .extension()
        .is_some_and(|e| e.eq_ignore_ascii_case("csv"));
    if is_csv {
        out.with_extension("separability.json")
    } else {
        let mut name = out.file_name().unwrap_or_default().to_os_string();
        name.push(".separability.json");
        out.with_file_name(name)
    }
}

#[cfg(test)]
mod separability_path_tests {
    use super::*;

    #[test]
    fn csv_and_parquet_tables_of_one_name_get_their_own_report() {
        assert_eq!(
            separability_path(Path::new("d/t.csv")),
            Path::new("d/t.separability.json")
        );
        assert_eq!(
            separability_path(Path::new("d/t.parquet")),
            Path::new("d/t.parquet.separability.json")
        );
    }
}

impl fmt::Display for SampleSummary {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        writeln!(
            f,
            "{} sample(s) of {} class(es) -> {} row(s) in {}",
            self.samples,
            self.classes.len(),
            self.rows,
            self.out.display()
        )?;
        writeln!(
            f,
            "cells inside the stack: {}; with nodata in some band: {} ({})",
            self.counts.cells,
            self.counts.nodata_cells,
            if self.counts.nodata_kept {
                "kept, empty fields"
            } else {
                "dropped"
            }
        )?;
        if !self.counts.samples_without_rows.is_empty() {
            writeln!(
                f,
                "samples with only nodata cells (no row): {}",
                checks::list(&self.counts.samples_without_rows, 20)
            )?;
        }
        if !self.clipped.is_empty() {
            writeln!(
                f,
                "samples reaching past the stack's edge: {}",
                checks::list(&self.clipped, 20)
            )?;
        }
        match self.blocks {
            Some(b) => writeln!(f, "{} folds over {b} spatial block(s)", self.folds)?,
            None => writeln!(f, "{} folds, stratified by class", self.folds)?,
        }
        let width = self
            .classes
            .iter()
            .map(|c| c.len())
            .max()
            .unwrap_or(5)
            .max(5);
        write!(f, "{:width$}", "class")?;
        for k in 1..=self.folds {
            write!(f, " {:>6}", format!("fold {k}"))?;
        }
        writeln!(f)?;
        for (c, per) in self.classes.iter().zip(&self.per_fold) {
            write!(f, "{c:width$}")?;
            for n in per {
                write!(f, " {n:>6}")?;
            }
            writeln!(f)?;
        }
        write!(f, "{}", self.report)?;
        write!(f, "{}", self.separability)?;
        writeln!(
            f,
            "separability report: {}",
            self.separability_path.display()
        )
    }
}

/// Write `table` to `out` atomically, as GeoParquet for a `.parquet` name, else as CSV.
fn write_table(
    out: &Path,
    table: &SampleTable,
    grid: &Grid,
    ids: &[String],
    classes: &[String],
    folds: &[Option<usize>],
    blocks: Option<&[Option<u64>]>,
) -> Result<()> {
    let cols = table::SampleColumns {
        ids,
        classes,
        folds,
        blocks,
    };
    let names = table.column_names(blocks.is_some())?;
    match table::TableFormat::of(out) {
        table::TableFormat::Csv => {
            crate::atomic_file::write_streamed(out, |w| table.write_csv(w, &cols, &names))
        }
        table::TableFormat::GeoParquet => {
            let crs = crate::projjson::of(&grid.crs);
            if crs.is_none() {
                eprintln!(
                    "warning: {}: the GeoParquet crs is written as null (unknown): this build \
                     cannot describe {} as PROJJSON; build terrastack with `--features gdal` \
                     to record it",
                    out.display(),
                    grid.crs.label()
                );
            }
            let geo = geoparquet::geo_metadata(table, crs);
            crate::atomic_file::write_streamed(out, |w| {
                geoparquet::write_geoparquet(w, table, &cols, &names, &geo)
            })
        }
    }
}

/// Make the training table `out` from the stack in `stack_dir` and the samples in
/// `samples_path`. An existing `out` is replaced only with `force`. With
/// `options.strict`, any check finding fails the run (`Error::CheckFailed`) before a pixel
/// is read or a file written.
pub fn run(
    stack_dir: &Path,
    samples_path: &Path,
    out: &Path,
    force: bool,
    options: &SampleOptions,
) -> Result<SampleSummary> {
    check_options(options)?;
    let stack = open_stack(stack_dir)?;
    let json = stack.dir.join("stack.json");
    let tif = stack.dir.join("stack.tif");
    // The table is locked until it is written; its check and the removal of partials that
    // killed runs left happen under the lock.
    let _lock = crate::output_lock::OutputLock::file(out)?;
    table::check_output(
        out,
        force,
        &[("samples", samples_path), ("stack", &json), ("stack", &tif)],
    )?;
    let sep_path = separability_path(out);
    crate::input_guard::refuse_output_over_input(
        std::slice::from_ref(&sep_path),
        &[
            ("samples".to_string(), samples_path.to_path_buf()),
            ("stack".to_string(), json.clone()),
            ("stack".to_string(), tif.clone()),
        ],
    )?;
    if sep_path.exists() && !force {
        return Err(
            Error::file(&sep_path, "the separability report already exists").with_fix(
                "choose another --out name, or add --force to replace the table and its report",
            ),
        );
    }
    let name = out.file_name().map(|n| n.to_string_lossy().into_owned());
    let folder = out.parent().filter(|p| !p.as_os_str().is_empty());
    crate::atomic_file::remove_stale_partials(folder.unwrap_or(Path::new(".")), name.as_deref());
    let sep_name = sep_path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned());
    crate::atomic_file::remove_stale_partials(
        folder.unwrap_or(Path::new(".")),
        sep_name.as_deref(),
    );
    let mut file = inputs::read_samples(samples_path, options.class_field.as_deref())?;
    if file.samples.is_empty() {
        return Err(Error::file(samples_path, "the file holds no samples")
            .with_fix("add labelled points or polygons"));
    }
    let mut seen = std::collections::HashSet::new();
    if let Some(dup) = file.samples.iter().find(|s| !seen.insert(s.id.as_str())) {
        return Err(Error::file(
            samples_path,
            format!("sample id '{}' is used more than once", dup.id),
        )
        .with_fix("give every sample its own id (or leave the id out to number them)"));
    }
    let grid = stack.source.grid().clone();
    to_stack_crs(&mut file, &grid, options.lonlat)?;
    let plan = plan(&grid, &file.samples, options)?;
    if plan
        .footprints
        .iter()
        .all(|f| f.cells.is_empty() && f.clipped)
    {
        let (x0, y0, x1, y1) = grid.bounds();
        return Err(Error::file(
            samples_path,
            format!(
                "none of the {} sample(s) lies inside the stack (x {x0} to {x1}, y {y0} to {y1}, {})",
                file.samples.len(),
                grid.crs.label()
            ),
        )
        .with_fix(format!(
            "give the coordinates in {}, or add --lonlat if they are WGS84 longitude/latitude",
            grid.crs.label()
        )));
    }
    if options.strict && !plan.report.is_clean() {
        return Err(Error::CheckFailed {
            problem: format!(
                "{}: the samples failed checks (--strict), no table written\n{}",
                samples_path.display(),
                plan.report.to_string().trim_end()
            ),
        });
    }
    let (table, counts) = build_table(
        &grid,
        stack.source.as_ref(),
        &stack.band_names,
        &file.samples,
        &plan,
        options,
    )?;
    let mut has_rows = vec![false; file.samples.len()];
    for row in &table.rows {
        has_rows[row.sample] = true;
    }
    let folds = assign_folds(&plan, &has_rows, options);
    let ids: Vec<String> = file.samples.iter().map(|s| s.id.clone()).collect();
    let classes: Vec<String> = file.samples.iter().map(|s| s.class.clone()).collect();
    let blocks = plan.blocks.as_ref().map(|b| table::block_ids(b, &has_rows));
    write_table(
        out,
        &table,
        &grid,
        &ids,
        &classes,
        &folds,
        blocks.as_deref(),
    )?;
    let sep = table_separability(&table, &plan, options.correlation_threshold);
    let sep_json = serde_json::to_vec_pretty(&sep)
        .map_err(|e| Error::file(&sep_path, format!("cannot encode the report: {e}")))?;
    crate::atomic_file::write_bytes(&sep_path, &sep_json)?;
    let mut per_fold = vec![vec![0usize; options.folds]; plan.classes.len()];
    for (&c, f) in plan.labels.iter().zip(&folds) {
        if let Some(f) = f {
            per_fold[c][*f] += 1;
        }
    }
    let used_blocks = plan.blocks.as_ref().map(|b| {
        let mut b: Vec<_> = b
            .iter()
            .zip(&has_rows)
            .filter(|(_, &used)| used)
            .map(|(b, _)| *b)
            .collect();
        b.sort_unstable();
        b.dedup();
        b.len()
    });
    Ok(SampleSummary {
        out: out.to_path_buf(),
        samples: file.samples.len(),
        classes: plan.classes.clone(),
        folds: options.folds,
        blocks: used_blocks,
        clipped: file
            .samples
            .iter()
            .zip(&plan.footprints)
            .filter(|(_, fp)| fp.clipped && !fp.cells.is_empty())
            .map(|(s, _)| s.id.clone())
            .collect(),
        counts,
        rows: table.rows.len(),
        per_fold,
        report: plan.report,
        separability: sep,
        separability_path: sep_path,
    })
}

/// Separability of the classes over the rows of `table` (see [`separability`]).
pub fn table_separability(
    table: &SampleTable,
    plan: &SamplePlan,
    threshold: f64,
) -> separability::Separability {
    let columns: Vec<Vec<f64>> = (0..table.band_names.len())
        .map(|b| table.rows.iter().map(|r| r.values[b]).collect())
        .collect();
    let labels: Vec<usize> = table.rows.iter().map(|r| plan.labels[r.sample]).collect();
    separability::separability(
        &table.band_names,
        &columns,
        &labels,
        &plan.classes,
        threshold,
    )
}

#[cfg(test)]
pub(crate) mod tests {
    use super::*;
    use crate::grid::Crs;
    use crate::raster::{BandInfo, SampleType};
    use inputs::Shape;
    use ndarray::Array2;
    use std::sync::atomic::{AtomicUsize, Ordering};

    /// An in-memory stack: band b's cell (col, row) holds `b·1000 + row·100 + col` (NaN
    /// where listed), so every value names its cell; reads are counted.
    pub(crate) struct MemStack {
        pub grid: Grid,
        pub bands: Vec<Array2<f32>>,
        pub cells_read: AtomicUsize,
    }

    impl MemStack {
        pub fn new(width: usize, height: usize, bands: usize, nodata: &[(usize, usize)]) -> Self {
            let grid = Grid::new(
                width,
                height,
                [600_000.0, 0.5, 0.0, 5_000_000.0, 0.0, -0.5],
                Crs::from_epsg(32633),
            )
            .unwrap();
            let bands = (1..=bands)
                .map(|b| {
                    Array2::from_shape_fn((height, width), |(r, c)| {
                        if nodata.contains(&(c, r)) && b == 1 {
                            f32::NAN
                        } else {
                            (b * 1000 + r * 100 + c) as f32
                        }
                    })
                })
                .collect();
            MemStack {
                grid,
                bands,
                cells_read: AtomicUsize::new(0),
            }
        }
    }

    impl RasterSource for MemStack {
        fn path(&self) -> &Path {
            Path::new("memory")
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
                nodata: None,
            }
        }
        fn read_window(&self, band: usize, w: Window) -> Result<Array2<f32>> {
            self.cells_read.fetch_add(w.len(), Ordering::Relaxed);
            let a = &self.bands[band - 1];
            Ok(Array2::from_shape_fn((w.height, w.width), |(r, c)| {
                let (rr, cc) = (w.row + r as i64, w.col + c as i64);
                if rr < 0 || cc < 0 || rr >= a.nrows() as i64 || cc >= a.ncols() as i64 {
                    f32::NAN
                } else {
                    a[[rr as usize, cc as usize]]
                }
            }))
        }
    }

    fn point(id: &str, class: &str, x: f64, y: f64, r: Option<f64>) -> Sample {
        Sample {
            id: id.into(),
            class: class.into(),
            shape: Shape::Point { x, y, radius_m: r },
        }
    }

    fn names(n: usize) -> Vec<String> {
        (1..=n).map(|b| format!("b{b}")).collect()
    }

    #[test]
    fn values_come_from_the_right_cells() {
        let st = MemStack::new(1200, 700, 2, &[]);
        // Cell (col 1100, row 650) centre: x = 600000 + 1100.5·0.5, y = 5e6 − 650.5·0.5.
        let samples = vec![
            point("p", "a", 600_550.25, 4_999_674.75, None),
            point("q", "b", 600_000.1, 4_999_999.9, None),
        ];
        let opts = SampleOptions {
            folds: 2,
            ..SampleOptions::default()
        };
        let plan = plan(&st.grid, &samples, &opts).unwrap();
        let (t, counts) = build_table(&st.grid, &st, &names(2), &samples, &plan, &opts).unwrap();
        assert_eq!(t.rows.len(), 2);
        assert_eq!(t.rows[0].values, vec![66_100.0 + 1000.0, 66_100.0 + 2000.0]);
        assert_eq!((t.rows[0].x, t.rows[0].y), (600_550.25, 4_999_674.75));
        assert_eq!(t.rows[1].values, vec![1000.0, 2000.0]);
        assert_eq!(counts.cells, 2);
        // Only two 1 x 1 windows per band were read, not the 840 000-cell stack.
        assert_eq!(st.cells_read.load(Ordering::Relaxed), 4);
    }

    #[test]
    fn circles_across_chunk_edges_and_nodata_rule() {
        // A circle of radius 2 m (4 cells) centred on the corner shared by four chunks
        // at cell (512, 512). Cell centres lie at half-integer offsets (i, j) in cells; per
        // quadrant, i, j in {0.5, 1.5, 2.5, 3.5} with i² + j² <= 16 gives 4 + 4 + 3 + 2 = 13
        // (hand count), so 52 cells.
        let st = MemStack::new(1100, 1100, 1, &[(511, 511)]);
        let (x, y) = st.grid.cell_centre(511.5, 511.5);
        let samples = vec![point("c", "a", x, y, Some(2.0))];
        let mut opts = SampleOptions {
            folds: 2,
            ..SampleOptions::default()
        };
        let plan = plan(&st.grid, &samples, &opts).unwrap();
        assert_eq!(plan.footprints[0].cells.len(), 52);
        let (t, counts) = build_table(&st.grid, &st, &names(1), &samples, &plan, &opts).unwrap();
        assert_eq!(t.rows.len(), 51);
        assert_eq!(counts.nodata_cells, 1);
        for row in &t.rows {
            let (fc, fr) = st.grid.to_cell(row.x, row.y);
            let want = 1000.0 + fr.floor() * 100.0 + fc.floor();
            assert_eq!(row.values[0], want);
        }
        opts.keep_nodata = true;
        let (t, _) = build_table(&st.grid, &st, &names(1), &samples, &plan, &opts).unwrap();
        assert_eq!(t.rows.len(), 52);
        assert_eq!(t.rows.iter().filter(|r| r.values[0].is_nan()).count(), 1);
    }

    #[test]
    fn aggregates_match_hand_values() {
        let st = MemStack::new(50, 50, 2, &[(10, 11)]);
        // Square polygon over cells cols 10..=12, rows 10..=11 (6 cells, one nodata).
        let (x0, y0) = (600_000.0 + 10.0 * 0.5, 5_000_000.0 - 10.0 * 0.5);
        let sq = Shape::Polygons(vec![vec![vec![
            [x0, y0],
            [x0 + 1.5, y0],
            [x0 + 1.5, y0 - 1.0],
            [x0, y0 - 1.0],
        ]]]);
        let samples = vec![Sample {
            id: "poly".into(),
            class: "a".into(),
            shape: sq,
        }];
        let mut opts = SampleOptions {
            folds: 2,
            aggregate: Some(Aggregate::Mean),
            ..SampleOptions::default()
        };
        let plan = plan(&st.grid, &samples, &opts).unwrap();
        assert_eq!(plan.footprints[0].cells.len(), 6);
        let (t, _) = build_table(&st.grid, &st, &names(2), &samples, &plan, &opts).unwrap();
        // Band b holds b·1000 + 100·row + col. Cell (col 10, row 11) is nodata in band 1
        // and dropped from every band. Band 1 keeps 2010, 2011, 2012, 2111, 2112: mean
        // 10256 / 5 = 2051.2; band 2 likewise 3051.2 (hand values).
        assert_eq!(t.rows.len(), 1);
        assert!((t.rows[0].values[0] - 2051.2).abs() < 1e-9);
        assert!((t.rows[0].values[1] - 3051.2).abs() < 1e-9);
        // The anchor is the square's centroid (closed form).
        assert!((t.rows[0].x - (x0 + 0.75)).abs() < 1e-9);
        opts.aggregate = Some(Aggregate::Median);
        let (t, _) = build_table(&st.grid, &st, &names(2), &samples, &plan, &opts).unwrap();
        assert_eq!(t.rows[0].values[0], 2012.0); // sorted 2010 2011 2012 2111 2112
        opts.keep_nodata = true;
        let (t, _) = build_table(&st.grid, &st, &names(2), &samples, &plan, &opts).unwrap();
        // Band 2 has no nodata: all 6 cells, median of 3010 3011 3012 3110 3111 3112.
        assert_eq!(t.rows[0].values[1], (3012.0 + 3110.0) / 2.0);
        // Band 1 keeps its 5 valid cells: median 2012.
        assert_eq!(t.rows[0].values[0], 2012.0);
    }

    #[test]
    fn plan_refuses_one_fold_and_reports_checks() {
        let st = MemStack::new(20, 20, 1, &[]);
        let samples = vec![
            point("in", "a", 600_001.0, 4_999_999.0, Some(1.0)),
            point("over", "b", 600_001.2, 4_999_999.0, None),
            point("out", "a", 0.0, 0.0, None),
        ];
        let bad = SampleOptions {
            folds: 1,
            ..SampleOptions::default()
        };
        assert!(plan(&st.grid, &samples, &bad).is_err());
        let p = plan(&st.grid, &samples, &SampleOptions::default()).unwrap();
        assert_eq!(p.report.outside, vec!["out".to_string()]);
        // A 5 cm circle on a cell corner (nearest centres 0.35 m away) holds no centre.
        let tiny = vec![point("tiny", "a", 600_001.0, 4_999_999.0, Some(0.05))];
        let p2 = plan(&st.grid, &tiny, &SampleOptions::default()).unwrap();
        assert!(p2.report.outside.is_empty());
        assert_eq!(p2.report.no_cells, vec!["tiny".to_string()]);
        assert_eq!(p.report.overlaps.len(), 1);
        assert_eq!(p.report.small_classes.len(), 2);
        assert_eq!(p.classes, vec!["a".to_string(), "b".to_string()]);
    }

    #[test]
    fn folds_only_for_samples_with_rows() {
        let st = MemStack::new(20, 20, 1, &[]);
        let mut samples = Vec::new();
        for i in 0..12 {
            let x = if i % 4 == 3 {
                0.0
            } else {
                600_000.3 + 0.4 * i as f64
            };
            samples.push(point(
                &format!("s{i}"),
                ["a", "b"][i % 2],
                x,
                4_999_999.0,
                None,
            ));
        }
        let opts = SampleOptions {
            folds: 3,
            ..SampleOptions::default()
        };
        let p = plan(&st.grid, &samples, &opts).unwrap();
        let has_rows: Vec<bool> = p.footprints.iter().map(|f| !f.cells.is_empty()).collect();
        let folds = assign_folds(&p, &has_rows, &opts);
        for (i, f) in folds.iter().enumerate() {
            assert_eq!(f.is_some(), i % 4 != 3, "sample {i}");
        }
        // 9 samples inside: class a (i = 0, 2, 4, 6, 8, 10) has 6, two per fold;
        // class b (i = 1, 5, 9) has 3, one per fold.
        for (class, want) in [(0usize, 2usize), (1, 1)] {
            let mut per = [0usize; 3];
            for (i, f) in folds.iter().enumerate() {
                if let Some(f) = f {
                    if p.labels[i] == class {
                        per[*f] += 1;
                    }
                }
            }
            assert_eq!(per, [want; 3], "class {class}");
        }
    }

    fn file(declared: Option<u32>) -> SampleFile {
        SampleFile {
            path: PathBuf::from("plots.geojson"),
            samples: vec![point("a", "fen", 13.4, 52.5, None)],
            declared_epsg: declared,
            layer_crs: None,
        }
    }

    #[test]
    fn sample_crs_is_checked_against_the_stack() {
        let utm = MemStack::new(4, 4, 1, &[]).grid;
        let e = to_stack_crs(&mut file(Some(32632)), &utm, false)
            .unwrap_err()
            .to_string();
        assert!(
            e.starts_with("plots.geojson: the samples are in EPSG:32632, the stack in EPSG:32633"),
            "{e}"
        );
        let e = to_stack_crs(&mut file(Some(4326)), &utm, false)
            .unwrap_err()
            .to_string();
        assert!(e.contains("add --lonlat"), "{e}");
        let e = to_stack_crs(&mut file(Some(32633)), &utm, true)
            .unwrap_err()
            .to_string();
        assert!(e.contains("drop --lonlat"), "{e}");
        let mut f = file(Some(32633));
        to_stack_crs(&mut f, &utm, false).unwrap();
        assert_eq!(f, file(Some(32633)));
        // A stack in EPSG:4326 takes lon/lat as they are, GDAL or not.
        let geo = Grid::new(
            4,
            4,
            [13.0, 0.1, 0.0, 53.0, 0.0, -0.1],
            Crs::from_epsg(4326),
        )
        .unwrap();
        let mut f = file(None);
        to_stack_crs(&mut f, &geo, true).unwrap();
        assert_eq!(f, file(None));
        #[cfg(not(feature = "gdal"))]
        {
            let e = to_stack_crs(&mut file(None), &utm, true)
                .unwrap_err()
                .to_string();
            assert!(e.contains("--features gdal"), "{e}");
        }
    }

    #[test]
    fn median_of_even_and_odd_counts() {
        assert_eq!(median(&mut [3.0, 1.0, 2.0]), 2.0);
        assert_eq!(median(&mut [4.0, 1.0, 3.0, 2.0]), 2.5);
        assert!(median(&mut []).is_nan());
    }
}

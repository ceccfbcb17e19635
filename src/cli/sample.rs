//! `terrastack sample`: a classifier-ready training table from a stack and labelled
//! samples, with cross-validation folds that never split a sample, and a report of which
//! bands separate the classes (printed, and written as `TABLE.separability.json`).

use std::path::PathBuf;

use clap::ValueEnum;
use terrastack::sample::{self, Aggregate, SampleOptions, DEFAULT_FOLDS, DEFAULT_SEED};
use terrastack::Result;

/// Statistic of one-row-per-sample tables.
#[derive(Clone, Copy, Debug, ValueEnum)]
pub enum AggregateArg {
    /// Arithmetic mean of the sample's cells.
    Mean,
    /// Median of the sample's cells.
    Median,
}

#[derive(clap::Args)]
pub struct Args {
    /// Stack folder (holding stack.tif and stack.json) made by `terrastack build`.
    #[arg(long, value_name = "DIR")]
    pub stack: PathBuf,
    /// Labelled samples: CSV (x, y, class, optional radius_m and id columns) or GeoJSON
    /// (points with an optional radius_m property, polygons, multipolygons); with the
    /// `gdal` feature also any vector format GDAL reads.
    #[arg(long, value_name = "FILE")]
    pub samples: PathBuf,
    /// Training table to write: CSV, or GeoParquet 1.1 when the name ends in .parquet
    /// (point geometry in the stack's CRS, readable by geopandas and pyarrow as it is).
    /// Band columns are named by identifiers (ndvi_2026-07-08 becomes ndvi_20260708);
    /// `block` (with --block-size) and `cells` (with --aggregate) columns are added.
    #[arg(long, value_name = "TABLE.csv|TABLE.parquet")]
    pub out: PathBuf,
    /// Number of cross-validation folds, stratified by class.
    #[arg(long, value_name = "K", default_value_t = DEFAULT_FOLDS)]
    pub folds: usize,
    /// Seed of the fold shuffle; the same seed gives the same folds.
    #[arg(long, value_name = "N", default_value_t = DEFAULT_SEED)]
    pub seed: u64,
    /// Assign folds by square spatial blocks of this side in metres, aligned to the
    /// stack's origin, instead of by sample: all samples of a block share its fold, and
    /// blocks are stratified by the class most of their samples have.
    #[arg(long, value_name = "M")]
    pub block_size: Option<f64>,
    /// One row per sample holding this statistic of its cells, instead of one per cell.
    #[arg(long, value_name = "STAT")]
    pub aggregate: Option<AggregateArg>,
    /// Keep cells with nodata in some band (empty fields) instead of dropping them.
    #[arg(long)]
    pub keep_nodata: bool,
    /// Fail (exit code 3, no table) when a check finds samples outside the stack,
    /// overlapping samples of different classes, or classes smaller than the folds.
    #[arg(long)]
    pub strict: bool,
    /// Column (CSV) or property (GeoJSON) holding the class [default: class; CSV also
    /// label].
    #[arg(long, value_name = "NAME")]
    pub class_field: Option<String>,
    /// Sample coordinates are WGS84 longitude/latitude (needs the `gdal` feature unless
    /// the stack is in EPSG:4326).
    #[arg(long)]
    pub lonlat: bool,
    /// Bands whose |Pearson r| over the table's rows reaches this are listed as one
    /// correlated group (single linkage) in the separability report.
    #[arg(long, value_name = "R", default_value_t = sample::separability::DEFAULT_CORRELATION_THRESHOLD)]
    pub correlation_threshold: f64,
    /// Replace an existing table (and its separability report).
    #[arg(long)]
    pub force: bool,
}

pub fn run(args: Args) -> Result<()> {
    let options = SampleOptions {
        folds: args.folds,
        seed: args.seed,
        block_size_m: args.block_size,
        aggregate: args.aggregate.map(|a| match a {
            AggregateArg::Mean => Aggregate::Mean,
            AggregateArg::Median => Aggregate::Median,
        }),
        keep_nodata: args.keep_nodata,
        strict: args.strict,
        class_field: args.class_field,
        lonlat: args.lonlat,
        correlation_threshold: args.correlation_threshold,
    };
    let summary = sample::run(&args.stack, &args.samples, &args.out, args.force, &options)?;
    print!("{summary}");
    Ok(())
}

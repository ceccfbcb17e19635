//! The executor: blocks of the target grid stream through read → resample → kernels →
//! writer, in parallel, within a memory budget.
//!
//! Blocks are squares whose side is a multiple of the output tile, so every tile is
//! written once, whole, as soon as its block is done. Blocks run in waves of at most
//! `concurrency` blocks (what the memory budget allows, and no more than the threads), so
//! peak memory is bounded by the budget, not by the raster. Statistics of each block are
//! kept apart and merged in block order at the end.
//!
//! Determinism: a cell's value depends only on the inputs and its position (the kernels
//! and resampling promise it), and statistics are merged in a fixed order, so two builds
//! with different thread counts, memory budgets or block sizes write bit-identical
//! bands and statistics. Tiles are compressed in parallel but appended in block order,
//! so with the same block size (it depends on the largest window, and on the budget only
//! when the budget is too small for it) the file's bytes are identical too.

use std::io::IsTerminal;
use std::path::PathBuf;
use std::time::Instant;

use indicatif::{ProgressBar, ProgressStyle};
use ndarray::{s, Array2};
use rayon::prelude::*;

use crate::align::{self, Resampling};
use crate::error::{Error, Result};
use crate::grid::{Grid, Window};
use crate::input_guard;
use crate::raster::geotiff::{GeoTiffWriter, OverviewResampling, WriteOptions};
use crate::raster::SampleType;
use crate::spectral::{self, BandArrays, MaskOptions};
use crate::stack::output::{self, OutputDir};
use crate::stack::plan::{Producer, StackPlan};
use crate::stack::plausibility::{self, RangeCount, ELEVATION_RANGE_M, REFLECTANCE_RANGE};
use crate::stack::preview::{Preview, SheetHeading};
use crate::stack::recipe::Recipe;
use crate::stack::sidecar::{
    BandMetadata, GridMetadata, SoftwareMetadata, SourceMetadata, StackMetadata, StatsAccumulator,
    STACK_FORMAT,
};
use crate::stack::tile_sink::OrderedTiles;
use crate::terrain;

/// Memory kept aside from the block budget for readers' caches, the writer and thumbnails.
/// (Readers' caches are sized from the budget by `size_reader_caches`, up to
/// `raster::geotiff::CACHE_BYTES` each; measured peaks stay under the budget because
/// blocks need less than `StackPlan::block_bytes` estimates.)
const BASE_BYTES: u64 = 96 << 20;

/// Most worker threads a build (or a batch) starts: far more than any machine gains from,
/// and few enough that a mistyped `--threads 100000` is refused instead of exhausting the
/// system.
pub const MAX_THREADS: usize = 1024;

/// Default limit on the stack grid's cells (`--cell-limit`): 2³² ≈ 4.3 billion cells, a
/// 65536 x 65536 grid, ten times the largest flights measured (20000² in about ten minutes).
pub const DEFAULT_CELL_LIMIT: u64 = 1 << 32;

/// Refuse a thread (or job) count of 0 or more than [`MAX_THREADS`]; `flag` names it.
pub fn check_threads(flag: &str, n: usize) -> Result<()> {
    if n == 0 || n > MAX_THREADS {
        return Err(
            Error::usage(format!("{flag} {n} is outside 1..={MAX_THREADS}")).with_fix(format!(
                "give {flag} between 1 and {MAX_THREADS}; this machine has {} cores",
                std::thread::available_parallelism().map_or(1, |n| n.get())
            )),
        );
    }
    Ok(())
}

/// How a build reports progress.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Progress {
    /// A bar on a terminal, a log line per tenth of the work otherwise.
    Auto,
    /// Nothing.
    Quiet,
}

/// How a build runs (not what it computes: that is the [`Recipe`]).
#[derive(Clone, Debug)]
pub struct BuildOptions {
    pub out: PathBuf,
    pub force: bool,
    /// Worker threads; `None` = one per core.
    pub threads: Option<usize>,
    /// Memory budget for the whole build in bytes.
    pub memory_bytes: u64,
    pub progress: Progress,
    /// Block side in cells (a multiple of the tile size); `None` chooses from the halo and
    /// the budget. Results do not depend on it.
    pub block_size: Option<usize>,
    /// Build on this grid instead of the one the recipe implies (multi-temporal stacks put
    /// every flight on one common grid). Its CRS must be the DSM's.
    pub grid: Option<Grid>,
    /// ISO 8601 date recorded on every band (`date` in `stack.json`).
    pub date: Option<String>,
    /// The recipe file the recipe came from, if any: an input the outputs must not
    /// overwrite, like the rasters.
    pub recipe_file: Option<PathBuf>,
    /// Largest stack grid, in cells, built without complaint ([`DEFAULT_CELL_LIMIT`]).
    pub cell_limit: u64,
}

impl BuildOptions {
    /// Defaults: one thread per core, 2 GiB, progress on.
    pub fn new(out: impl Into<PathBuf>) -> BuildOptions {
        BuildOptions {
            out: out.into(),
            force: false,
            threads: None,
            memory_bytes: 2 << 30,
            progress: Progress::Auto,
            block_size: None,
            grid: None,
            date: None,
            recipe_file: None,
            cell_limit: DEFAULT_CELL_LIMIT,
        }
    }
}

/// What a finished build wrote.
#[derive(Clone, Debug)]
pub struct BuildReport {
    pub dir: PathBuf,
    pub metadata: StackMetadata,
    pub blocks: usize,
    pub block_size: usize,
    pub concurrency: usize,
    pub seconds: f64,
    /// Doubts about the inputs that did not stop the build (also printed to stderr).
    pub warnings: Vec<String>,
}

/// Build the stack described by `recipe` into `options.out`: `stack.tif`, `preview.png`
/// and `stack.json`. Inputs are checked before anything is written (and no output may be
/// an input: [`crate::input_guard`]); the output folder is locked for the whole build;
/// outputs appear only when complete.
pub fn build(recipe: Recipe, options: &BuildOptions) -> Result<BuildReport> {
    let started = Instant::now();
    let mut builder = rayon::ThreadPoolBuilder::new();
    if let Some(n) = options.threads {
        check_threads("--threads", n)?;
        builder = builder.num_threads(n);
    }
    let pool = builder
        .build()
        .map_err(|e| Error::usage(format!("cannot start the worker threads: {e}")))?;
    pool.install(|| {
        let plan = StackPlan::new(recipe, options.grid.as_ref())?;
        let mut inputs = input_files(&plan.recipe);
        if let Some(r) = &options.recipe_file {
            inputs.push(("recipe".into(), r.clone()));
        }
        input_guard::refuse_output_over_input(&output::output_paths(&options.out), &inputs)?;
        plan.check_cell_limit(options.cell_limit)?;
        size_reader_caches(&plan, options.memory_bytes);
        let out = OutputDir::prepare(&options.out, options.force)?;
        run(plan, out, options, started)
    })
}

fn run(
    plan: StackPlan,
    mut out: OutputDir,
    options: &BuildOptions,
    started: Instant,
) -> Result<BuildReport> {
    let threads = rayon::current_num_threads();
    let tif_path = out.temp_path("stack.tif");
    let write_options = WriteOptions {
        compression: plan.recipe.compression.codec(),
        ..WriteOptions::default()
    };
    // Memory that grows with the raster, whatever the block: the writer's tile index and
    // the block list (counted at the smallest block, the most blocks). Refused up front.
    let index =
        GeoTiffWriter::index_bytes(&tif_path, &plan.target, plan.bands.len(), &write_options)?;
    let raster_bytes = index.saturating_add(plan.raster_bytes(write_options_tile(&write_options)));
    check_raster_memory(&plan, options, raster_bytes)?;
    let mut writer =
        GeoTiffWriter::create(&tif_path, &plan.target, plan.bands.len(), write_options)?;
    for (i, band) in plan.bands.iter().enumerate() {
        writer.set_band_description(i + 1, &band.name);
        writer.set_band_units(i + 1, &band.units);
        if band.ramp == crate::stack::preview::RampKind::Cyclic {
            // Aspect: overviews average directions, not numbers (359° and 1° give 0°).
            writer.set_band_overview(i + 1, OverviewResampling::Circular);
        }
    }
    let tile = writer.block_size().0;
    let (block, concurrency) = choose_blocks(&plan, options, tile, threads, raster_bytes)?;
    let blocks = plan.blocks(block);
    let preview = Preview::new(
        plan.target.width,
        plan.target.height,
        plan.bands
            .iter()
            .map(|b| (b.name.clone(), b.units.clone(), b.ramp))
            .collect(),
    );
    let sources = hash_sources(&plan)?;
    let mut warnings = plan.warnings.clone();
    for w in &warnings {
        eprintln!("warning: {w}");
    }

    let total = (plan.target.width * plan.target.height) as u64;
    let mut bar = progress_bar(options.progress, blocks.len());
    let mut stats: Vec<StatsAccumulator> = vec![StatsAccumulator::default(); plan.bands.len()];
    let mut checks = Checks::new(&plan);
    let mut max_abs_z = 0.0f64;
    // Blocks are computed and compressed in parallel, a wave at a time, and appended in
    // block order (`tile_sink`): the file's bytes do not depend on which thread finished first.
    let mut sink = OrderedTiles::new(&writer, &blocks, concurrency);
    while let Some(results) = sink.next_wave(|w, tiles| {
        let (bands, mut block_checks, block_max_z) = compute_block(&plan, w)?;
        let mut block_stats = Vec::with_capacity(bands.len());
        for (i, data) in bands.iter().enumerate() {
            tiles.encode(i + 1, data.view())?;
            preview.record(i, w, data.view());
            block_stats.push(StatsAccumulator::from_array(data));
            if let Producer::Index(index) = &plan.bands[i].producer {
                block_checks.index[i] =
                    RangeCount::of(data.iter().copied(), 1.0, index.valid_range);
            }
        }
        Ok((block_stats, block_checks, block_max_z))
    })? {
        for (block_stats, block_checks, block_max_z) in results {
            max_abs_z = max_abs_z.max(block_max_z);
            for (acc, part) in stats.iter_mut().zip(block_stats.iter()) {
                acc.merge(part);
            }
            checks.merge(&block_checks);
        }
        // Stop as soon as the counts prove a refusal; the temporary files are removed.
        checks.verdict(&plan, total, false)?;
        bar.advance(sink.done(), blocks.len());
    }
    writer.finish()?;
    bar.finish();
    let late = checks.verdict(&plan, total, true)?;
    for w in &late {
        eprintln!("warning: {w}");
    }
    warnings.extend(late);

    let mut bands: Vec<BandMetadata> = plan
        .bands
        .iter()
        .zip(stats.iter())
        .enumerate()
        .map(|(i, (b, acc))| {
            let mut meta = b.meta.clone();
            meta.date = options.date.clone();
            meta.stats = acc.finish(total);
            meta.extra = checks.band_records(&plan, i, meta.extra);
            meta
        })
        .collect();
    for warning in record_precision(&plan, max_abs_z, &mut bands)? {
        eprintln!("terrastack: warning: {warning}");
    }
    let metadata = StackMetadata {
        format: STACK_FORMAT.into(),
        grid: GridMetadata::from_grid(&plan.target),
        nodata: "NaN".into(),
        bands,
        sources,
        parameters: serde_json::to_value(&plan.recipe).unwrap_or_default(),
        software: SoftwareMetadata::default(),
    };
    let png_path = out.temp_path("preview.png");
    let heading = SheetHeading::flight(&options.out, options.date.as_deref());
    preview.write_png(&png_path, &plan.target, &heading, &metadata.bands)?;
    metadata.write_to(&out.temp_path("stack.json"))?;
    let date = options.date.as_deref();
    let (item, no_item) = super::stac::add_item(
        &mut out,
        &metadata,
        &plan.target,
        &tif_path,
        date.zip(date),
        true,
    )?;
    if let Some(w) = &no_item {
        eprintln!("warning: {w}");
        warnings.push(w.clone());
    }
    let dir = out.dir().to_path_buf();
    out.commit()?;
    if !item {
        super::stac::remove_stale_item(&dir)?;
    }
    Ok(BuildReport {
        dir,
        metadata,
        blocks: blocks.len(),
        block_size: block,
        concurrency,
        seconds: started.elapsed().as_secs_f64(),
        warnings,
    })
}

/// Size every input's decoded-block cache from the budget: a sixteenth of it shared by
/// the distinct input files, between 4 MiB and `raster::geotiff::CACHE_BYTES` each (a 2 GiB
/// budget gives the DSM alone the full 128 MiB; 256 MiB and three files give 5.3 MiB
/// each). Only speed depends on it.
fn size_reader_caches(plan: &StackPlan, memory_bytes: u64) {
    let mut sources: Vec<&dyn crate::raster::RasterSource> = vec![plan.dsm.as_ref()];
    let others = plan.spectral.iter().map(|s| s.source.as_ref());
    for s in others.chain(plan.alpha.iter().map(|(s, _)| s.as_ref())) {
        if !sources.iter().any(|k| k.path() == s.path()) {
            sources.push(s);
        }
    }
    let share = memory_bytes / 16 / sources.len() as u64;
    let bytes = share.clamp(4 << 20, crate::raster::geotiff::CACHE_BYTES as u64) as usize;
    for s in sources {
        s.set_cache_bytes(bytes);
    }
}

/// Refuse a grid whose memory that grows with the raster (`raster_bytes`: tile index,
/// block list) does not fit the budget, before anything allocates it.
fn check_raster_memory(plan: &StackPlan, options: &BuildOptions, raster_bytes: u64) -> Result<()> {
    if raster_bytes > options.memory_bytes.saturating_sub(BASE_BYTES) {
        return Err(Error::usage(format!(
            "the memory budget of {} MiB is too small for a {} x {} grid of {} bands: its tile index and block list alone need {} MiB (plus {} MiB for readers and the writer)",
            options.memory_bytes >> 20,
            plan.target.width,
            plan.target.height,
            plan.bands.len(),
            raster_bytes >> 20,
            BASE_BYTES >> 20
        ))
        .with_fix("raise --memory, or build a smaller grid (--resolution) or fewer bands"));
    }
    Ok(())
}

/// Block side (a multiple of `tile`) and how many blocks may be in flight at once.
fn choose_blocks(
    plan: &StackPlan,
    options: &BuildOptions,
    tile: usize,
    threads: usize,
    raster_bytes: u64,
) -> Result<(usize, usize)> {
    let budget = options
        .memory_bytes
        .saturating_sub(BASE_BYTES)
        .saturating_sub(raster_bytes);
    let round_up = |n: usize| n.div_ceil(tile).max(1) * tile;
    let mut block = match options.block_size {
        Some(b) => {
            if b == 0 || b % tile != 0 {
                return Err(Error::usage(format!(
                    "block size {b} is not a multiple of the {tile}-cell tile"
                )));
            }
            b
        }
        // Halo overhead at most (1 + 2·halo/block)² ≤ 4 when block ≥ 2·halo; at most 4096.
        None => round_up(2 * plan.halo).clamp(tile, round_up(4096)),
    };
    if options.block_size.is_none() {
        while block > tile && plan.block_bytes(block) > budget {
            block -= tile;
        }
    }
    let need = plan.block_bytes(block);
    if need > budget {
        return Err(Error::usage(format!(
            "the memory budget of {} MiB is too small: one {block}x{block} block with a {}-cell halo needs about {} MiB (plus {} MiB for readers and the writer)",
            options.memory_bytes >> 20,
            plan.halo,
            need >> 20,
            BASE_BYTES >> 20
        ))
        .with_fix("raise --memory, or use smaller --scales (the halo grows with the largest window)"));
    }
    let concurrency = ((budget / need.max(1)) as usize).clamp(1, threads.max(1));
    Ok((block, concurrency))
}

/// Side of the writer's tiles (or strips' rows) in cells.
fn write_options_tile(o: &WriteOptions) -> usize {
    match o.layout {
        crate::raster::geotiff::Layout::Tiled { size } => size,
        crate::raster::geotiff::Layout::Strips { rows_per_strip } => rows_per_strip,
    }
}

/// DSM cells of block `w` (the padded block `z` without its halo), after the z-factor,
/// counted against the plausible elevations.
fn dsm_range_count<T: Copy + Into<f64>>(plan: &StackPlan, z: &Array2<T>, w: Window) -> RangeCount {
    let core = z.slice(s![
        plan.halo..plan.halo + w.height,
        plan.halo..plan.halo + w.width
    ]);
    RangeCount::of(
        core.iter().copied(),
        plan.recipe.z_factor,
        ELEVATION_RANGE_M,
    )
}

/// The largest |z| (as stored) among the finite cells of a DSM block, 0 when none.
fn max_abs<T: terrain::DsmSample>(z: &Array2<T>) -> f64 {
    z.iter()
        .map(|&v| v.into().abs())
        .filter(|v| v.is_finite())
        .fold(0.0, f64::max)
}

/// The terrain bands of block `w` from its padded DSM block `z` (with the halo, at the
/// precision it was read in), with the block's elevation-range count, its largest |z|, and
/// the padded block in metres (f64, after the z factor) when the ground filter needs it.
type TerrainBlock = (Vec<Array2<f32>>, RangeCount, f64, Option<Array2<f64>>);
fn terrain_of_block<T: terrain::DsmSample>(
    plan: &StackPlan,
    z: &Array2<T>,
    w: Window,
    cells: &crate::grid::CellSizes,
) -> TerrainBlock {
    let out = terrain::compute(
        &plan.terrain,
        z.view(),
        cells,
        plan.halo,
        plan.reference_z,
        &plan.terrain_params,
    );
    let zf = plan.terrain_params.z_factor;
    let metres = plan.ground.as_ref().map(|_| z.mapv(|v| v.into() * zf));
    (out, dsm_range_count(plan, z, w), max_abs(z), metres)
}

/// The ground bands of the stack (in band order) over block `w`, from the padded DSM block
/// in metres: NDVI guidance reads red and NIR over the padded block.
fn ground_of_block(
    plan: &StackPlan,
    metres: &Array2<f64>,
    padded: Window,
    cells: &crate::grid::CellSizes,
) -> Result<Vec<Array2<f32>>> {
    let Some(g) = &plan.ground else {
        return Ok(Vec::new());
    };
    let wanted: Vec<crate::ground::bands::GroundBand> = plan
        .bands
        .iter()
        .filter_map(|b| match &b.producer {
            Producer::Ground(band) => Some(band.clone()),
            _ => None,
        })
        .collect();
    let excluded = match g.params.ndvi_max {
        Some(max) => {
            let r = read_reflectance(plan, padded)?;
            let ndvi = spectral::find_index("ndvi")?.compute(&r)?;
            Some(ndvi.mapv(|v| v as f64 > max))
        }
        None => None,
    };
    Ok(crate::ground::bands::compute_block(
        g,
        metres.view(),
        cells,
        plan.halo,
        excluded.as_ref().map(|e| e.view()),
        (&plan.terrain_params, plan.reference_z),
        &wanted,
    ))
}

/// Compute every band of the stack over block `w`, with the block's plausibility counts
/// (index counts are filled in by the caller) and the largest |z| of the DSM block read
/// for it (as stored; 0 without terrain bands).
fn compute_block(plan: &StackPlan, w: Window) -> Result<(Vec<Array2<f32>>, Checks, f64)> {
    let mut checks = Checks::new(plan);
    let mut terrain_out: Vec<Option<Array2<f32>>> = Vec::new();
    let mut ground_out: Vec<Option<Array2<f32>>> = Vec::new();
    let mut block_max_z = 0.0;
    if !plan.terrain.is_empty() || plan.ground.is_some() {
        let padded = w.grow(plan.halo);
        let cells = plan.target.cell_sizes(padded.row, padded.height)?;
        // float64 (and 32-bit integer) DSMs stay exact until the f32 output.
        let (out, dsm_count, max_z, metres) = if plan.dsm_reads_f64() {
            let z = if plan.dsm_on_target {
                plan.dsm.read_window_f64(plan.dsm_band, padded)?
            } else {
                align::resample_window_f64(
                    plan.dsm.as_ref(),
                    plan.dsm_band,
                    &plan.target,
                    padded,
                    plan.recipe.resampling,
                )?
            };
            terrain_of_block(plan, &z, w, &cells)
        } else {
            let z = if plan.dsm_on_target {
                plan.dsm.read_window(plan.dsm_band, padded)?
            } else {
                align::resample_window(
                    plan.dsm.as_ref(),
                    plan.dsm_band,
                    &plan.target,
                    padded,
                    plan.recipe.resampling,
                )?
            };
            terrain_of_block(plan, &z, w, &cells)
        };
        checks.dsm = dsm_count;
        block_max_z = max_z;
        terrain_out = out.into_iter().map(Some).collect();
        if let Some(m) = metres {
            ground_out = ground_of_block(plan, &m, padded, &cells)?
                .into_iter()
                .map(Some)
                .collect();
        }
    }
    let mut ground_next = ground_out.iter_mut();
    let mut texture_out: Vec<Array2<f32>> = Vec::new();
    let reflectance = if plan.needs_spectral() {
        let texture = plan.texture_bands();
        let r = if texture.is_empty() {
            read_reflectance(plan, w)?
        } else {
            // Texture windows reach past the block: read the reflectance with their halo,
            // compute the texture bands, and keep the block's part for the other bands.
            let halo = plan.texture_halo();
            let padded = w.grow(halo);
            let wide = read_reflectance(plan, padded)?;
            let cells = plan.target.cell_sizes(padded.row, padded.height)?;
            texture_out = crate::texture::bands::compute_block(
                &texture,
                &wide,
                crate::texture::bands::PaddedOnGrid {
                    row0: padded.row,
                    col0: padded.col,
                    grid: (plan.target.height, plan.target.width),
                },
                &cells,
                halo,
                (w.height, w.width),
                plan.recipe.window,
                plan.recipe.min_valid_fraction,
            )?;
            let mut core = spectral::BandArrays::new();
            for role in wide.roles() {
                let a = wide.get(&role).expect("a role of the block");
                core.insert(
                    role,
                    crate::texture::bands::core(a, halo, (w.height, w.width)),
                )?;
            }
            core
        };
        for (count, input) in checks.reflectance.iter_mut().zip(&plan.spectral) {
            if let Some(a) = r.get(&input.band.role) {
                *count = RangeCount::of(a.iter().copied(), 1.0, REFLECTANCE_RANGE);
            }
        }
        Some(r)
    } else {
        None
    };
    let mut texture_next = texture_out.into_iter();
    let mut out = Vec::with_capacity(plan.bands.len());
    for band in &plan.bands {
        let data = match &band.producer {
            Producer::Terrain(i) => terrain_out[*i]
                .take()
                .expect("each terrain output feeds one band"),
            Producer::Reflectance(role) => reflectance
                .as_ref()
                .and_then(|r| r.get(role))
                .cloned()
                .expect("mapped roles are read"),
            Producer::Index(index) => {
                index.compute(reflectance.as_ref().expect("spectral read"))?
            }
            Producer::Expression(expr) => {
                expr.eval(reflectance.as_ref().expect("spectral read"))?
            }
            Producer::Ground(_) => ground_next
                .next()
                .and_then(Option::take)
                .expect("each ground output feeds one band, in band order"),
            Producer::Texture(_) => texture_next
                .next()
                .expect("each texture output feeds one band, in band order"),
        };
        out.push(data);
    }
    Ok((out, checks, block_max_z))
}

/// Adds to every curvature band of `bands` its precision record (`precision` in
/// `stack.json`): the DSM's storage type as the kernels saw it, its spacing at the largest
/// |z|, and the noise floor that rounding to that spacing puts on the estimator's second
/// derivatives ([`terrain::precision`]), with its share of the band's standard deviation;
/// kn, kt and kc also record their undefined rule. Returns a warning for each band whose
/// floor exceeds [`terrain::precision::WARN_SHARE`] of its spread.
fn record_precision(
    plan: &StackPlan,
    max_abs_z: f64,
    bands: &mut [BandMetadata],
) -> Result<Vec<String>> {
    use terrain::precision::{second_derivative_floor, WARN_SHARE};
    use terrain::DsmSample;
    let stored = plan.dsm.band_info(plan.dsm_band).sample_type;
    let (seen, spacing) = if plan.dsm_reads_f64() {
        match stored {
            SampleType::F64 => ("float64", <f64 as DsmSample>::spacing_at(max_abs_z)),
            _ => (stored.name(), 1.0),
        }
    } else if plan.dsm_on_target && !matches!(stored, SampleType::F32) {
        // 8- and 16-bit integers are exact in f32: their spacing is one stored unit.
        (stored.name(), 1.0)
    } else {
        ("float32", <f32 as DsmSample>::spacing_at(max_abs_z))
    };
    let spacing_m = spacing * plan.terrain_params.z_factor.abs();
    let cells = plan.target.cell_sizes(0, plan.target.height)?;
    let min = |v: &[f64]| v.iter().copied().fold(f64::INFINITY, f64::min);
    let (hx, hy) = (min(&cells.hx), min(&cells.hy));
    let mut warnings = Vec::new();
    for (band, plan_band) in bands.iter_mut().zip(&plan.bands) {
        let Producer::Terrain(k) = plan_band.producer else {
            continue;
        };
        let feature = &plan.terrain[k];
        let Some((method, scale)) = feature.curvature_spec() else {
            continue;
        };
        let floor = second_derivative_floor(method, scale, spacing_m, hx, hy);
        // The floor is in 1/m: a share only for the 1/m bands (not Gaussian, 1/m²).
        let share = band
            .stats
            .std
            .filter(|s| *s > 0.0 && band.units == "1/m")
            .map(|s| floor / s);
        let mut rec = serde_json::Map::new();
        rec.insert("dsm_sample_type".into(), seen.into());
        rec.insert("elevation_spacing_m".into(), spacing_m.into());
        rec.insert("at_elevation_m".into(), max_abs_z.into());
        rec.insert("noise_floor_per_m".into(), floor.into());
        rec.insert(
            "noise_floor_rule".into(),
            "std of the second derivatives from rounding every elevation to its stored spacing: \
             sqrt(sum of squared weights)·spacing/(sqrt(12)·h²), h the smallest cell size"
                .into(),
        );
        rec.insert(
            "noise_floor_share_of_std".into(),
            share.map_or(serde_json::Value::Null, Into::into),
        );
        band.extra.insert("precision".into(), rec.into());
        if feature.needs_direction() {
            band.extra.insert(
                "undefined_where".into(),
                format!(
                    "slope gradient within {} standard errors of zero (the error from the \
                     residual of the least-squares quadratic over the estimator's window): nodata",
                    terrain::curvature::GRADIENT_SIGNIFICANCE
                )
                .into(),
            );
        }
        if share.is_some_and(|s| s > WARN_SHARE) {
            warnings.push(format!(
                "band `{}`: the DSM's {seen} storage ({spacing_m:.2e} m spacing at {max_abs_z:.0} m) \
                 puts a noise floor of {floor:.2e} 1/m on curvature, {:.0} % of the band's spread; \
                 use a float64 DSM, a coarser cell size or a larger fit radius (`curvature:quadratic@METRES`)",
                band.name,
                share.unwrap_or(0.0) * 100.0
            ));
        }
    }
    Ok(warnings)
}

/// Plausibility counts of a block or of the whole stack (see `stack::plausibility`).
#[derive(Clone, Debug)]
struct Checks {
    /// DSM cells (after the z-factor) against the plausible elevations.
    dsm: RangeCount,
    /// Per spectral input (the plan's order), reflectance against the plausible range.
    reflectance: Vec<RangeCount>,
    /// Per band of the stack; counted for index bands only, against the index's range.
    index: Vec<RangeCount>,
}

impl Checks {
    fn new(plan: &StackPlan) -> Checks {
        Checks {
            dsm: RangeCount::default(),
            reflectance: vec![RangeCount::default(); plan.spectral.len()],
            index: vec![RangeCount::default(); plan.bands.len()],
        }
    }

    fn merge(&mut self, other: &Checks) {
        self.dsm.merge(&other.dsm);
        for (a, b) in self.reflectance.iter_mut().zip(&other.reflectance) {
            a.merge(b);
        }
        for (a, b) in self.index.iter_mut().zip(&other.index) {
            a.merge(b);
        }
    }

    /// Refuse the build when the counts so far prove it; warnings once `complete`.
    fn verdict(&self, plan: &StackPlan, grid_cells: u64, complete: bool) -> Result<Vec<String>> {
        let mut warnings = Vec::new();
        if !plan.terrain.is_empty() || plan.ground.is_some() {
            warnings.extend(plausibility::check_elevations(
                &plan.recipe.dsm,
                &self.dsm,
                plan.recipe.allow_any_elevation,
                complete,
            )?);
        }
        if plan.needs_spectral() {
            for (count, input) in self.reflectance.iter().zip(&plan.spectral) {
                warnings.extend(plausibility::check_reflectance(
                    &input.band.path,
                    input.band.role.name(),
                    input.band.band,
                    count,
                    grid_cells,
                    plan.recipe.allow_any_reflectance,
                    complete,
                )?);
            }
        }
        if complete {
            for (count, band) in self.index.iter().zip(&plan.bands) {
                if let Producer::Index(index) = &band.producer {
                    if count.outside > 0 {
                        let (lo, hi) = index.valid_range;
                        warnings.push(format!(
                            "band {}: {} cells ({}) lie outside the index's valid range {lo} to {hi} \
                             (reflectance outside 0–1 in its bands); recorded in stack.json",
                            band.name,
                            count.outside,
                            plausibility::percent(count.fraction())
                        ));
                    }
                }
            }
        }
        Ok(warnings)
    }

    /// Band `i`'s sidecar fields with its plausibility record added: the valid-range count
    /// of an index, the reflectance-range count of a reflectance band, the elevation-range
    /// count of the elevation band.
    fn band_records(
        &self,
        plan: &StackPlan,
        i: usize,
        mut extra: serde_json::Map<String, serde_json::Value>,
    ) -> serde_json::Map<String, serde_json::Value> {
        match &plan.bands[i].producer {
            Producer::Index(index) => {
                extra.insert(
                    "outside_valid_range".into(),
                    self.index[i].record(index.valid_range),
                );
            }
            Producer::Reflectance(role) => {
                if let Some(k) = plan.spectral.iter().position(|s| &s.band.role == role) {
                    extra.insert(
                        "outside_plausible_range".into(),
                        self.reflectance[k].record(REFLECTANCE_RANGE),
                    );
                }
            }
            Producer::Terrain(_) if plan.bands[i].feature == "elevation" => {
                extra.insert(
                    "outside_plausible_range".into(),
                    self.dsm.record(ELEVATION_RANGE_M),
                );
            }
            _ => {}
        }
        extra
    }
}

/// Reflectance of every mapped band over block `w`, resampled onto the target grid and
/// masked (nodata, alpha, zero fill).
fn read_reflectance(plan: &StackPlan, w: Window) -> Result<BandArrays> {
    let mut stored = Vec::with_capacity(plan.spectral.len());
    for input in &plan.spectral {
        let data = align::resample_window(
            input.source.as_ref(),
            input.band.band,
            &plan.target,
            w,
            plan.recipe.resampling,
        )?;
        stored.push((&input.band, data));
    }
    let alpha = match &plan.alpha {
        Some((src, band)) => Some(align::resample_window(
            src.as_ref(),
            *band,
            &plan.target,
            w,
            Resampling::Nearest,
        )?),
        None => None,
    };
    spectral::to_reflectance(
        stored,
        alpha.as_ref().map(|a| a.view()),
        MaskOptions {
            zero_fill: plan.recipe.zero_is_nodata,
        },
    )
}

/// Every input file of a recipe with its role: dsm, ortho, then one-file-per-band inputs
/// (an alpha mask file included).
pub fn input_files(recipe: &Recipe) -> Vec<(String, PathBuf)> {
    let mut files: Vec<(String, PathBuf)> = vec![("dsm".into(), recipe.dsm.clone())];
    if let Some(o) = &recipe.ortho {
        files.push(("ortho".into(), o.clone()));
    }
    for spec in &recipe.band_files {
        if let Ok((role, path, _)) = spectral::parse_band_file(spec) {
            let role = role.map_or_else(|| "alpha".to_string(), |r| r.name().to_string());
            files.push((role, path));
        }
    }
    files
}

/// SHA-256 of every input file, hashed in parallel.
fn hash_sources(plan: &StackPlan) -> Result<Vec<SourceMetadata>> {
    let mut files: Vec<(String, PathBuf)> = vec![("dsm".into(), plan.recipe.dsm.clone())];
    if let Some(o) = &plan.recipe.ortho {
        files.push(("ortho".into(), o.clone()));
    }
    for input in &plan.spectral {
        if !files.iter().any(|(_, p)| p == &input.band.path) {
            files.push((input.band.role.name().to_string(), input.band.path.clone()));
        }
    }
    files
        .par_iter()
        .map(|(role, path)| {
            Ok(SourceMetadata {
                role: role.clone(),
                path: path.to_string_lossy().into_owned(),
                sha256: sha256_file(path)?,
            })
        })
        .collect()
}

pub use crate::checksum::sha256_file;

/// Progress on a terminal (bar with rate and time left) or as log lines.
enum Reporter {
    Bar(ProgressBar),
    Lines { started: Instant, last_tenth: usize },
    Quiet,
}

fn progress_bar(mode: Progress, total: usize) -> Reporter {
    match mode {
        Progress::Quiet => Reporter::Quiet,
        Progress::Auto if std::io::stderr().is_terminal() => {
            let bar = ProgressBar::new(total as u64);
            bar.set_style(
                ProgressStyle::with_template(
                    "{elapsed_precise} [{bar:32}] {pos}/{len} blocks  {per_sec}  {eta} left",
                )
                .expect("valid progress template")
                .progress_chars("=> "),
            );
            Reporter::Bar(bar)
        }
        Progress::Auto => Reporter::Lines {
            started: Instant::now(),
            last_tenth: 0,
        },
    }
}

impl Reporter {
    fn advance(&mut self, done: usize, total: usize) {
        match self {
            Reporter::Bar(bar) => bar.set_position(done as u64),
            Reporter::Lines {
                started,
                last_tenth,
            } => {
                let tenth = done * 10 / total.max(1);
                if tenth > *last_tenth {
                    *last_tenth = tenth;
                    eprintln!(
                        "terrastack: {done}/{total} blocks ({}%) after {:.1} s",
                        done * 100 / total.max(1),
                        started.elapsed().as_secs_f64()
                    );
                }
            }
            Reporter::Quiet => {}
        }
    }

    fn finish(&self) {
        if let Reporter::Bar(bar) = self {
            bar.finish_and_clear();
        }
    }
}

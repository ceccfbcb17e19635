//! Many flights from one manifest: in parallel within a memory budget, resumable after
//! any interruption, shardable across a cluster, with a multi-temporal stack at the end.
//!
//! - [`manifest`]: the TOML manifest, its checks, and the common grid.
//! - [`ledger`]: one record per finished flight, so reruns skip it.
//! - [`shard`]: the deterministic partition of flights for a cluster scheduler.
//! - [`shift`]: between-flight offsets by phase correlation.
//! - [`temporal`]: the multi-temporal stack and its summaries across dates.
//! - [`report`]: `batch-report.json` and the printed table.
//!
//! Output root layout: `flights/ID/` (each flight's stack), `temporal/` (the
//! multi-temporal stack), `ledger/ID.json` (finished-flight records),
//! `ledger-temporal.json`, `batch-report.json`, `collection.json` (the STAC Collection
//! linking the stacks' Items, [`crate::stack::stac`]), and `.terrastack.lock` while a run holds
//! the root (exclusively; shards share it).
//!
//! Order of work for one flight: hash its inputs; estimate its shift against the reference
//! flight (or take it from the ledger when the inputs are unchanged); derive its grid and
//! the hash of its parameters; skip it when the ledger record matches, else build it into
//! its folder (atomic: `stack.json` last) and then write its record (atomic). A kill at any
//! moment leaves either no record (the flight is rebuilt, replacing any finished-looking
//! folder) or a record of a complete stack; builds are deterministic, so the resumed batch
//! ends with the same bytes as an uninterrupted one.

pub mod ledger;
pub mod manifest;
pub mod report;
pub mod shard;
pub mod shift;
pub mod temporal;

use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Mutex;
use std::time::Instant;

use crate::atomic_file;
use crate::error::{Error, Result};
use crate::grid::Grid;
use crate::input_guard;
use crate::output_lock::OutputLock;
use crate::raster;
use crate::stack::{self, BuildOptions, Progress, Recipe};

use ledger::{sha256_file, sha256_hex, InputHash, LedgerRecord, ShiftRecord, LEDGER_FORMAT};
pub use manifest::Manifest;
use manifest::{Flight, ShiftLayer};
use report::{
    AlignmentReport, BatchReport, FlightReport, ReferenceReplaced, ShiftReport, Status,
    TemporalReport, REPORT_FORMAT,
};
pub use shard::Shard;
pub use shift::AlignMode;
use temporal::DatedStack;

/// Folder of the flights' stacks inside the output root.
pub const FLIGHTS_DIR: &str = "flights";
/// Folder of the multi-temporal stack inside the output root.
pub const TEMPORAL_DIR: &str = "temporal";
/// Record of the finished multi-temporal stack.
pub const TEMPORAL_LEDGER: &str = "ledger-temporal.json";

/// How a batch runs.
#[derive(Clone, Debug)]
pub struct BatchOptions {
    /// Flights built at once (each gets `threads / jobs` threads and `memory / jobs` bytes).
    pub jobs: usize,
    pub shard: Shard,
    /// Output root instead of the manifest's.
    pub out: Option<PathBuf>,
    /// Whether to build flights on the common grid moved by their estimated shifts;
    /// `None` takes the manifest's `batch.align` (default auto, see `shift::AlignMode`).
    pub align: Option<AlignMode>,
    /// Worker threads in all; `None` = one per core.
    pub threads: Option<usize>,
    /// Memory budget of the whole batch in bytes.
    pub memory_bytes: u64,
    /// No progress lines.
    pub quiet: bool,
}

impl Default for BatchOptions {
    fn default() -> Self {
        BatchOptions {
            jobs: 1,
            shard: Shard::ALL,
            out: None,
            align: None,
            threads: None,
            memory_bytes: 2 << 30,
            quiet: false,
        }
    }
}

/// One flight build as the batch asks for it.
#[derive(Clone, Debug)]
pub struct BuildRequest {
    pub recipe: Recipe,
    /// The flight's stack folder (replaced if it holds a stack).
    pub out: PathBuf,
    /// The grid to build on: the common grid, moved by the shift when aligning.
    pub grid: Grid,
    pub date: String,
    pub threads: usize,
    pub memory_bytes: u64,
}

/// The work the batch hands out: building one flight's stack, reading rasters' grids and
/// estimating shifts. [`StackWork`] does it with the stack executor; tests substitute
/// their own.
pub trait FlightWork: Sync {
    /// Build one stack; returns its band count.
    fn build(&self, request: BuildRequest) -> Result<usize>;
    /// The grid of a raster file.
    fn grid_of(&self, path: &Path) -> Result<Grid>;
    /// Offset of `flight` against `reference` on `layer`, sampled on `grid`: (east, north
    /// in CRS units, correlation peak).
    fn shift(
        &self,
        reference: &Flight,
        flight: &Flight,
        layer: ShiftLayer,
        grid: &Grid,
    ) -> Result<(f64, f64, f64)>;
}

/// [`FlightWork`] done by the stack executor ([`crate::stack::build`]) and the raster
/// readers.
#[derive(Clone, Copy, Debug, Default)]
pub struct StackWork;

impl FlightWork for StackWork {
    fn build(&self, r: BuildRequest) -> Result<usize> {
        let mut options = BuildOptions::new(&r.out);
        options.force = true;
        options.threads = Some(r.threads);
        options.memory_bytes = r.memory_bytes;
        options.progress = Progress::Quiet;
        options.grid = Some(r.grid);
        options.date = Some(r.date);
        Ok(stack::build(r.recipe, &options)?.metadata.bands.len())
    }

    fn grid_of(&self, path: &Path) -> Result<Grid> {
        Ok(raster::open(path)?.grid().clone())
    }

    fn shift(
        &self,
        reference: &Flight,
        flight: &Flight,
        layer: ShiftLayer,
        grid: &Grid,
    ) -> Result<(f64, f64, f64)> {
        let pick = |f: &Flight| -> Result<(PathBuf, usize)> {
            match layer {
                ShiftLayer::Dsm => Ok((f.recipe.dsm.clone(), f.recipe.dsm_band.unwrap_or(1))),
                ShiftLayer::Nir => f.nir_band().ok_or_else(|| {
                    Error::usage(format!(
                        "flight {:?} maps no nir band, so shifts cannot be estimated on it",
                        f.id
                    ))
                    .with_fix("map a nir band for every flight, or set batch.shift_layer = \"dsm\"")
                }),
            }
        };
        let (rp, rb) = pick(reference)?;
        let (mp, mb) = pick(flight)?;
        let r = raster::open(&rp)?;
        let m = raster::open(&mp)?;
        raster::check_band(r.as_ref(), rb)?;
        raster::check_band(m.as_ref(), mb)?;
        shift::estimate_ground_shift(r.as_ref(), rb, m.as_ref(), mb, grid)
    }
}

/// Run the batch: the shard's flights, then (unsharded runs) the multi-temporal stack.
/// Writes the report and returns it; failed flights are in the report, not an error. A
/// flight whose DSM cannot be read fails alone; when it is the reference flight, another
/// reference is chosen (`reference_replaced` in the report).
/// Errors are problems that stop the whole batch: an output that is an input, an output
/// root another run holds or that cannot be written (no report then), and no common grid
/// (the report is written first, every flight failed with the reason).
pub fn run(
    manifest: &Manifest,
    options: &BatchOptions,
    work: &dyn FlightWork,
) -> Result<BatchReport> {
    if options.jobs == 0 {
        return Err(Error::usage("--jobs must be at least 1"));
    }
    let root = options.out.clone().unwrap_or_else(|| manifest.out.clone());
    input_guard::refuse_output_over_input(&output_paths(manifest, &root), &batch_inputs(manifest))
        .map_err(|e| e.in_file(&manifest.path))?;
    std::fs::create_dir_all(root.join(FLIGHTS_DIR)).map_err(|e| Error::io(&root, e))?;
    // One batch at a time per output root (shards of one batch share it; each flight's
    // folder is locked by its build); temporary files of killed runs go under the lock.
    let _lock = if options.shard.is_all() {
        OutputLock::folder(&root)?
    } else {
        OutputLock::folder_shared(&root)?
    };
    atomic_file::remove_stale_partials(&root, None);
    atomic_file::remove_stale_partials(&root.join(ledger::LEDGER_DIR), None);

    // The common grid depends on every flight, not only this shard's, so that all shards
    // agree on it. A flight whose DSM cannot be read fails alone and is left out of the
    // intersection. When that is the reference flight, the earliest readable flight
    // becomes the reference (stated in the report); the choice depends only on the files,
    // so every shard makes the same one.
    let mut grids = Vec::with_capacity(manifest.flights.len());
    let mut unreadable: HashMap<String, String> = HashMap::new();
    for f in &manifest.flights {
        match work.grid_of(&f.recipe.dsm) {
            Ok(g) => grids.push((f.id.clone(), f.recipe.dsm.clone(), g)),
            Err(e) => {
                unreadable.insert(f.id.clone(), e.to_string());
            }
        }
    }
    let requested = manifest.reference_flight();
    let reference = if unreadable.contains_key(&requested.id) {
        manifest
            .flights
            .iter()
            .filter(|f| !unreadable.contains_key(&f.id))
            .min_by(|a, b| a.date.cmp(&b.date).then(a.id.cmp(&b.id)))
    } else {
        Some(requested)
    };
    let reference_replaced = unreadable.get(&requested.id).map(|e| ReferenceReplaced {
        requested: requested.id.clone(),
        reason: format!("its DSM cannot be read: {e}"),
    });
    let grid = match reference {
        None => Err(Error::file(
            &manifest.path,
            "no flight's DSM can be read, so there is no reference flight and no common grid",
        )
        .with_fix("correct the flights' dsm paths (each flight's error is in the report)")),
        Some(r) => {
            let ref_grid = &grids
                .iter()
                .find(|(id, _, _)| *id == r.id)
                .expect("the reference is readable")
                .2;
            let dsm_grids: Vec<(PathBuf, Grid)> = grids
                .iter()
                .map(|(_, p, g)| (p.clone(), g.clone()))
                .collect();
            manifest::common_grid(&manifest.grid, ref_grid, &dsm_grids)
                .map_err(|e| e.in_file(&manifest.path))
        }
    };
    let report_of = |flights: Vec<FlightReport>,
                     temporal: Option<TemporalReport>,
                     alignment: Option<AlignmentReport>| BatchReport {
        format: REPORT_FORMAT.into(),
        manifest: manifest.path.clone(),
        out: root.clone(),
        shard: options.shard.to_string(),
        reference: reference.unwrap_or(requested).id.clone(),
        reference_replaced: reference_replaced.clone(),
        alignment,
        flights,
        temporal,
    };
    let (grid, reference) = match grid {
        Ok(g) => (g, reference.expect("a grid needs a reference")),
        Err(e) => {
            // Nothing can be built without a common grid: every flight of the shard fails
            // with the reason, and the report says so before the error is returned.
            let flights = options
                .shard
                .select(manifest.flights.iter().map(|f| f.id.as_str()))
                .iter()
                .filter_map(|id| manifest.flights.iter().find(|f| f.id == *id))
                .map(|f| FlightReport {
                    id: f.id.clone(),
                    date: f.date.clone(),
                    status: Status::Failed,
                    seconds: 0.0,
                    bands: None,
                    dir: root.join(FLIGHTS_DIR).join(&f.id),
                    shift: None,
                    shift_error: None,
                    error: Some(unreadable.get(&f.id).cloned().unwrap_or_else(|| {
                        format!("not built: the common grid could not be made: {e}")
                    })),
                })
                .collect();
            report_of(flights, None, None).store(&root, options.shard)?;
            return Err(e);
        }
    };

    let selected = options
        .shard
        .select(manifest.flights.iter().map(|f| f.id.as_str()));
    let flights: Vec<&Flight> = selected
        .iter()
        .map(|id| {
            manifest
                .flights
                .iter()
                .find(|f| f.id == *id)
                .expect("selected from the manifest")
        })
        .collect();
    let jobs = options.jobs.min(flights.len()).max(1);
    let total_threads = options.threads.unwrap_or_else(|| {
        std::thread::available_parallelism()
            .map(|n| n.get())
            .unwrap_or(1)
    });
    let align = options.align.unwrap_or(manifest.align);
    let ctx = Context {
        manifest,
        reference,
        root: &root,
        grid: &grid,
        align,
        min_peak: shift::CONFIDENCE_FACTOR * shift::chance_peak_on(&grid),
        work,
        hashes: Mutex::new(HashMap::new()),
        threads: (total_threads / jobs).max(1),
        total_threads: total_threads.max(1),
        memory_bytes: options.memory_bytes / jobs as u64,
    };
    let next = AtomicUsize::new(0);
    let done = AtomicUsize::new(0);
    let results: Mutex<Vec<FlightReport>> = Mutex::new(Vec::new());
    std::thread::scope(|scope| {
        for _ in 0..jobs {
            scope.spawn(|| loop {
                let i = next.fetch_add(1, Ordering::SeqCst);
                let Some(flight) = flights.get(i) else { break };
                let started = Instant::now();
                let outcome = match unreadable.get(&flight.id) {
                    Some(e) => Ok(ctx.failed(flight, e.clone())),
                    None => std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| {
                        ctx.flight(flight)
                    })),
                };
                let mut rep = match outcome {
                    Ok(r) => r,
                    Err(panic) => {
                        let text = panic
                            .downcast_ref::<String>()
                            .cloned()
                            .or_else(|| panic.downcast_ref::<&str>().map(|s| s.to_string()))
                            .unwrap_or_else(|| "unknown".into());
                        ctx.failed(flight, format!("internal error while building: {text}"))
                    }
                };
                rep.seconds = started.elapsed().as_secs_f64();
                let n = done.fetch_add(1, Ordering::SeqCst) + 1;
                if !options.quiet {
                    eprintln!(
                        "[{n}/{}] {} {} in {:.1} s{}",
                        flights.len(),
                        rep.id,
                        rep.status.as_str(),
                        rep.seconds,
                        rep.error
                            .as_ref()
                            .map(|e| format!(": {}", e.lines().next().unwrap_or("")))
                            .unwrap_or_default()
                    );
                }
                results.lock().expect("results lock").push(rep);
            });
        }
    });
    let mut reports = results.into_inner().expect("results lock");
    reports.sort_by(|a, b| a.id.cmp(&b.id));

    let (alignment, unresolved) = ctx.alignment(&reports);
    let temporal = if options.shard.is_all()
        && manifest.temporal
        && reports.iter().all(|r| r.status != Status::Failed)
    {
        Some(match unresolved {
            // Misaligned dates would be stacked cell by cell: refuse until the user chooses.
            Some(problem) => TemporalReport {
                status: Status::Failed,
                seconds: 0.0,
                bands: None,
                dir: root.join(TEMPORAL_DIR),
                error: Some(format!(
                    "{problem}\n  fix: give --align on to apply the estimates anyway, or --align off \
                     to stack the flights as they are (batch.align in the manifest); or check the \
                     flights' overlap and set batch.shift_layer to another layer"
                )),
            },
            None => ctx.temporal(),
        })
    } else {
        None
    };
    let report = report_of(reports, temporal, Some(alignment));
    report.store(&root, options.shard)?;
    if options.shard.is_all() {
        write_collection(manifest, &root)?;
    }
    Ok(report)
}

struct Context<'a> {
    manifest: &'a Manifest,
    /// The reference flight in use (the manifest's, or the one chosen when its DSM is
    /// unreadable).
    reference: &'a Flight,
    root: &'a Path,
    grid: &'a Grid,
    /// The alignment mode of this run (options, else the manifest's).
    align: AlignMode,
    /// Correlation peak a shift needs to be confident (see `shift::CONFIDENCE_FACTOR`).
    min_peak: f64,
    work: &'a dyn FlightWork,
    /// SHA-256 of every file hashed in this run, so each is read once.
    hashes: Mutex<HashMap<PathBuf, String>>,
    threads: usize,
    total_threads: usize,
    memory_bytes: u64,
}

impl Context<'_> {
    fn hash(&self, path: &Path) -> Result<String> {
        if let Some(h) = self.hashes.lock().expect("hash lock").get(path) {
            return Ok(h.clone());
        }
        let h = sha256_file(path)?;
        self.hashes
            .lock()
            .expect("hash lock")
            .insert(path.to_path_buf(), h.clone());
        Ok(h)
    }

    fn dir(&self, flight: &Flight) -> PathBuf {
        self.root.join(FLIGHTS_DIR).join(&flight.id)
    }

    fn failed(&self, flight: &Flight, error: String) -> FlightReport {
        FlightReport {
            id: flight.id.clone(),
            date: flight.date.clone(),
            status: Status::Failed,
            seconds: 0.0,
            bands: None,
            dir: self.dir(flight),
            shift: None,
            shift_error: None,
            error: Some(error),
        }
    }

    /// Hash, estimate, skip or build one flight. Never panics on bad input; errors become
    /// a failed report.
    fn flight(&self, flight: &Flight) -> FlightReport {
        let mut rep = self.failed(flight, String::new());
        match self.flight_inner(flight, &mut rep) {
            Ok(()) => rep.error = None,
            Err(e) => {
                rep.status = Status::Failed;
                rep.bands = None;
                rep.error = Some(e.to_string());
            }
        }
        rep
    }

    fn flight_inner(&self, flight: &Flight, rep: &mut FlightReport) -> Result<()> {
        let reference = self.reference;
        let is_reference = flight.id == reference.id;
        let mut inputs = Vec::new();
        for (role, path) in flight.inputs() {
            inputs.push(InputHash {
                role,
                sha256: self.hash(&path)?,
                path: path.to_string_lossy().into_owned(),
            });
        }
        if !is_reference {
            let layer_file = match self.manifest.shift_layer {
                ShiftLayer::Dsm => Some(reference.recipe.dsm.clone()),
                ShiftLayer::Nir => reference.nir_band().map(|(p, _)| p),
            };
            if let Some(p) = layer_file {
                inputs.push(InputHash {
                    role: "reference".into(),
                    sha256: self.hash(&p)?,
                    path: p.to_string_lossy().into_owned(),
                });
            }
        }
        let previous = LedgerRecord::load(self.root, &flight.id);
        let shift = if is_reference {
            None
        } else if let Some(s) = previous
            .as_ref()
            .filter(|p| p.inputs == inputs)
            .and_then(|p| p.shift)
        {
            Some(s)
        } else {
            match self
                .work
                .shift(reference, flight, self.manifest.shift_layer, self.grid)
            {
                Ok((dx, dy, peak)) => Some(ShiftRecord { dx, dy, peak }),
                Err(e) if self.align != AlignMode::On => {
                    rep.shift_error = Some(e.to_string());
                    None
                }
                Err(e) => {
                    return Err(Error::usage(format!(
                        "the shift against the reference flight {:?} could not be estimated: {e}",
                        reference.id
                    )))
                }
            }
        };
        let decision = shift.map(|s| self.decide(&s));
        let applied = decision.as_ref().is_some_and(|d| d.0);
        let grid = match (applied, shift) {
            (true, Some(s)) => manifest::shifted_grid(self.grid, s.dx, s.dy),
            _ => self.grid.clone(),
        };
        rep.shift = shift
            .zip(decision)
            .map(|(s, (applied, confident, reason))| ShiftReport {
                dx: s.dx,
                dy: s.dy,
                dx_cells: s.dx / self.grid.res_x(),
                dy_cells: s.dy / self.grid.res_y(),
                peak: s.peak,
                confident,
                applied,
                reason,
            });
        let parameters = serde_json::json!({
            "recipe": flight.recipe,
            "grid": {
                "width": grid.width,
                "height": grid.height,
                "transform": grid.transform,
                "epsg": grid.crs.epsg,
                "wkt": grid.crs.wkt,
            },
            "date": flight.date,
            "shift_applied": applied,
        });
        let parameters_sha256 = sha256_hex(parameters.to_string().as_bytes());
        let dir = self.dir(flight);
        if let Some(prev) = previous
            .as_ref()
            .filter(|p| p.matches(&inputs, &parameters_sha256))
        {
            let json = dir.join("stack.json");
            if json.exists()
                && sha256_file(&json)? == prev.stack_json_sha256
                && dir.join("stack.tif").exists()
            {
                rep.status = Status::Skipped;
                rep.bands = Some(prev.bands);
                return Ok(());
            }
        }
        LedgerRecord::forget(self.root, &flight.id)?;
        atomic_file::remove_stale_partials(&dir, None);
        let bands = self.work.build(BuildRequest {
            recipe: flight.recipe.clone(),
            out: dir.clone(),
            grid,
            date: flight.date.clone(),
            threads: self.threads,
            memory_bytes: self.memory_bytes,
        })?;
        let record = LedgerRecord {
            format: LEDGER_FORMAT.into(),
            id: flight.id.clone(),
            date: flight.date.clone(),
            inputs,
            parameters_sha256,
            shift,
            shift_applied: applied,
            bands,
            stack_json_sha256: sha256_file(&dir.join("stack.json"))?,
        };
        record.store(self.root)?;
        rep.status = Status::Built;
        rep.bands = Some(bands);
        Ok(())
    }

    /// Whether to apply shift `s` in this run's mode: (applied, confident, reason).
    fn decide(&self, s: &ShiftRecord) -> (bool, bool, String) {
        let cells = (s.dx / self.grid.res_x()).hypot(s.dy / self.grid.res_y());
        let confident = s.peak >= self.min_peak;
        let size = format!(
            "{cells:.2} cells, peak {:.3} (confident from {:.3})",
            s.peak, self.min_peak
        );
        match self.align {
            AlignMode::On => (true, confident, format!("applied (--align on): {size}")),
            AlignMode::Off => (
                false,
                confident,
                format!("not applied (--align off): {size}"),
            ),
            AlignMode::Auto if cells <= shift::MIN_APPLIED_SHIFT_CELLS => (
                false,
                confident,
                format!(
                    "not applied: {size}, within {} cell",
                    shift::MIN_APPLIED_SHIFT_CELLS
                ),
            ),
            AlignMode::Auto if !confident => (
                false,
                false,
                format!("not applied: {size}, the estimate is not confident"),
            ),
            AlignMode::Auto => (true, true, format!("applied: {size}")),
        }
    }

    /// The alignment line of the report, and in `auto` mode the reason the multi-temporal
    /// stack must wait for a choice: a flight whose shift is longer than the threshold
    /// but doubtful, or could not be estimated.
    fn alignment(&self, reports: &[FlightReport]) -> (AlignmentReport, Option<String>) {
        let shifted: Vec<&FlightReport> = reports
            .iter()
            .filter(|r| r.id != self.manifest.reference)
            .collect();
        let applied = shifted
            .iter()
            .filter(|r| r.shift.as_ref().is_some_and(|s| s.applied))
            .count();
        let doubtful: Vec<String> = shifted
            .iter()
            .filter(|r| r.status != Status::Failed)
            .filter_map(|r| match &r.shift {
                Some(s)
                    if !s.confident
                        && s.dx_cells.hypot(s.dy_cells) > shift::MIN_APPLIED_SHIFT_CELLS =>
                {
                    Some(format!(
                        "{} ({:.2} cells, peak {:.3})",
                        r.id,
                        s.dx_cells.hypot(s.dy_cells),
                        s.peak
                    ))
                }
                None if r.shift_error.is_some() => Some(format!("{} (shift not estimated)", r.id)),
                _ => None,
            })
            .collect();
        let unresolved = (self.align == AlignMode::Auto && !doubtful.is_empty()).then(|| {
            format!(
                "the flights' alignment is in doubt for {}: stacking them cell by cell could mix \
                 different ground",
                doubtful.join(", ")
            )
        });
        let summary = match self.align {
            AlignMode::On => format!(
                "every estimated shift applied ({applied} of {} flights)",
                shifted.len()
            ),
            AlignMode::Off => {
                "no shift applied (--align off): the multi-temporal stack holds the flights as they are"
                    .to_string()
            }
            AlignMode::Auto if unresolved.is_some() => format!(
                "{applied} of {} flights aligned; multi-temporal stack refused until a choice is made for {}",
                shifted.len(),
                doubtful.join(", ")
            ),
            AlignMode::Auto => format!(
                "{applied} of {} flights aligned (shifts over {} cell with a confident estimate are applied)",
                shifted.len(),
                shift::MIN_APPLIED_SHIFT_CELLS
            ),
        };
        (
            AlignmentReport {
                mode: self.align.as_str().into(),
                min_shift_cells: shift::MIN_APPLIED_SHIFT_CELLS,
                min_peak: self.min_peak,
                summary,
            },
            unresolved,
        )
    }

    /// Build (or skip) the multi-temporal stack from every flight's finished stack.
    fn temporal(&self) -> TemporalReport {
        let started = Instant::now();
        let dir = self.root.join(TEMPORAL_DIR);
        let result = (|| -> Result<(Status, usize)> {
            let flights: Vec<DatedStack> = self
                .manifest
                .flights
                .iter()
                .map(|f| DatedStack {
                    id: f.id.clone(),
                    date: f.date.clone(),
                    dir: self.dir(f),
                    source_path: format!("../{FLIGHTS_DIR}/{}/stack.tif", f.id),
                })
                .collect();
            // Every flight of the manifest must be finished (an earlier shard may have
            // built some of them).
            let mut key = Vec::new();
            for f in &flights {
                let json = f.dir.join("stack.json");
                if !json.exists() {
                    return Err(Error::file(&json, "this flight has no finished stack yet")
                        .with_fix(
                            "run every shard of the batch first, then the batch without --shard",
                        ));
                }
                key.push(serde_json::json!({"id": f.id, "date": f.date, "stack_json_sha256": sha256_file(&json)?}));
            }
            let key = serde_json::json!({"flights": key, "grid": self.grid.transform, "width": self.grid.width, "height": self.grid.height});
            let key_sha = sha256_hex(key.to_string().as_bytes());
            let ledger_path = self.root.join(TEMPORAL_LEDGER);
            if let Ok(text) = std::fs::read_to_string(&ledger_path) {
                if let Ok(rec) = serde_json::from_str::<serde_json::Value>(&text) {
                    let out_json = dir.join("stack.json");
                    if rec["inputs_sha256"] == key_sha.as_str()
                        && out_json.exists()
                        && rec["stack_json_sha256"] == sha256_file(&out_json)?.as_str()
                    {
                        return Ok((Status::Skipped, rec["bands"].as_u64().unwrap_or(0) as usize));
                    }
                }
            }
            let _ = std::fs::remove_file(&ledger_path);
            atomic_file::remove_stale_partials(&dir, None);
            let pool = rayon::ThreadPoolBuilder::new()
                .num_threads(self.total_threads)
                .build()
                .map_err(|e| Error::usage(format!("cannot start the worker threads: {e}")))?;
            let meta =
                pool.install(|| temporal::write_temporal(&flights, self.grid, &dir, true))?;
            let rec = serde_json::json!({
                "format": LEDGER_FORMAT,
                "inputs_sha256": key_sha,
                "bands": meta.bands.len(),
                "stack_json_sha256": sha256_file(&dir.join("stack.json"))?,
            });
            ledger::write_atomic(
                &ledger_path,
                (serde_json::to_string_pretty(&rec).expect("json") + "\n").as_bytes(),
            )?;
            Ok((Status::Built, meta.bands.len()))
        })();
        let (status, bands, error) = match result {
            Ok((s, b)) => (s, Some(b), None),
            Err(e) => (Status::Failed, None, Some(e.to_string())),
        };
        TemporalReport {
            status,
            seconds: started.elapsed().as_secs_f64(),
            bands,
            dir,
            error,
        }
    }
}

/// The batch's STAC Collection (`collection.json` in `root`), linking the Items of the
/// flights' stacks and of the multi-temporal stack that exist.
fn write_collection(manifest: &Manifest, root: &Path) -> Result<()> {
    use crate::stack::stac;
    let mut items: Vec<String> = manifest
        .flights
        .iter()
        .map(|f| format!("{FLIGHTS_DIR}/{}/{}", f.id, stac::ITEM_FILE))
        .collect();
    items.push(format!("{TEMPORAL_DIR}/{}", stac::ITEM_FILE));
    // Named after the manifest, so that the same batch written anywhere (or resumed, or
    // run in shards) gives the same bytes.
    let id = manifest
        .path
        .file_stem()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "batch".into());
    stac::write_collection(root, &id, &items)
}

/// Every path a batch into `root` writes or replaces: each flight's stack folder and
/// ledger record, the multi-temporal stack and its record, the reports, the root's lock.
fn output_paths(manifest: &Manifest, root: &Path) -> Vec<PathBuf> {
    let mut v = Vec::new();
    for f in &manifest.flights {
        v.extend(stack::output::output_paths(
            &root.join(FLIGHTS_DIR).join(&f.id),
        ));
        v.push(LedgerRecord::path(root, &f.id));
    }
    v.extend(stack::output::output_paths(&root.join(TEMPORAL_DIR)));
    v.push(root.join(TEMPORAL_LEDGER));
    v.push(root.join(crate::stack::stac::COLLECTION_FILE));
    v.push(OutputLock::folder_lock_path(root));
    if let Ok(entries) = std::fs::read_dir(root) {
        v.extend(entries.flatten().map(|e| e.path()).filter(|p| {
            p.file_name()
                .is_some_and(|n| n.to_string_lossy().starts_with("batch-report"))
        }));
    }
    v.push(root.join(BatchReport::file_name(Shard::ALL)));
    v
}

/// Every input of a batch: the manifest and each flight's files (named by flight).
fn batch_inputs(manifest: &Manifest) -> Vec<(String, PathBuf)> {
    let mut v = vec![("manifest".to_string(), manifest.path.clone())];
    for f in &manifest.flights {
        v.extend(
            f.inputs()
                .into_iter()
                .map(|(role, p)| (format!("flight {:?} {role}", f.id), p)),
        );
    }
    v
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::grid::Crs;
    use std::sync::atomic::AtomicUsize;

    /// Stand-in for the stack executor: writes a small deterministic "stack" (bytes that
    /// depend on the request) and fails on a DSM whose name contains "broken".
    struct FakeWork {
        builds: AtomicUsize,
        grid: Grid,
        /// Correlation peak of every estimated shift.
        peak: f64,
    }

    impl FakeWork {
        fn new() -> FakeWork {
            FakeWork {
                builds: AtomicUsize::new(0),
                grid: Grid::new(
                    40,
                    30,
                    [500.0, 0.5, 0.0, 800.0, 0.0, -0.5],
                    Crs::from_epsg(32633),
                )
                .unwrap(),
                peak: 0.9,
            }
        }
    }

    impl FlightWork for FakeWork {
        fn build(&self, r: BuildRequest) -> Result<usize> {
            self.builds.fetch_add(1, Ordering::SeqCst);
            if r.recipe.dsm.to_string_lossy().contains("broken") {
                return Err(
                    Error::file(&r.recipe.dsm, "not a TIFF file").with_fix("give a GeoTIFF")
                );
            }
            let bytes = std::fs::read(&r.recipe.dsm).map_err(|e| Error::io(&r.recipe.dsm, e))?;
            std::fs::create_dir_all(&r.out).unwrap();
            std::fs::write(
                r.out.join("stack.tif"),
                [&bytes[..], r.date.as_bytes()].concat(),
            )
            .unwrap();
            std::fs::write(
                r.out.join("stack.json"),
                format!("{{\"t\": {:?}}}", r.grid.transform),
            )
            .unwrap();
            Ok(3)
        }
        fn grid_of(&self, _path: &Path) -> Result<Grid> {
            Ok(self.grid.clone())
        }
        fn shift(
            &self,
            _r: &Flight,
            _f: &Flight,
            _l: ShiftLayer,
            _g: &Grid,
        ) -> Result<(f64, f64, f64)> {
            Ok((0.5, -1.0, self.peak))
        }
    }

    fn site(ids: &[&str]) -> (tempfile::TempDir, Manifest) {
        let tmp = tempfile::tempdir().unwrap();
        let mut text = String::from("[batch]\ntemporal = false\nout = \"out\"\n");
        for (i, id) in ids.iter().enumerate() {
            std::fs::write(tmp.path().join(format!("{id}.tif")), format!("dsm of {id}")).unwrap();
            text += &format!(
                "[[flight]]\nid = \"{id}\"\ndate = \"2025-05-{:02}\"\ndsm = \"{id}.tif\"\n",
                i + 1
            );
        }
        let path = tmp.path().join("flights.toml");
        std::fs::write(&path, &text).unwrap();
        let m = Manifest::load(&path).unwrap();
        (tmp, m)
    }

    fn quiet() -> BatchOptions {
        BatchOptions {
            quiet: true,
            jobs: 2,
            align: Some(AlignMode::Off),
            ..Default::default()
        }
    }

    fn statuses(r: &BatchReport) -> Vec<(String, Status)> {
        r.flights.iter().map(|f| (f.id.clone(), f.status)).collect()
    }

    #[test]
    fn rerun_skips_and_changed_input_rebuilds() {
        let (tmp, m) = site(&["a", "b", "c"]);
        let work = FakeWork::new();
        let r1 = run(&m, &quiet(), &work).unwrap();
        assert!(r1.flights.iter().all(|f| f.status == Status::Built));
        assert_eq!(work.builds.load(Ordering::SeqCst), 3);
        // The reference (earliest date) has no shift; the others carry the estimate.
        assert!(r1.flights[0].shift.is_none());
        assert_eq!(r1.flights[1].shift.as_ref().unwrap().dx_cells, 1.0);
        let r2 = run(&m, &quiet(), &work).unwrap();
        assert!(
            r2.flights.iter().all(|f| f.status == Status::Skipped),
            "{:?}",
            statuses(&r2)
        );
        assert_eq!(work.builds.load(Ordering::SeqCst), 3);
        // A changed input rebuilds that flight only.
        std::fs::write(tmp.path().join("c.tif"), "new dsm of c").unwrap();
        let r3 = run(&m, &quiet(), &work).unwrap();
        assert_eq!(
            statuses(&r3),
            vec![
                ("a".into(), Status::Skipped),
                ("b".into(), Status::Skipped),
                ("c".into(), Status::Built)
            ]
        );
        // A touched output rebuilds too.
        std::fs::write(m.out.join("flights/b/stack.json"), "{}").unwrap();
        let r4 = run(&m, &quiet(), &work).unwrap();
        assert_eq!(r4.flights[1].status, Status::Built);
        // Aligning shifts changes the parameters of the shifted flights, not the reference.
        let aligned = BatchOptions {
            align: Some(AlignMode::On),
            ..quiet()
        };
        let r5 = run(&m, &aligned, &work).unwrap();
        assert_eq!(
            statuses(&r5),
            vec![
                ("a".into(), Status::Skipped),
                ("b".into(), Status::Built),
                ("c".into(), Status::Built)
            ]
        );
        let json = std::fs::read_to_string(m.out.join("flights/b/stack.json")).unwrap();
        // Origin moved by (+0.5 east, −1.0 north): 500.5, 799.0.
        assert!(json.contains("500.5") && json.contains("799.0"), "{json}");
        assert!(m.out.join("batch-report.json").exists());
    }

    #[test]
    fn auto_alignment_applies_confident_shifts_and_refuses_doubtful_stacks() {
        let (tmp, m) = site(&["a", "b"]);
        let auto = BatchOptions {
            align: None,
            ..quiet()
        };
        // The fake shift is 2.24 cells (1 east, 2 north on 0.5 m cells) with peak 0.9: the
        // chance peak of a 40 x 30 window is about 0.2, so the estimate is confident.
        let r = run(&m, &auto, &FakeWork::new()).unwrap();
        let sh = r.flights[1].shift.as_ref().unwrap();
        assert!(sh.applied && sh.confident, "{sh:?}");
        let a = r.alignment.as_ref().unwrap();
        assert_eq!(a.mode, "auto");
        assert!(
            a.summary.contains("1 of 1 flights aligned"),
            "{}",
            a.summary
        );
        assert!(r.table().contains("alignment (auto)"));
        // A weak peak: not applied, and the multi-temporal stack waits for a choice.
        let text = std::fs::read_to_string(&m.path)
            .unwrap()
            .replace("temporal = false", "temporal = true");
        std::fs::write(&m.path, text).unwrap();
        let m = Manifest::load(&m.path).unwrap();
        let weak = FakeWork {
            peak: 0.01,
            ..FakeWork::new()
        };
        let fresh = BatchOptions {
            out: Some(tmp.path().join("weak")),
            ..auto
        };
        let r = run(&m, &fresh, &weak).unwrap();
        let sh = r.flights[1].shift.as_ref().unwrap();
        assert!(!sh.applied && !sh.confident, "{sh:?}");
        let t = r.temporal.as_ref().unwrap();
        assert_eq!(t.status, Status::Failed);
        let e = t.error.as_deref().unwrap();
        assert!(
            e.contains("b (2.24 cells") && e.contains("--align off"),
            "{e}"
        );
        assert!(!tmp.path().join("weak/temporal/stack.json").exists());
    }

    #[test]
    fn one_failing_flight_does_not_stop_the_others() {
        let (tmp, m) = site(&["a", "broken", "c"]);
        let work = FakeWork::new();
        let r = run(&m, &quiet(), &work).unwrap();
        assert_eq!(
            statuses(&r),
            vec![
                ("a".into(), Status::Built),
                ("broken".into(), Status::Failed),
                ("c".into(), Status::Built)
            ]
        );
        let e = r.flights[1].error.as_deref().unwrap();
        assert!(e.contains("broken.tif") && e.contains("fix:"), "{e}");
        assert!(LedgerRecord::load(&m.out, "broken").is_none());
        // A missing input fails its flight with the file's name.
        std::fs::remove_file(tmp.path().join("c.tif")).unwrap();
        let r = run(&m, &quiet(), &work).unwrap();
        assert!(r.flights[2].error.as_deref().unwrap().contains("c.tif"));
        assert_eq!(r.flights[0].status, Status::Skipped);
    }

    #[test]
    fn shards_build_every_flight_once_and_match_a_whole_run() {
        let ids = ["f1", "f2", "f3", "f4", "f5"];
        let (_tmp, m) = site(&ids);
        let work = FakeWork::new();
        let mut seen = Vec::new();
        for index in 0..2 {
            let o = BatchOptions {
                shard: Shard { index, count: 2 },
                ..quiet()
            };
            let r = run(&m, &o, &work).unwrap();
            seen.extend(r.flights.iter().map(|f| f.id.clone()));
            assert!(m
                .out
                .join(format!("batch-report-shard-{index}-of-2.json"))
                .exists());
        }
        seen.sort();
        assert_eq!(seen, ids);
        assert_eq!(work.builds.load(Ordering::SeqCst), 5);
        // An unsharded run afterwards finds everything done.
        let r = run(&m, &quiet(), &work).unwrap();
        assert!(r.flights.iter().all(|f| f.status == Status::Skipped));
    }

    #[test]
    #[cfg(target_os = "linux")]
    fn stale_partials_are_cleared_before_a_rebuild() {
        let (_tmp, m) = site(&["a"]);
        let dir = m.out.join("flights/a");
        std::fs::create_dir_all(&dir).unwrap();
        // PID 4194304 is above Linux's pid_max limit (from memory): its writer is gone.
        std::fs::write(dir.join(".stack.tif.partial-4194304"), "half").unwrap();
        run(&m, &quiet(), &FakeWork::new()).unwrap();
        let mut names: Vec<String> = std::fs::read_dir(&dir)
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .collect();
        names.sort();
        assert_eq!(names, vec!["stack.json", "stack.tif"]);
    }
}

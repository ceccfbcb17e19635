//! `terrastack batch`: many flights from one manifest, in parallel, resumable, shardable;
//! a report table at the end and a non-zero exit when any flight failed.

use std::path::PathBuf;

use terrastack::batch::{
    self, manifest::Manifest, shard::Shard, AlignMode, BatchOptions, StackWork,
};
use terrastack::stack::output::parse_memory;
use terrastack::{Error, Result};

#[derive(clap::Args)]
pub struct Args {
    /// The batch manifest (TOML): shared settings and one [[flight]] table per flight.
    #[arg(value_name = "MANIFEST.toml")]
    pub manifest: PathBuf,
    /// Flights built at the same time; threads and the memory budget are split between them.
    #[arg(long, value_name = "N", default_value_t = 1)]
    pub jobs: usize,
    /// Build only shard I of N (I from 0): flights sorted by id, every N-th from the I-th.
    /// The multi-temporal stack is left to a run without --shard.
    #[arg(long, value_name = "I/N")]
    pub shard: Option<String>,
    /// Output root (default: the manifest's batch.out).
    #[arg(long, value_name = "DIR")]
    pub out: Option<PathBuf>,
    /// Apply the shifts estimated against the reference flight (building each flight on
    /// the common grid moved by its shift): auto (default, or the manifest's batch.align)
    /// applies shifts over 0.2 cell whose estimate is confident, and refuses the
    /// multi-temporal stack while a larger shift is doubtful; on applies every estimate;
    /// off applies none.
    #[arg(long, value_name = "auto|on|off", conflicts_with = "align_shifts")]
    pub align: Option<String>,
    /// The same as --align on.
    #[arg(long)]
    pub align_shifts: bool,
    /// Worker threads in all (default: one per core).
    #[arg(long, value_name = "N")]
    pub threads: Option<usize>,
    /// Memory budget of the whole batch, e.g. 4G or 1500M.
    #[arg(long, value_name = "SIZE", default_value = "2G")]
    pub memory: String,
    /// No progress lines and no table.
    #[arg(long, short)]
    pub quiet: bool,
}

pub fn run(args: Args) -> Result<()> {
    let shard = match &args.shard {
        Some(s) => Shard::parse(s)?,
        None => Shard::ALL,
    };
    if args.jobs == 0 {
        return Err(Error::usage("--jobs must be at least 1").with_fix("give --jobs 1 or more"));
    }
    if args.threads == Some(0) {
        return Err(Error::usage("--threads must be at least 1"));
    }
    terrastack::stack::executor::check_threads("--jobs", args.jobs)?;
    if let Some(n) = args.threads {
        terrastack::stack::executor::check_threads("--threads", n)?;
    }
    let memory_bytes = parse_memory(&args.memory)?;
    terrastack::allocator::keep_freed_memory(
        memory_bytes,
        args.jobs * terrastack::allocator::threads_or_cores(args.threads),
    );
    let manifest = Manifest::load(&args.manifest)?;
    let options = BatchOptions {
        jobs: args.jobs,
        shard,
        out: args.out,
        align: match (&args.align, args.align_shifts) {
            (Some(text), _) => Some(AlignMode::parse("--align", text)?),
            (None, true) => Some(AlignMode::On),
            (None, false) => None,
        },
        threads: args.threads,
        memory_bytes,
        quiet: args.quiet,
    };
    let report = batch::run(&manifest, &options, &StackWork)?;
    if !args.quiet {
        print!("{}", report.table());
        println!(
            "report: {}",
            report
                .out
                .join(batch::report::BatchReport::file_name(shard))
                .display()
        );
    }
    let failed = report.failed();
    let temporal_failed = report.temporal.as_ref().and_then(|t| t.error.clone());
    if !failed.is_empty() {
        let ids: Vec<&str> = failed.iter().map(|f| f.id.as_str()).collect();
        return Err(Error::file(
            &args.manifest,
            format!("{} of {} flights failed: {}", failed.len(), report.flights.len(), ids.join(", ")),
        )
        .with_fix("read each flight's error in the table above or in the report, correct it and rerun; finished flights are skipped"));
    }
    if let Some(e) = temporal_failed {
        return Err(Error::file(
            &args.manifest,
            format!("the multi-temporal stack failed: {e}"),
        )
        .with_fix("correct the problem and rerun; finished flights are skipped"));
    }
    Ok(())
}

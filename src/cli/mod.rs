//! Command-line front end: one file per command. Each command checks what the user typed,
//! builds the library's configuration from it and calls the library.

use clap::{Parser, Subcommand};

use terrastack::Result;

mod batch;
pub mod build;
mod demo;
mod features;
pub mod ground_args;
mod info;
mod sample;
mod texture_args;
mod verify;

/// Turn drone DSMs and multispectral orthomosaics into a co-registered, documented stack
/// of terrain and spectral predictor layers.
#[derive(Parser)]
#[command(name = "terrastack", version, about, long_about = None, propagate_version = true)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Build many flights from a manifest: parallel, resumable, shardable, multi-temporal.
    Batch(batch::Args),
    /// Build one flight's stack: DSM (and orthomosaic) → stack.tif, stack.json, preview.png.
    Build(Box<build::Args>),
    /// Build the stacks of the bundled demo site (invented data in sample-dsm/).
    Demo(demo::Args),
    /// Describe a raster or a stack folder: size, bands, transform, CRS, cell size, nodata;
    /// for a stack, also its per-band statistics from stack.json.
    Info(info::Args),
    /// List every feature: the word to ask for it, units, method, formula, reference.
    Features(features::Args),
    /// Check every terrain formula against closed-form surfaces; non-zero exit on failure.
    Verify(verify::Args),
    /// Training tables at labelled points, circles and polygons, with cross-validation folds.
    Sample(sample::Args),
}

/// Parse the command line and run the command.
pub fn run() -> Result<()> {
    let cli = Cli::parse();
    match cli.command {
        Command::Batch(args) => batch::run(args),
        Command::Build(args) => build::run(*args),
        Command::Demo(args) => demo::run(args),
        Command::Features(args) => features::run(args),
        Command::Info(args) => info::run(args),
        Command::Verify(args) => verify::run(args),
        Command::Sample(args) => sample::run(args),
    }
}

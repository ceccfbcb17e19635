//! `terrastack demo`: builds the stack of every flight of the bundled demo site
//! (`sample-dsm/`, invented data) and prints where the outputs are and a band table.
//!
//! Then it runs the season's batch manifest (`sample-dsm/flights.toml`) with automatic
//! shift alignment (`batch.align = "auto"`) into `batch/`: every flight on one common grid plus the multi-temporal
//! stack. It also samples the reference flight's stack at the site's labelled circles into a
//! training table with five stratified folds (`training.csv`). The demo replaces what it
//! built before in its own output folder, so it can be run again and again.

use std::path::{Path, PathBuf};

use serde_json::Value;
use terrastack::batch::{self, BatchOptions, Manifest, Shard, StackWork};
use terrastack::sample::{self, SampleOptions};
use terrastack::stack::{self, BuildOptions, Progress, Recipe, RecipeFlags};
use terrastack::{Error, Result};

use crate::cli::build::print_summary;

#[derive(clap::Args)]
pub struct Args {
    /// Where the demo's stacks go (one folder per flight date).
    #[arg(long, value_name = "DIR", default_value = "terrastack-demo")]
    pub out: PathBuf,
    /// The demo site's folder (default: ./sample-dsm, else the one in the source tree).
    #[arg(long, value_name = "DIR")]
    pub data: Option<PathBuf>,
    /// No progress output.
    #[arg(long, short)]
    pub quiet: bool,
}

/// The demo site's folder: the one given, `./sample-dsm`, or the source tree's.
fn data_dir(given: Option<PathBuf>) -> Result<PathBuf> {
    if let Some(d) = given {
        return Ok(d);
    }
    let here = PathBuf::from("sample-dsm");
    if here.join("site.json").exists() {
        return Ok(here);
    }
    let built_in = Path::new(env!("CARGO_MANIFEST_DIR")).join("sample-dsm");
    if built_in.join("site.json").exists() {
        return Ok(built_in);
    }
    Err(
        Error::usage("cannot find the demo site (sample-dsm/site.json)")
            .with_fix("run from the terrastack source folder, or pass --data PATH/TO/sample-dsm"),
    )
}

/// Whether `out` is the folder `data` or lies inside it (links and `..` resolved through
/// the nearest existing folder).
fn inside(out: &Path, data: &Path) -> bool {
    let Ok(data) = data.canonicalize() else {
        return false;
    };
    let mut rest = Vec::new();
    for a in out.ancestors() {
        let a = if a.as_os_str().is_empty() {
            Path::new(".")
        } else {
            a
        };
        if let Ok(real) = a.canonicalize() {
            let full: PathBuf = rest.iter().rev().fold(real, |p, n| p.join(n));
            return full.starts_with(&data);
        }
        if let Some(name) = a.file_name() {
            rest.push(name.to_owned());
        }
    }
    false
}

pub fn run(args: Args) -> Result<()> {
    let data = data_dir(args.data)?;
    // Every build, the batch and the table refuse to overwrite an input; the demo also
    // keeps its outputs out of the site's folder, so the bundled files stay as shipped.
    if inside(&args.out, &data) {
        return Err(Error::usage(format!(
            "--out {} lies inside the demo site's folder {}",
            args.out.display(),
            data.display()
        ))
        .with_fix("give --out a folder outside the demo data, e.g. --out terrastack-demo"));
    }
    let site_path = data.join("site.json");
    let text = std::fs::read_to_string(&site_path).map_err(|e| Error::io(&site_path, e))?;
    let site: Value = serde_json::from_str(&text)
        .map_err(|e| Error::file(&site_path, format!("not a demo site description: {e}")))?;
    let flights = site["flights"].as_array().ok_or_else(|| {
        Error::file(&site_path, "has no `flights` list").with_fix("regenerate the demo site")
    })?;
    let bands: Vec<String> = site["ortho"]["bands"]
        .as_array()
        .map(|b| {
            b.iter()
                .filter_map(|v| v.as_str().map(String::from))
                .collect()
        })
        .unwrap_or_default();
    let band_map = bands
        .iter()
        .enumerate()
        .map(|(i, role)| format!("{role}={}", i + 1))
        .collect::<Vec<_>>()
        .join(",");
    if let Some(name) = site["name"].as_str() {
        println!(
            "demo site: {name} (invented data), {} flights",
            flights.len()
        );
    }
    let mut reference_stack = None;
    for flight in flights {
        let date = flight["date"].as_str().unwrap_or("flight");
        let dsm = data.join(flight["dsm"].as_str().unwrap_or_default());
        let ortho = data.join(flight["ortho"].as_str().unwrap_or_default());
        let flags = RecipeFlags {
            dsm: Some(dsm),
            ortho: Some(ortho),
            bands: Some(band_map.clone()),
            reflectance_scale: Some("1/10000".into()),
            ..Default::default()
        };
        let recipe = Recipe::resolve(None, &flags)?;
        let mut options = BuildOptions::new(args.out.join(date));
        options.force = true;
        options.date = Some(date.to_string());
        options.progress = if args.quiet {
            Progress::Quiet
        } else {
            Progress::Auto
        };
        println!();
        println!("flight {date}");
        let report = stack::build(recipe, &options)?;
        print_summary(&report);
        if flight["reference"].as_bool() == Some(true) || reference_stack.is_none() {
            reference_stack = Some(report.dir.clone());
        }
    }
    let manifest_path = data.join("flights.toml");
    if manifest_path.exists() {
        let manifest = Manifest::load(&manifest_path)?;
        let options = BatchOptions {
            jobs: 1,
            shard: Shard::ALL,
            out: Some(args.out.join("batch")),
            align: None, // the manifest's choice: auto

            threads: None,
            memory_bytes: 2 << 30,
            quiet: args.quiet,
        };
        println!();
        println!(
            "batch {} (shifts estimated; applied where larger than 0.2 cell and confident):",
            manifest_path.display()
        );
        let report = batch::run(&manifest, &options, &StackWork)?;
        print!("{}", report.table());
    }
    let samples = data.join(site["samples"]["file"].as_str().unwrap_or("samples.csv"));
    if let (Some(stack_dir), true) = (reference_stack, samples.exists()) {
        let table = args.out.join("training.csv");
        let summary = sample::run(
            &stack_dir,
            &samples,
            &table,
            true,
            &SampleOptions::default(),
        )?;
        println!();
        println!("training table from {}:", stack_dir.display());
        print!("{summary}");
    }
    Ok(())
}

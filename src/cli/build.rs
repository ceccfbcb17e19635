//! `terrastack build`: one flight's DSM (and orthomosaic) → `stack.tif`, `stack.json`,
//! `preview.png`.

use std::path::PathBuf;

use terrastack::align::Resampling;
use terrastack::stack::output::parse_memory;
use terrastack::stack::settings::{ExtentRule, OutputCompression, WindowShape};
use terrastack::stack::{
    self, BuildOptions, BuildReport, Progress, Recipe, RecipeFile, RecipeFlags,
};
use terrastack::Result;

#[derive(clap::Args)]
pub struct Args {
    /// Digital surface model (float elevations; GeoTIFF, or any GDAL format with the gdal feature).
    #[arg(long, value_name = "FILE")]
    pub dsm: Option<PathBuf>,
    /// Band of the DSM file that holds elevations (needed when the file has several bands).
    #[arg(long, value_name = "N")]
    pub dsm_band: Option<usize>,
    /// Build even when elevations lie outside −500 m to 9000 m (after --z-factor), which
    /// is otherwise refused.
    #[arg(long)]
    pub allow_any_elevation: bool,
    /// Multispectral orthomosaic with several bands (use with --bands).
    #[arg(long, value_name = "FILE")]
    pub ortho: Option<PathBuf>,
    /// Which band of --ortho holds which role, e.g. blue=1,green=2,red=3,rededge=4,nir=5
    /// (optionally alpha=N for a coverage band, extra:NAME=N for a band of your own).
    #[arg(long, value_name = "ROLE=N,...")]
    pub bands: Option<String>,
    /// One band from its own file: ROLE=FILE or ROLE=FILE:BAND (repeatable).
    #[arg(long = "band", value_name = "ROLE=FILE[:BAND]")]
    pub band: Vec<String>,
    /// Features to build, comma-separated: terrain words, ground words (`dtm`, `height`,
    /// `ground`, `ground_distance`, and `WORD@dtm` for a terrain word on the ground, e.g.
    /// `slope@dtm`), texture words (`glcm@1.5@ndvi`, `stddev@2@nir`), index names,
    /// `reflectance`, `indices` (`terrastack features` lists them). Default: a terrain set at every
    /// scale plus reflectance and every index the mapped bands allow.
    #[arg(long, value_name = "LIST", value_delimiter = ',')]
    pub features: Option<Vec<String>>,
    /// Window radii in metres for windowed features, comma-separated (default 1,5); each
    /// must span at least 1.5 cells of the grid on both axes.
    #[arg(
        long,
        value_name = "METRES,...",
        value_delimiter = ',',
        allow_negative_numbers = true
    )]
    pub scales: Option<Vec<f64>>,
    /// Band math of your own: NAME=EXPRESSION over role names (repeatable).
    #[arg(long = "index", value_name = "NAME=EXPR")]
    pub index: Vec<String>,
    /// Recipe file (TOML); flags given here override it.
    #[arg(long, value_name = "FILE.toml")]
    pub recipe: Option<PathBuf>,
    /// Cell size of the stack in metres (default: the DSM's).
    #[arg(long, value_name = "M")]
    pub resolution: Option<f64>,
    /// Resampling onto the stack's grid.
    #[arg(long, value_enum, value_name = "KIND")]
    pub resampling: Option<ResamplingArg>,
    /// Extent of the stack: the DSM's, or the intersection of all inputs.
    #[arg(long, value_enum, value_name = "RULE")]
    pub extent: Option<ExtentRule>,
    /// Window shape of windowed features: square (default; the same cost per cell at any
    /// radius) or disc (exact disc, cells within the radius; cost grows with the radius,
    /// about 80x more at 25 m than at 0.5 m on 5 cm cells)
    #[arg(long, value_enum, value_name = "SHAPE")]
    pub window: Option<WindowShape>,
    /// Fraction of a window's cells that must be valid (default 0.75).
    #[arg(long, value_name = "F")]
    pub min_valid: Option<f64>,
    /// Multiplier turning DSM values into metres (e.g. 0.3048 for feet).
    #[arg(long, value_name = "F")]
    pub z_factor: Option<f64>,
    /// Reflectance = stored · scale + offset: one number (1e-4, 1/65535) or ROLE=NUMBER pairs.
    #[arg(long, value_name = "S")]
    pub reflectance_scale: Option<String>,
    /// Reflectance offset, same form as the scale.
    #[arg(long, value_name = "O", allow_hyphen_values = true)]
    pub reflectance_offset: Option<String>,
    /// Build even when more than 1% of a band's cells have reflectance outside −0.05 to
    /// 1.5 (after scale and offset), which is otherwise refused.
    #[arg(long)]
    pub allow_any_reflectance: bool,
    /// Treat cells where every orthomosaic band is 0 as outside the flown area.
    #[arg(long)]
    pub zero_is_nodata: bool,
    /// Compression of stack.tif.
    #[arg(long, value_enum, value_name = "CODEC")]
    pub compression: Option<OutputCompression>,
    /// Output folder (receives stack.tif, stack.json, preview.png and, with --date,
    /// stack.stac.json).
    #[arg(long, value_name = "DIR")]
    pub out: PathBuf,
    /// Date of the flight: recorded on every band of stack.json, in the preview's heading
    /// and as the day of the STAC Item (stack.stac.json, written only when the date is known).
    #[arg(long, value_name = "YYYY-MM-DD")]
    pub date: Option<String>,
    /// Replace an existing stack in the output folder (never an input, nor a folder
    /// another run is writing).
    #[arg(long)]
    pub force: bool,
    /// Worker threads (default: one per core).
    #[arg(long, value_name = "N")]
    pub threads: Option<usize>,
    /// Memory budget for the whole build, e.g. 2G, 512M (default 2G).
    #[arg(long, value_name = "SIZE", default_value = "2G")]
    pub memory: String,
    /// Largest stack grid built, in cells (default 4294967296 = 2^32, a 65536² grid); a
    /// larger grid is refused, as it usually comes from a mistyped --resolution.
    #[arg(long, value_name = "CELLS")]
    pub cell_limit: Option<String>,
    /// No progress output.
    #[arg(long, short)]
    pub quiet: bool,
    #[command(flatten)]
    pub ground: super::ground_args::GroundArgs,
    #[command(flatten)]
    pub texture: super::texture_args::TextureArgs,
}

/// Resampling kinds as typed on the command line.
#[derive(Clone, Copy, clap::ValueEnum)]
pub enum ResamplingArg {
    Nearest,
    Bilinear,
    Cubic,
    Average,
}

impl From<ResamplingArg> for Resampling {
    fn from(r: ResamplingArg) -> Resampling {
        match r {
            ResamplingArg::Nearest => Resampling::Nearest,
            ResamplingArg::Bilinear => Resampling::Bilinear,
            ResamplingArg::Cubic => Resampling::Cubic,
            ResamplingArg::Average => Resampling::Average,
        }
    }
}

pub fn run(args: Args) -> Result<()> {
    let recipe_file = args.recipe.as_deref().map(RecipeFile::load).transpose()?;
    let flags = RecipeFlags {
        dsm: args.dsm,
        dsm_band: args.dsm_band,
        allow_any_elevation: args.allow_any_elevation,
        allow_any_reflectance: args.allow_any_reflectance,
        ortho: args.ortho,
        bands: args.bands,
        band_files: args.band,
        features: args.features,
        scales_m: args.scales,
        expressions: args.index,
        resolution_m: args.resolution,
        extent: args.extent,
        resampling: args.resampling.map(Into::into),
        window: args.window,
        min_valid_fraction: args.min_valid,
        z_factor: args.z_factor,
        reflectance_scale: args.reflectance_scale,
        reflectance_offset: args.reflectance_offset,
        zero_is_nodata: args.zero_is_nodata,
        compression: args.compression,
        ground: args.ground.section(),
        texture: args.texture.section(),
    };
    if let Some(date) = &args.date {
        terrastack::batch::manifest::check_date(date).map_err(|problem| {
            terrastack::Error::usage(format!("--date: {problem}"))
                .with_fix("give the flight date as YYYY-MM-DD, e.g. --date 2026-07-08")
        })?;
    }
    let recipe = Recipe::resolve(recipe_file.as_ref(), &flags)?;
    let mut options = BuildOptions::new(args.out);
    options.date = args.date;
    options.recipe_file = args.recipe;
    options.force = args.force;
    options.threads = args.threads;
    options.memory_bytes = parse_memory(&args.memory)?;
    terrastack::allocator::keep_freed_memory(
        options.memory_bytes,
        terrastack::allocator::threads_or_cores(args.threads),
    );
    if let Some(text) = &args.cell_limit {
        options.cell_limit = parse_cell_limit(text)?;
    }
    options.progress = if args.quiet {
        Progress::Quiet
    } else {
        Progress::Auto
    };
    let report = stack::build(recipe, &options)?;
    if !args.quiet {
        print_summary(&report);
    }
    Ok(())
}

/// `--cell-limit`: a whole number of cells, digits or scientific notation (`5e9`).
fn parse_cell_limit(text: &str) -> Result<u64> {
    let bad = || {
        terrastack::Error::usage(format!("--cell-limit {text:?} is not a number of cells"))
            .with_fix("give a whole number of cells of at least 1, e.g. --cell-limit 1e10")
    };
    if let Ok(n) = text.trim().parse::<u64>() {
        return if n >= 1 { Ok(n) } else { Err(bad()) };
    }
    let v: f64 = text.trim().parse().map_err(|_| bad())?;
    // Every f64 below 2^64 converts exactly to u64 once it is whole.
    if v.is_finite() && v >= 1.0 && v.fract() == 0.0 && v < 18_446_744_073_709_551_616.0 {
        Ok(v as u64)
    } else {
        Err(bad())
    }
}

/// Where the outputs are and a table of bands with their ranges.
pub fn print_summary(report: &BuildReport) {
    let m = &report.metadata;
    println!(
        "stack: {} ({} x {} cells, {} bands, {} blocks of {} cells, {:.1} s)",
        report.dir.join("stack.tif").display(),
        m.grid.width,
        m.grid.height,
        m.bands.len(),
        report.blocks,
        report.block_size,
        report.seconds
    );
    println!("metadata: {}", report.dir.join("stack.json").display());
    println!("preview: {}", report.dir.join("preview.png").display());
    println!();
    println!(
        "{:>4}  {:<30} {:<10} {:>12} {:>12} {:>12} {:>7}",
        "band", "name", "units", "min", "mean", "max", "valid"
    );
    for b in &m.bands {
        let f = |v: Option<f64>| v.map(|x| format!("{x:.4}")).unwrap_or_else(|| "-".into());
        println!(
            "{:>4}  {:<30} {:<10} {:>12} {:>12} {:>12} {:>6.1}%",
            b.index,
            b.name,
            b.units,
            f(b.stats.min),
            f(b.stats.mean),
            f(b.stats.max),
            b.stats.valid_fraction * 100.0
        );
    }
}

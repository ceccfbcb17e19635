//! `terrastack info`: a human summary of a raster or stack folder; `--json` for scripts.

use std::path::PathBuf;

use terrastack::Result;

#[derive(clap::Args)]
pub struct Args {
    /// A raster file or a stack folder.
    pub path: PathBuf,
    /// Print JSON instead of the human summary.
    #[arg(long)]
    pub json: bool,
}

pub fn run(args: Args) -> Result<()> {
    let _ = args;
    unimplemented!()
}

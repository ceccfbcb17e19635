//! `terrastack verify`: closed-form surfaces, error tables, pass/fail.

use terrastack::Result;

#[derive(clap::Args)]
pub struct Args {
    /// Print the error table as JSON.
    #[arg(long)]
    pub json: bool,
}

pub fn run(args: Args) -> Result<()> {
    let _ = args;
    unimplemented!()
}

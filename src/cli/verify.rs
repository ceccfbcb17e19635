//! `terrastack verify`: checks every terrain formula against closed-form surfaces, prints
//! the error table (or JSON with `--json`) and exits non-zero when a check fails.

use terrastack::{verify, Error, Result};

#[derive(clap::Args)]
pub struct Args {
    /// Print the error table as JSON.
    #[arg(long)]
    pub json: bool,
}

pub fn run(args: Args) -> Result<()> {
    let report = verify::run();
    if args.json {
        let text = serde_json::to_string_pretty(&report)
            .map_err(|e| Error::usage(format!("could not encode the report as JSON: {e}")))?;
        println!("{text}");
    } else {
        print!("{}", report.to_table());
    }
    if report.passed() {
        Ok(())
    } else {
        Err(Error::CheckFailed {
            problem: format!(
                "{} of {} verification checks failed (see the table above)",
                report.failures(),
                report.checks.len()
            ),
        })
    }
}

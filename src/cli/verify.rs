//! `terrastack verify`: checks every terrain formula against closed-form surfaces, prints
//! the error table (or JSON with `--json`) and exits non-zero when a check fails.

use std::io::Write;

use terrastack::{verify, Error, Result};

/// Writes `text` to standard output; a closed pipe (e.g. `| head`) is not an error.
fn emit(text: &str) -> Result<()> {
    let mut out = std::io::stdout().lock();
    match out.write_all(text.as_bytes()).and_then(|_| out.flush()) {
        Ok(()) => Ok(()),
        Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => Ok(()),
        Err(e) => Err(Error::io("standard output", e)),
    }
}

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
        emit(&format!("{text}\n"))?;
    } else {
        emit(&report.to_table())?;
    }
    if report.passed() {
        Ok(())
    } else {
        Err(Error::CheckFailed {
            problem: format!(
                "{} of {} verification checks failed (see the table above)",
                report.failures(),
                report.len()
            ),
        })
    }
}

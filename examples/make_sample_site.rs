//! Writes the invented demo site (Quillmere Bend) into a folder:
//!
//! ```sh
//! cargo run --release --example make_sample_site -- sample-dsm
//! ```
//!
//! The output is the same byte for byte on every run; `tests/demo_site.rs` compares a
//! fresh generation with the committed `sample-dsm/`.

use std::path::PathBuf;
use std::process::ExitCode;

fn main() -> ExitCode {
    let args: Vec<String> = std::env::args().skip(1).collect();
    if args.len() != 1 || args[0].starts_with('-') {
        eprintln!(
            "usage: make_sample_site OUTPUT_DIR\n  writes the invented demo site, e.g. \
             `cargo run --release --example make_sample_site -- sample-dsm`"
        );
        return ExitCode::from(2);
    }
    let dir = PathBuf::from(&args[0]);
    match terrastack::demo_site::generate(&dir) {
        Ok(summary) => {
            println!(
                "{} (invented demo site) written to {}",
                summary.name,
                dir.display()
            );
            for (file, bytes) in &summary.files {
                println!("  {:<24} {:>9} bytes", file.display(), bytes);
            }
            println!(
                "  {} files, {:.2} MB, {} sample circles",
                summary.files.len(),
                summary.total_bytes as f64 / 1e6,
                summary.samples
            );
            ExitCode::SUCCESS
        }
        Err(e) => {
            eprintln!("error: {e}");
            ExitCode::from(u8::try_from(e.exit_code()).unwrap_or(1))
        }
    }
}

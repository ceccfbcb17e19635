//! Outputs never overwrite inputs.
//!
//! Every command checks its output paths against its input paths with
//! [`refuse_output_over_input`] before it writes anything. Two paths name the same file
//! when their canonical forms are equal (symbolic links and `..` resolved) or, on Unix,
//! when they lead to the same device and inode (hard links too). `--force` never lifts
//! this check.

use std::fs;
use std::path::{Path, PathBuf};

use crate::error::{Error, Result};

/// What makes a file itself: its device and inode on Unix; `None` elsewhere or when it
/// does not exist. Symbolic links are followed.
pub fn file_identity(path: &Path) -> Option<(u64, u64)> {
    let meta = fs::metadata(path).ok()?;
    identity_of(&meta)
}

/// Device and inode of an open file's metadata (Unix); `None` elsewhere.
pub fn identity_of(meta: &fs::Metadata) -> Option<(u64, u64)> {
    #[cfg(unix)]
    {
        use std::os::unix::fs::MetadataExt;
        Some((meta.dev(), meta.ino()))
    }
    #[cfg(not(unix))]
    {
        let _ = meta;
        None
    }
}

/// Whether `a` and `b` name one existing file (see the module doc).
pub fn same_file(a: &Path, b: &Path) -> bool {
    match (a.canonicalize(), b.canonicalize()) {
        (Ok(x), Ok(y)) if x == y => return true,
        (Ok(_), Ok(_)) => {}
        _ => return false,
    }
    matches!((file_identity(a), file_identity(b)), (Some(x), Some(y)) if x == y)
}

/// Refuse when any of `outputs` is one of `inputs` (role, path), naming both and saying
/// that `--force` does not change it. Outputs that do not exist yet pass.
pub fn refuse_output_over_input(outputs: &[PathBuf], inputs: &[(String, PathBuf)]) -> Result<()> {
    for out in outputs.iter().filter(|o| fs::metadata(o).is_ok()) {
        for (role, input) in inputs {
            if same_file(out, input) {
                return Err(Error::file(
                    out,
                    format!(
                        "this output is the {role} input {} (the same file), which would be overwritten",
                        input.display()
                    ),
                )
                .with_fix(
                    "write the outputs somewhere else, or move the input out of the way; inputs are never overwritten, not even with --force",
                ));
            }
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn links_and_dot_dot_do_not_escape() {
        let tmp = tempfile::tempdir().unwrap();
        let d = tmp.path();
        fs::create_dir_all(d.join("out")).unwrap();
        fs::write(d.join("out/stack.tif"), "dsm").unwrap();
        fs::write(d.join("other.tif"), "other").unwrap();
        let inputs = |p: PathBuf| vec![("dsm".to_string(), p)];
        let outs = vec![d.join("out/stack.tif"), d.join("out/stack.json")];
        // The same path spelled through `..`.
        let e = refuse_output_over_input(&outs, &inputs(d.join("out/../out/stack.tif")))
            .unwrap_err()
            .to_string();
        assert!(e.contains("stack.tif") && e.contains("dsm input") && e.contains("--force"));
        assert!(refuse_output_over_input(&outs, &inputs(d.join("other.tif"))).is_ok());
        // A missing input or output is not a collision.
        assert!(refuse_output_over_input(&outs, &inputs(d.join("none.tif"))).is_ok());
        #[cfg(unix)]
        {
            std::os::unix::fs::symlink(d.join("out/stack.tif"), d.join("sym.tif")).unwrap();
            fs::hard_link(d.join("out/stack.tif"), d.join("hard.tif")).unwrap();
            for link in ["sym.tif", "hard.tif"] {
                assert!(
                    refuse_output_over_input(&outs, &inputs(d.join(link))).is_err(),
                    "{link}"
                );
            }
            assert!(same_file(&d.join("hard.tif"), &d.join("out/stack.tif")));
            assert!(!same_file(&d.join("hard.tif"), &d.join("other.tif")));
        }
    }
}

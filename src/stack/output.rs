//! Output folders that never hold a half-written stack.
//!
//! Every output file is written under a temporary name in the same folder
//! (`.NAME.partial-PID`) and renamed when complete; renames within one folder are atomic on
//! POSIX file systems. `stack.json` is renamed last and marks a finished stack: a
//! `stack.tif` without its `stack.json` is incomplete. An existing stack is only replaced
//! with `force`, and then its `stack.json` is removed first so that an old sidecar never
//! describes a new image.

use std::fs;
use std::path::{Path, PathBuf};

use crate::error::{Error, Result};

/// Files a finished stack folder holds, in the order they are committed (sidecar last).
pub const STACK_FILES: [&str; 3] = ["stack.tif", "preview.png", "stack.json"];

/// An output folder being written.
#[derive(Debug)]
pub struct OutputDir {
    dir: PathBuf,
    pending: Vec<(PathBuf, PathBuf)>,
}

impl OutputDir {
    /// Prepare `dir` for a new stack: create it if needed, check it is writable, and refuse
    /// to go on when it already holds a stack unless `force`. Nothing is deleted here.
    pub fn prepare(dir: &Path, force: bool) -> Result<OutputDir> {
        if dir.exists() && !dir.is_dir() {
            return Err(
                Error::file(dir, "the output path exists and is not a folder")
                    .with_fix("give --out a folder path"),
            );
        }
        let existing: Vec<&str> = STACK_FILES
            .iter()
            .copied()
            .filter(|name| dir.join(name).exists())
            .collect();
        if !existing.is_empty() && !force {
            return Err(Error::file(
                dir,
                format!("the folder already holds a stack ({})", existing.join(", ")),
            )
            .with_fix("choose another --out folder, or add --force to replace it"));
        }
        fs::create_dir_all(dir).map_err(|e| Error::io(dir, e))?;
        // Probe writability now, before any long computation.
        let probe = dir.join(format!(".terrastack-write-probe-{}", std::process::id()));
        fs::write(&probe, b"").map_err(|e| Error::io(dir, e))?;
        let _ = fs::remove_file(&probe);
        Ok(OutputDir {
            dir: dir.to_path_buf(),
            pending: Vec::new(),
        })
    }

    /// The folder.
    pub fn dir(&self) -> &Path {
        &self.dir
    }

    /// The temporary path under which `name` is written; registered for [`commit`].
    ///
    /// [`commit`]: OutputDir::commit
    pub fn temp_path(&mut self, name: &str) -> PathBuf {
        let tmp = self
            .dir
            .join(format!(".{name}.partial-{}", std::process::id()));
        self.pending.push((tmp.clone(), self.dir.join(name)));
        tmp
    }

    /// Rename every registered file into place, `stack.json` last. An old `stack.json` is
    /// removed before anything else is replaced.
    pub fn commit(mut self) -> Result<()> {
        let old_sidecar = self.dir.join("stack.json");
        if old_sidecar.exists() {
            fs::remove_file(&old_sidecar).map_err(|e| Error::io(&old_sidecar, e))?;
        }
        self.pending
            .sort_by_key(|(_, final_path)| final_path.file_name().map(|n| n == "stack.json"));
        for (tmp, final_path) in std::mem::take(&mut self.pending) {
            fs::rename(&tmp, &final_path).map_err(|e| Error::io(&final_path, e))?;
        }
        Ok(())
    }
}

impl Drop for OutputDir {
    /// An abandoned build (error, panic) removes its temporary files.
    fn drop(&mut self) {
        for (tmp, _) in &self.pending {
            let _ = fs::remove_file(tmp);
        }
    }
}

/// Parse a memory size: a number of bytes with an optional unit K, M, G, T (powers of
/// 1024; "KiB", "MB", "GiB" … accepted alike), e.g. "2G", "512MiB", "1.5g".
pub fn parse_memory(text: &str) -> Result<u64> {
    let t = text.trim();
    let split = t.find(|c: char| c.is_ascii_alphabetic()).unwrap_or(t.len());
    let (num, unit) = t.split_at(split);
    let value: f64 = num.trim().parse().map_err(|_| {
        Error::usage(format!("--memory {text:?} is not a size"))
            .with_fix("write a size such as 2G, 512M or 1500MiB")
    })?;
    let factor = match unit.trim().to_ascii_lowercase().as_str() {
        "" | "b" => 1u64,
        "k" | "kb" | "kib" => 1 << 10,
        "m" | "mb" | "mib" => 1 << 20,
        "g" | "gb" | "gib" => 1 << 30,
        "t" | "tb" | "tib" => 1 << 40,
        other => {
            return Err(Error::usage(format!("--memory: unknown unit {other:?}"))
                .with_fix("use K, M, G or T (powers of 1024)"))
        }
    };
    if !value.is_finite() || value <= 0.0 {
        return Err(Error::usage(format!("--memory {text:?} must be positive")));
    }
    // `as u64` would saturate 1e30G to 16 EiB and round 0.1 (bytes) down to 0: refuse
    // sizes outside 1 byte ..= 1 EiB instead.
    let bytes = value * factor as f64;
    if !(1.0..=(1u64 << 60) as f64).contains(&bytes) {
        return Err(
            Error::usage(format!("--memory {text:?} is outside 1 byte to 1 EiB"))
                .with_fix("write a size such as 2G, 512M or 1500MiB"),
        );
    }
    Ok(bytes as u64)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn memory_sizes() {
        assert_eq!(parse_memory("2G").unwrap(), 2 << 30);
        assert_eq!(parse_memory("512MiB").unwrap(), 512 << 20);
        assert_eq!(parse_memory("1.5g").unwrap(), 3 << 29);
        assert_eq!(parse_memory("4096").unwrap(), 4096);
        assert!(parse_memory("lots").is_err());
        assert!(parse_memory("2X").is_err());
        assert!(parse_memory("-1G").is_err());
        assert!(parse_memory("99999999999T").is_err());
        assert!(parse_memory("0.1").is_err());
        assert_eq!(parse_memory("1").unwrap(), 1);
    }

    #[test]
    fn existing_stack_needs_force_and_sidecar_goes_last() {
        let tmp = tempfile::tempdir().unwrap();
        let dir = tmp.path().join("out");
        let mut out = OutputDir::prepare(&dir, false).unwrap();
        let json = out.temp_path("stack.json");
        let tif = out.temp_path("stack.tif");
        fs::write(&json, "{}").unwrap();
        fs::write(&tif, "tif").unwrap();
        out.commit().unwrap();
        assert!(dir.join("stack.tif").exists() && dir.join("stack.json").exists());
        let e = OutputDir::prepare(&dir, false).unwrap_err().to_string();
        assert!(
            e.contains("already holds a stack") && e.contains("--force"),
            "{e}"
        );
        assert!(OutputDir::prepare(&dir, true).is_ok());
    }

    #[test]
    fn abandoned_build_leaves_nothing() {
        let tmp = tempfile::tempdir().unwrap();
        {
            let mut out = OutputDir::prepare(tmp.path(), false).unwrap();
            let tif = out.temp_path("stack.tif");
            fs::write(&tif, "partial").unwrap();
        }
        assert_eq!(fs::read_dir(tmp.path()).unwrap().count(), 0);
    }
}

//! Output folders that never hold a half-written or mixed stack.
//!
//! [`OutputDir::prepare`] creates the folder (and any missing parents) only once the
//! inputs have been checked, and takes the folder's exclusive lock
//! ([`crate::output_lock`]) for the whole build, so two builds into one folder never mix
//! their files: the second is refused, naming the first. Under the lock it checks for an
//! existing stack (replaced only with `force`) and removes the temporary files of killed
//! runs ([`crate::atomic_file::remove_stale_partials`]).
//!
//! Every output file is written under a temporary name in the folder
//! (`.NAME.partial-PID`, [`crate::atomic_file`]) and renamed when complete; renames within
//! one folder are atomic on POSIX file systems. `stack.json` is renamed last and marks a
//! finished stack: a `stack.tif` without its `stack.json` is incomplete. When a stack is
//! replaced, its old `stack.json` is removed first so that an old sidecar never describes
//! a new image. A build that fails removes its temporary files, its lock, and the folders
//! it created if they are left empty.

use std::fs;
use std::path::{Path, PathBuf};

use crate::atomic_file::{self, PendingFile};
use crate::error::{Error, Result};
use crate::output_lock::OutputLock;

/// Files a finished stack folder holds, in the order they are committed (sidecar last).
pub const STACK_FILES: [&str; 4] = ["stack.tif", "preview.png", "stack.stac.json", "stack.json"];

/// Every path a stack build into `dir` writes or replaces: the stack files and the
/// folder's lock file. None of them may be an input ([`crate::input_guard`]).
pub fn output_paths(dir: &Path) -> Vec<PathBuf> {
    let mut v: Vec<PathBuf> = STACK_FILES.iter().map(|n| dir.join(n)).collect();
    v.push(OutputLock::folder_lock_path(dir));
    v
}

/// An output folder being written, locked by this process.
#[derive(Debug)]
pub struct OutputDir {
    dir: PathBuf,
    pending: Vec<PendingFile>,
    /// Folders this build created, outermost first; removed again if the build fails and
    /// leaves them empty.
    created: Vec<PathBuf>,
    lock: Option<OutputLock>,
    committed: bool,
}

impl OutputDir {
    /// Prepare `dir` for a new stack: create it if needed, lock it, refuse to go on when
    /// it already holds a stack unless `force`, and remove temporary files that killed
    /// runs left. Nothing of an existing stack is deleted here.
    pub fn prepare(dir: &Path, force: bool) -> Result<OutputDir> {
        if dir.exists() && !dir.is_dir() {
            return Err(
                Error::file(dir, "the output path exists and is not a folder")
                    .with_fix("give --out a folder path"),
            );
        }
        let mut out = OutputDir {
            dir: dir.to_path_buf(),
            pending: Vec::new(),
            created: Vec::new(),
            lock: None,
            committed: false,
        };
        // Missing folders, outermost first, so that a failed build can remove exactly them.
        let mut missing: Vec<PathBuf> = dir
            .ancestors()
            .filter(|a| !a.as_os_str().is_empty() && !a.exists())
            .map(Path::to_path_buf)
            .collect();
        missing.reverse();
        out.created = missing;
        fs::create_dir_all(dir).map_err(|e| Error::io(dir, e))?;
        out.lock = Some(OutputLock::folder(dir)?);
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
        atomic_file::remove_stale_partials(dir, None);
        Ok(out)
    }

    /// The folder.
    pub fn dir(&self) -> &Path {
        &self.dir
    }

    /// The temporary path under which `name` is written; registered for [`commit`].
    ///
    /// [`commit`]: OutputDir::commit
    pub fn temp_path(&mut self, name: &str) -> PathBuf {
        let pending =
            PendingFile::new(&self.dir.join(name)).expect("stack file names are file names");
        let tmp = pending.temp_path().to_path_buf();
        self.pending.push(pending);
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
            .sort_by_key(|p| p.path().file_name().map(|n| n == "stack.json"));
        for pending in std::mem::take(&mut self.pending) {
            pending.commit()?;
        }
        self.committed = true;
        Ok(())
    }
}

impl Drop for OutputDir {
    /// An abandoned build (error, panic) removes its temporary files (dropping them), its
    /// lock, and the folders it created if they are empty.
    fn drop(&mut self) {
        self.pending.clear();
        self.lock = None;
        if !self.committed {
            for d in self.created.iter().rev() {
                match fs::remove_dir(d) {
                    Err(e) if e.kind() != std::io::ErrorKind::NotFound => break,
                    _ => {}
                }
            }
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
        // Folders the build created go too, those that were there stay.
        {
            let _out = OutputDir::prepare(&tmp.path().join("a/b/c"), false).unwrap();
            assert!(tmp.path().join("a/b/c/.terrastack.lock").exists());
        }
        assert_eq!(fs::read_dir(tmp.path()).unwrap().count(), 0);
    }

    #[test]
    fn a_locked_folder_is_refused_and_stale_partials_are_removed_under_the_lock() {
        let tmp = tempfile::tempdir().unwrap();
        let dir = tmp.path();
        let first = OutputDir::prepare(dir, false).unwrap();
        let e = OutputDir::prepare(dir, true).unwrap_err().to_string();
        assert!(e.contains("another terrastack run"), "{e}");
        drop(first);
        // PID 4194304 is above Linux's pid_max limit (from memory): its writer is gone.
        fs::write(dir.join(".stack.tif.partial-4194304"), "half").unwrap();
        let out = OutputDir::prepare(dir, false).unwrap();
        if cfg!(target_os = "linux") {
            assert!(!dir.join(".stack.tif.partial-4194304").exists());
        }
        drop(out);
        assert!(output_paths(dir).iter().all(|p| !p.exists()));
    }
}

//! The one way terrastack writes a file: nobody ever sees a part of it.
//!
//! The bytes go to a temporary sibling `.NAME.partial-PID` (the same folder, so the final
//! rename is atomic on POSIX file systems), are flushed to disk, and the temporary file is
//! renamed over `NAME` only when complete. A writer that fails removes its temporary file
//! (also when it unwinds); one that is killed leaves it, and the next run that holds the
//! folder's lock removes it with [`remove_stale_partials`] once the process named by its
//! PID is gone.
//!
//! Every output of the project goes through here: the stack folder
//! (`stack::output::OutputDir`), the batch ledger and report, training tables and the
//! demo site's files.

use std::fs::{self, File, OpenOptions};
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};

use crate::error::{Error, Result};

/// The marker between a file's name and the writer's PID in a temporary name.
const PARTIAL: &str = ".partial-";

/// The temporary name under which this process writes `path`: `.NAME.partial-PID` in
/// the same folder.
pub fn temp_path_for(path: &Path) -> Result<PathBuf> {
    let name = path.file_name().ok_or_else(|| {
        Error::file(path, "the output has no file name").with_fix("give the output a file name")
    })?;
    Ok(path.with_file_name(format!(
        ".{}{PARTIAL}{}",
        name.to_string_lossy(),
        std::process::id()
    )))
}

/// A file being written under its temporary name. [`commit`](PendingFile::commit) moves
/// it into place; dropping it uncommitted removes the temporary file.
#[derive(Debug)]
pub struct PendingFile {
    tmp: PathBuf,
    path: PathBuf,
    committed: bool,
}

impl PendingFile {
    /// Start writing `path` (nothing is created yet: write to [`temp_path`]).
    ///
    /// [`temp_path`]: PendingFile::temp_path
    pub fn new(path: &Path) -> Result<PendingFile> {
        Ok(PendingFile {
            tmp: temp_path_for(path)?,
            path: path.to_path_buf(),
            committed: false,
        })
    }

    /// Where the bytes are written until the commit.
    pub fn temp_path(&self) -> &Path {
        &self.tmp
    }

    /// The final path.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// Flush the temporary file to disk and rename it over the final path.
    pub fn commit(mut self) -> Result<()> {
        let synced = OpenOptions::new()
            .write(true)
            .open(&self.tmp)
            .and_then(|f| f.sync_all());
        synced.map_err(|e| Error::io(&self.tmp, e))?;
        fs::rename(&self.tmp, &self.path).map_err(|e| Error::io(&self.path, e))?;
        self.committed = true;
        Ok(())
    }
}

impl Drop for PendingFile {
    fn drop(&mut self) {
        if !self.committed {
            let _ = fs::remove_file(&self.tmp);
        }
    }
}

/// Write `path` atomically: `write` creates and fills the temporary path it is given
/// (e.g. a GeoTIFF writer); on success the file is moved into place, on failure removed.
pub fn write_with(path: &Path, write: impl FnOnce(&Path) -> Result<()>) -> Result<()> {
    let pending = PendingFile::new(path)?;
    write(pending.temp_path())?;
    pending.commit()
}

/// Write `path` atomically through a buffered writer filled by `write`.
pub fn write_streamed(
    path: &Path,
    write: impl FnOnce(&mut BufWriter<File>) -> std::io::Result<()>,
) -> Result<()> {
    write_with(path, |tmp| {
        let file = File::create(tmp).map_err(|e| Error::io(path, e))?;
        let mut w = BufWriter::new(file);
        write(&mut w)
            .and_then(|()| w.flush())
            .map_err(|e| Error::io(path, e))
    })
}

/// Write `bytes` to `path` atomically.
pub fn write_bytes(path: &Path, bytes: &[u8]) -> Result<()> {
    write_streamed(path, |w| w.write_all(bytes))
}

/// The final name and the writer's PID of a temporary name `.NAME.partial-PID`.
pub fn parse_temp_name(name: &str) -> Option<(&str, u32)> {
    let rest = name.strip_prefix('.')?;
    let (final_name, pid) = rest.rsplit_once(PARTIAL)?;
    let pid: u32 = pid.parse().ok()?;
    (!final_name.is_empty()).then_some((final_name, pid))
}

/// Whether process `pid` has ended. Read from `/proc` on Linux; elsewhere no process is
/// known to have ended (its files are kept). This process is never gone.
fn process_is_gone(pid: u32) -> bool {
    if pid == std::process::id() {
        return false;
    }
    if cfg!(target_os = "linux") {
        Path::new("/proc").is_dir() && !Path::new("/proc").join(pid.to_string()).exists()
    } else {
        false
    }
}

/// Remove the temporary files of writers that have ended (`.NAME.partial-PID` whose
/// process is gone) from `dir`, for every `NAME` or (with `only`) for that one. Returns
/// the files removed. Call it only while holding the lock that covers those names, so
/// that no live writer of them exists (a live writer's files are kept anyway).
pub fn remove_stale_partials(dir: &Path, only: Option<&str>) -> Vec<PathBuf> {
    let mut removed = Vec::new();
    let Ok(entries) = fs::read_dir(dir) else {
        return removed;
    };
    for entry in entries.flatten() {
        let name = entry.file_name().to_string_lossy().into_owned();
        let Some((final_name, pid)) = parse_temp_name(&name) else {
            continue;
        };
        if only.is_some_and(|o| o != final_name) || !process_is_gone(pid) {
            continue;
        }
        let is_file = entry.file_type().map(|t| t.is_file()).unwrap_or(false);
        if is_file && fs::remove_file(entry.path()).is_ok() {
            removed.push(entry.path());
        }
    }
    removed.sort();
    removed
}

#[cfg(test)]
mod tests {
    use super::*;

    fn names(dir: &Path) -> Vec<String> {
        let mut v: Vec<String> = fs::read_dir(dir)
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .collect();
        v.sort();
        v
    }

    #[test]
    fn temporary_names_carry_the_pid_and_parse_back() {
        let tmp = temp_path_for(Path::new("out/stack.tif")).unwrap();
        let expected = format!(".stack.tif.partial-{}", std::process::id());
        assert_eq!(tmp, Path::new("out").join(&expected));
        assert_eq!(
            parse_temp_name(&expected),
            Some(("stack.tif", std::process::id()))
        );
        assert_eq!(
            parse_temp_name(".a.partial-3.partial-77"),
            Some(("a.partial-3", 77))
        );
        assert_eq!(parse_temp_name("stack.tif.partial-12"), None);
        assert_eq!(parse_temp_name(".stack.tif.partial-x"), None);
        assert_eq!(parse_temp_name(".stack.tif.partial"), None);
        assert!(temp_path_for(Path::new("/")).is_err());
    }

    #[test]
    fn failed_or_abandoned_writes_leave_nothing() {
        let dir = tempfile::tempdir().unwrap();
        let out = dir.path().join("t.csv");
        let err = write_streamed(&out, |w| {
            w.write_all(b"partial")?;
            Err(std::io::Error::other("disk full"))
        });
        assert!(err.unwrap_err().to_string().contains("t.csv"));
        let err = write_with(&out, |tmp| {
            fs::write(tmp, "half").unwrap();
            Err(Error::usage("stopped"))
        });
        assert!(err.is_err());
        {
            let p = PendingFile::new(&out).unwrap();
            fs::write(p.temp_path(), "abandoned").unwrap();
        }
        assert!(names(dir.path()).is_empty(), "{:?}", names(dir.path()));
        write_bytes(&out, b"a,b\n").unwrap();
        write_streamed(&out, |w| w.write_all(b"c,d\n")).unwrap();
        assert_eq!(fs::read_to_string(&out).unwrap(), "c,d\n");
        assert_eq!(names(dir.path()), vec!["t.csv"]);
    }

    #[test]
    fn only_partials_of_ended_processes_are_removed() {
        let dir = tempfile::tempdir().unwrap();
        let d = dir.path();
        // PID 4194304 is above Linux's pid_max limit (2^22, from memory), so it never runs.
        let dead = ".stack.tif.partial-4194304";
        let own = format!(".stack.json.partial-{}", std::process::id());
        let other = ".t.csv.partial-4194304";
        for n in [dead, own.as_str(), other, "stack.tif", ".note.partial-abc"] {
            fs::write(d.join(n), "x").unwrap();
        }
        if cfg!(target_os = "linux") {
            assert_eq!(remove_stale_partials(d, Some("t.csv")), vec![d.join(other)]);
            assert_eq!(remove_stale_partials(d, None), vec![d.join(dead)]);
        }
        let left = names(d);
        assert!(left.contains(&own) && left.contains(&"stack.tif".to_string()));
        assert!(left.contains(&".note.partial-abc".to_string()));
    }
}

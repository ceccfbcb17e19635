//! Exclusive locks on outputs, so that two runs never write one stack, batch or table.
//!
//! A lock is an advisory lock (std's `File::try_lock`: flock(2) on Unix, LockFileEx on
//! Windows) on a small lock file: `DIR/.terrastack.lock` for an output folder,
//! `.NAME.lock` beside an output file. The operating system releases it when the process
//! ends in any way, kill -9 included, so a lock never stays stuck. The holder writes its
//! PID, command line and start time into the file, so that a refused run names it.
//!
//! Shards of one batch share its output root: they take the root's lock shared, which
//! only an exclusive holder (an unsharded run) conflicts with.
//!
//! A finished exclusive holder removes the lock file while still holding the lock. A run that
//! locked a file which has meanwhile been removed or replaced (its device and inode no
//! longer at the path) tries again on the new one, so two runs never both hold the lock.

use std::fs::{self, File, OpenOptions, TryLockError};
use std::io::{Read, Seek, SeekFrom, Write};
use std::path::{Path, PathBuf};
use std::time::{SystemTime, UNIX_EPOCH};

use crate::error::{Error, Result};
use crate::input_guard::{file_identity, identity_of};

/// Name of the lock file of an output folder.
pub const FOLDER_LOCK: &str = ".terrastack.lock";

/// A held lock; released (and, when exclusive, its file removed) when dropped.
#[derive(Debug)]
pub struct OutputLock {
    file: File,
    path: PathBuf,
    shared: bool,
}

impl OutputLock {
    /// The lock file of output folder `dir`.
    pub fn folder_lock_path(dir: &Path) -> PathBuf {
        dir.join(FOLDER_LOCK)
    }

    /// The lock file of output file `path`: `.NAME.lock` in the same folder.
    pub fn file_lock_path(path: &Path) -> PathBuf {
        let name = path
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_default();
        path.with_file_name(format!(".{name}.lock"))
    }

    /// Lock output folder `dir` (which must exist) for this process, or refuse naming the
    /// folder and the process that holds it.
    pub fn folder(dir: &Path) -> Result<OutputLock> {
        OutputLock::acquire(&OutputLock::folder_lock_path(dir), dir, false)
    }

    /// Lock output folder `dir` shared with other shared holders and against exclusive
    /// ones (shards of one batch share its output root; a whole run excludes them all).
    /// A shared holder leaves the lock file in place when it ends (others may hold it).
    pub fn folder_shared(dir: &Path) -> Result<OutputLock> {
        OutputLock::acquire(&OutputLock::folder_lock_path(dir), dir, true)
    }

    /// Lock output file `path` (its folder must exist) for this process, or refuse naming
    /// the file and the process that holds it.
    pub fn file(path: &Path) -> Result<OutputLock> {
        OutputLock::acquire(&OutputLock::file_lock_path(path), path, false)
    }

    fn acquire(lock_path: &Path, what: &Path, shared: bool) -> Result<OutputLock> {
        loop {
            let mut file = OpenOptions::new()
                .read(true)
                .write(true)
                .create(true)
                .truncate(false)
                .open(lock_path)
                .map_err(|e| Error::io(what, e))?;
            let locked = if shared {
                file.try_lock_shared()
            } else {
                file.try_lock()
            };
            match locked {
                Ok(()) => {}
                Err(TryLockError::WouldBlock) => {
                    let mut holder = String::new();
                    let _ = file.read_to_string(&mut holder);
                    return Err(busy(what, &holder));
                }
                Err(TryLockError::Error(e)) => {
                    return Err(Error::file(
                        what,
                        format!("cannot lock the output against other runs ({e})"),
                    )
                    .with_fix(
                        "write the outputs to a local folder whose file system supports file locks",
                    ));
                }
            }
            // A holder that just finished may have removed the file we opened: start again
            // on the file now at the path.
            let ours = file.metadata().ok().and_then(|m| identity_of(&m));
            if ours.is_some() && ours != file_identity(lock_path) {
                continue;
            }
            let started = SystemTime::now()
                .duration_since(UNIX_EPOCH)
                .map(|d| d.as_secs())
                .unwrap_or(0);
            let command: Vec<String> = std::env::args().collect();
            let text = format!(
                "pid {}\nstarted {started}\ncommand {}\n",
                std::process::id(),
                command.join(" ")
            );
            let written = file
                .set_len(0)
                .and_then(|()| file.seek(SeekFrom::Start(0)))
                .and_then(|_| file.write_all(text.as_bytes()));
            written.map_err(|e| Error::io(lock_path, e))?;
            return Ok(OutputLock {
                file,
                path: lock_path.to_path_buf(),
                shared,
            });
        }
    }
}

impl Drop for OutputLock {
    /// Remove the lock file while the lock is still held (exclusive locks only), then
    /// release it.
    fn drop(&mut self) {
        let ours = self.file.metadata().ok().and_then(|m| identity_of(&m));
        if !self.shared && (ours.is_none() || ours == file_identity(&self.path)) {
            let _ = fs::remove_file(&self.path);
        }
        let _ = self.file.unlock();
    }
}

/// The refusal when another process holds the lock, naming it from the lock file's text.
fn busy(what: &Path, holder: &str) -> Error {
    let field = |key: &str| {
        holder
            .lines()
            .find_map(|l| l.strip_prefix(key).map(|v| v.trim().to_string()))
            .filter(|v| !v.is_empty())
    };
    let mut who = match field("pid ") {
        Some(pid) => format!("process {pid}"),
        None => "a process that is just starting".to_string(),
    };
    if let Some(cmd) = field("command ") {
        who += &format!(", `{cmd}`");
    }
    if let Some(since) = field("started ").and_then(|s| s.parse::<u64>().ok()) {
        let now = SystemTime::now()
            .duration_since(UNIX_EPOCH)
            .map(|d| d.as_secs())
            .unwrap_or(since);
        who += &format!(", running for {} s", now.saturating_sub(since));
    }
    Error::file(
        what,
        format!("another terrastack run is writing here ({who})"),
    )
    .with_fix("wait until that run ends (its lock goes with it, even if it is killed), or write to another output")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn second_holder_is_refused_with_the_first_named_and_release_cleans_up() {
        let tmp = tempfile::tempdir().unwrap();
        let dir = tmp.path();
        let first = OutputLock::folder(dir).unwrap();
        let text = fs::read_to_string(dir.join(FOLDER_LOCK)).unwrap();
        assert!(text.starts_with(&format!("pid {}\n", std::process::id())));
        // A second lock, even from this process, is refused (locks belong to open files).
        let e = OutputLock::folder(dir).unwrap_err();
        let m = e.to_string();
        assert!(
            m.contains(&dir.display().to_string())
                && m.contains(&format!("process {}", std::process::id()))
                && m.contains("running for"),
            "{m}"
        );
        assert_eq!(e.exit_code(), 1);
        drop(first);
        assert!(!dir.join(FOLDER_LOCK).exists());
        let again = OutputLock::folder(dir).unwrap();
        drop(again);
        // A file's lock lives beside it.
        let table = dir.join("t.csv");
        let lock = OutputLock::file(&table).unwrap();
        assert!(dir.join(".t.csv.lock").exists());
        assert!(OutputLock::file(&table).is_err());
        drop(lock);
        assert_eq!(fs::read_dir(dir).unwrap().count(), 0);
    }

    #[test]
    fn shared_holders_exclude_an_exclusive_one_only() {
        let tmp = tempfile::tempdir().unwrap();
        let a = OutputLock::folder_shared(tmp.path()).unwrap();
        let b = OutputLock::folder_shared(tmp.path()).unwrap();
        let e = OutputLock::folder(tmp.path()).unwrap_err().to_string();
        assert!(e.contains("another terrastack run"), "{e}");
        drop(a);
        assert!(OutputLock::folder(tmp.path()).is_err());
        drop(b);
        let whole = OutputLock::folder(tmp.path()).unwrap();
        assert!(OutputLock::folder_shared(tmp.path()).is_err());
        drop(whole);
        assert_eq!(fs::read_dir(tmp.path()).unwrap().count(), 0);
    }

    #[test]
    fn a_left_lock_file_without_a_holder_does_not_block() {
        let tmp = tempfile::tempdir().unwrap();
        // What a killed run leaves: the file, no lock.
        fs::write(tmp.path().join(FOLDER_LOCK), "pid 4194304\n").unwrap();
        let lock = OutputLock::folder(tmp.path()).unwrap();
        let text = fs::read_to_string(tmp.path().join(FOLDER_LOCK)).unwrap();
        assert!(text.starts_with(&format!("pid {}\n", std::process::id())));
        drop(lock);
        let e = OutputLock::folder(&tmp.path().join("missing"))
            .unwrap_err()
            .to_string();
        assert!(e.contains("missing"), "{e}");
    }
}

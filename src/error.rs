//! The one error type of terrastack.
//!
//! Every error names what it is about (a file, a flag, an expression), says what is wrong
//! and, where one is known, how to fix it. The binary prints `Display` and exits non-zero
//! with [`Error::exit_code`].

use std::fmt;
use std::io;
use std::path::{Path, PathBuf};

/// Result with terrastack's [`Error`].
pub type Result<T, E = Error> = std::result::Result<T, E>;

/// What went wrong, with enough context for the user to act on it.
#[derive(Debug)]
pub enum Error {
    /// A problem with the content of a named file (not a TIFF, no CRS, band missing, …).
    File {
        path: PathBuf,
        problem: String,
        fix: Option<String>,
    },
    /// A problem with what the user asked for: flags, recipe, manifest, expression.
    Usage {
        problem: String,
        fix: Option<String>,
    },
    /// The operating system refused an operation on a named file.
    Io { path: PathBuf, source: io::Error },
    /// A verification or strictness check failed (used by `verify` and `sample --strict`).
    CheckFailed { problem: String },
}

impl Error {
    /// A problem with the content of `path`.
    pub fn file(path: impl AsRef<Path>, problem: impl Into<String>) -> Error {
        Error::File {
            path: path.as_ref().to_path_buf(),
            problem: problem.into(),
            fix: None,
        }
    }

    /// A problem with the user's request.
    pub fn usage(problem: impl Into<String>) -> Error {
        Error::Usage {
            problem: problem.into(),
            fix: None,
        }
    }

    /// An I/O error on `path`.
    pub fn io(path: impl AsRef<Path>, source: io::Error) -> Error {
        Error::Io {
            path: path.as_ref().to_path_buf(),
            source,
        }
    }

    /// Attach (or replace) the hint telling the user how to fix the problem.
    pub fn with_fix(mut self, hint: impl Into<String>) -> Error {
        match &mut self {
            Error::File { fix, .. } | Error::Usage { fix, .. } => *fix = Some(hint.into()),
            Error::Io { .. } | Error::CheckFailed { .. } => {}
        }
        self
    }

    /// Re-home an error without a path onto `path` (e.g. a decoder error to its file).
    pub fn in_file(self, path: impl AsRef<Path>) -> Error {
        match self {
            Error::Usage { problem, fix } => Error::File {
                path: path.as_ref().to_path_buf(),
                problem,
                fix,
            },
            other => other,
        }
    }

    /// Process exit code: 2 for a usage problem, 3 for a failed check, 1 otherwise.
    pub fn exit_code(&self) -> i32 {
        match self {
            Error::Usage { .. } => 2,
            Error::CheckFailed { .. } => 3,
            Error::File { .. } | Error::Io { .. } => 1,
        }
    }
}

impl fmt::Display for Error {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Error::File { path, problem, fix } => {
                write!(f, "{}: {problem}", path.display())?;
                if let Some(fix) = fix {
                    write!(f, "\n  fix: {fix}")?;
                }
                Ok(())
            }
            Error::Usage { problem, fix } => {
                write!(f, "{problem}")?;
                if let Some(fix) = fix {
                    write!(f, "\n  fix: {fix}")?;
                }
                Ok(())
            }
            Error::Io { path, source } => {
                let (problem, fix) = io_words(source);
                match problem {
                    Some(problem) => write!(f, "{}: {problem}", path.display())?,
                    None => write!(f, "{}: {source}", path.display())?,
                }
                if let Some(fix) = fix {
                    write!(f, "\n  fix: {fix}")?;
                }
                Ok(())
            }
            Error::CheckFailed { problem } => write!(f, "{problem}"),
        }
    }
}

/// Plain words and a fix for the operating-system errors users meet most: a missing path,
/// a folder where a file was expected (or the reverse), no permission, a full disk, a
/// read-only file system, a file that ends early. `None` keeps the system's own text.
///
/// Kinds newer than the crate's minimum Rust version are matched by their errno, whose
/// values (ENOTDIR 20, EISDIR 21, ENOSPC 28, EROFS 30) are the same on Linux, macOS and
/// the BSDs (POSIX names; values from the systems' `errno.h`). EDQUOT (disk quota) differs
/// between systems and is matched on Linux only (122).
fn io_words(e: &io::Error) -> (Option<&'static str>, Option<&'static str>) {
    match e.kind() {
        io::ErrorKind::NotFound => {
            return (
                Some("no such file or folder"),
                Some("check the path and spelling (relative paths start from the current folder, or from a recipe's or manifest's folder)"),
            )
        }
        io::ErrorKind::PermissionDenied => {
            return (
                Some("permission denied"),
                Some("check the file's permissions, or choose a folder you can write to"),
            )
        }
        io::ErrorKind::UnexpectedEof => {
            return (
                Some("the file ends early: it is truncated or still being copied"),
                Some("copy or export the file again and check its size"),
            )
        }
        io::ErrorKind::AlreadyExists => {
            return (
                Some("already exists"),
                Some("choose another name, or remove the existing file"),
            )
        }
        _ => {}
    }
    let disk_quota = cfg!(target_os = "linux") && e.raw_os_error() == Some(122);
    match e.raw_os_error() {
        _ if disk_quota => (
            Some("the disk quota is exhausted"),
            Some("free space or ask for a larger quota, or write the output to another disk"),
        ),
        Some(20) if cfg!(unix) => (
            Some("a part of this path is a file where a folder was expected"),
            Some("check the path: every name before the last must be a folder"),
        ),
        Some(21) if cfg!(unix) => (
            Some("this is a folder, where a file was expected"),
            Some("give the path of a file (inside that folder, or next to it)"),
        ),
        Some(28) if cfg!(unix) => (
            Some("the disk is full"),
            Some("free space on that disk, or write the output to another disk with --out"),
        ),
        Some(30) if cfg!(unix) => (
            Some("the file system is read-only"),
            Some("write the output to a folder on a writable disk with --out"),
        ),
        _ => (None, None),
    }
}

impl std::error::Error for Error {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        match self {
            Error::Io { source, .. } => Some(source),
            _ => None,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn display_names_file_problem_and_fix() {
        let e = Error::file("/data/a.tif", "no georeferencing").with_fix("add a .tfw");
        assert_eq!(
            e.to_string(),
            "/data/a.tif: no georeferencing\n  fix: add a .tfw"
        );
        assert_eq!(e.exit_code(), 1);
        assert_eq!(Error::usage("bad flag").exit_code(), 2);
    }

    /// The message a real failed call produces, through the operating system.
    fn os_error(path: &Path, op: impl FnOnce(&Path) -> io::Result<()>) -> String {
        let e = op(path).unwrap_err();
        let text = Error::io(path, e).to_string();
        assert!(text.starts_with(&path.display().to_string()), "{text}");
        text
    }

    #[test]
    fn common_system_errors_in_plain_words() {
        let tmp = tempfile::tempdir().unwrap();
        let missing = tmp.path().join("nope.tif");
        let t = os_error(&missing, |p| std::fs::File::open(p).map(drop));
        assert!(
            t.contains("no such file or folder") && t.contains("fix: check the path"),
            "{t}"
        );
        assert!(
            !t.contains("entity not found") && !t.contains("os error"),
            "{t}"
        );
        let t = os_error(tmp.path(), |p| std::fs::read(p).map(drop));
        #[cfg(unix)]
        assert!(t.contains("is a folder, where a file was expected"), "{t}");
        let file = tmp.path().join("a.tif");
        std::fs::write(&file, b"x").unwrap();
        #[cfg(unix)]
        {
            let t = os_error(&file.join("b.tif"), |p| std::fs::File::open(p).map(drop));
            assert!(t.contains("is a file where a folder was expected"), "{t}");
        }
        let t = os_error(&file, |p| {
            use std::io::Read;
            std::fs::File::open(p)?.read_exact(&mut [0u8; 8])
        });
        assert!(t.contains("truncated"), "{t}");
        // Disk full and read-only file systems cannot be provoked portably in a test: the
        // errors are built from their POSIX errno values (ENOSPC 28, EROFS 30).
        #[cfg(unix)]
        {
            let full = Error::io("/out/stack.tif", io::Error::from_raw_os_error(28)).to_string();
            assert_eq!(full, "/out/stack.tif: the disk is full\n  fix: free space on that disk, or write the output to another disk with --out");
            let ro = Error::io("/out", io::Error::from_raw_os_error(30)).to_string();
            assert!(
                ro.contains("read-only") && ro.contains("fix: write the output"),
                "{ro}"
            );
            let denied = Error::io("/out", io::Error::from_raw_os_error(13)).to_string();
            assert!(
                denied.contains("permission denied") && denied.contains("fix:"),
                "{denied}"
            );
        }
        let other = Error::io("/x", io::Error::other("strange")).to_string();
        assert_eq!(other, "/x: strange");
    }
}

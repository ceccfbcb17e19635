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
                write!(f, "{}: {source}", path.display())?;
                let fix = match source.kind() {
                    io::ErrorKind::NotFound => Some("check the path and spelling"),
                    io::ErrorKind::PermissionDenied => {
                        Some("check the file's permissions, or choose a folder you can write to")
                    }
                    _ => None,
                };
                if let Some(fix) = fix {
                    write!(f, "\n  fix: {fix}")?;
                }
                Ok(())
            }
            Error::CheckFailed { problem } => write!(f, "{problem}"),
        }
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
}

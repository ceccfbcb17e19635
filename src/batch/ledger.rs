//! The ledger: one small JSON record per finished flight, so that a rerun skips it.
//!
//! A record lives at `OUT/ledger/ID.json` and is written after the flight's stack is
//! complete (its `stack.json` renamed into place), under a temporary name and then renamed,
//! so a record exists only for a finished stack. It holds the SHA-256 of every input file,
//! a SHA-256 of the flight's resolved parameters (recipe, common grid, date, applied shift)
//! and the SHA-256 of the stack's `stack.json`. A flight is skipped when all three still
//! match; a changed input, a changed parameter or a touched output rebuilds it. Records
//! hold no clock times, so an interrupted-and-resumed batch leaves the same bytes as an
//! uninterrupted one.

use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

use crate::error::{Error, Result};

/// The `format` value of a ledger record.
pub const LEDGER_FORMAT: &str = "terrastack-ledger/1";

/// Folder of the ledger inside the output root.
pub const LEDGER_DIR: &str = "ledger";

/// One input file and its hash.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, Eq)]
pub struct InputHash {
    pub role: String,
    pub path: String,
    pub sha256: String,
}

/// A flight's horizontal offset against the reference flight.
#[derive(Clone, Copy, Debug, Serialize, Deserialize, PartialEq)]
pub struct ShiftRecord {
    /// East offset in CRS units: the flight shows a feature this far east of where the
    /// reference shows it.
    pub dx: f64,
    /// North offset in CRS units (positive north).
    pub dy: f64,
    /// Height of the normalised correlation peak (1 for a perfect match, near 0 for none).
    pub peak: f64,
}

/// What the ledger remembers of one finished flight.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct LedgerRecord {
    pub format: String,
    pub id: String,
    pub date: String,
    /// Inputs in a fixed order (dsm, ortho, per-band files; the reference DSM when the
    /// shift depends on it).
    pub inputs: Vec<InputHash>,
    /// SHA-256 of the canonical JSON of the resolved parameters.
    pub parameters_sha256: String,
    /// The estimated shift (null for the reference flight or when not estimated).
    pub shift: Option<ShiftRecord>,
    /// Whether the shift was applied to the flight's grid.
    pub shift_applied: bool,
    /// Number of bands of the stack.
    pub bands: usize,
    /// SHA-256 of the finished `stack.json` (which names the image's contents and stats).
    pub stack_json_sha256: String,
}

impl LedgerRecord {
    /// Where the record of flight `id` lives under `root`.
    pub fn path(root: &Path, id: &str) -> PathBuf {
        root.join(LEDGER_DIR).join(format!("{id}.json"))
    }

    /// The record of flight `id`, if one exists and can be read. A record that is not
    /// valid JSON of this format is treated as absent (the flight is rebuilt).
    pub fn load(root: &Path, id: &str) -> Option<LedgerRecord> {
        let text = std::fs::read_to_string(LedgerRecord::path(root, id)).ok()?;
        let rec: LedgerRecord = serde_json::from_str(&text).ok()?;
        (rec.format == LEDGER_FORMAT && rec.id == id).then_some(rec)
    }

    /// Write the record atomically: a temporary file in the ledger folder, synced, then
    /// renamed over the old record.
    pub fn store(&self, root: &Path) -> Result<()> {
        let dir = root.join(LEDGER_DIR);
        std::fs::create_dir_all(&dir).map_err(|e| Error::io(&dir, e))?;
        let path = LedgerRecord::path(root, &self.id);
        let text = serde_json::to_string_pretty(self).expect("ledger record serialises") + "\n";
        write_atomic(&path, text.as_bytes())
    }

    /// Remove the record of flight `id` (before a rebuild), if any.
    pub fn forget(root: &Path, id: &str) -> Result<()> {
        let path = LedgerRecord::path(root, id);
        match std::fs::remove_file(&path) {
            Ok(()) => Ok(()),
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(()),
            Err(e) => Err(Error::io(&path, e)),
        }
    }

    /// Whether this record describes a flight built from exactly `inputs` with parameters
    /// hashing to `parameters_sha256`.
    pub fn matches(&self, inputs: &[InputHash], parameters_sha256: &str) -> bool {
        self.inputs == inputs && self.parameters_sha256 == parameters_sha256
    }
}

/// Write `bytes` to `path` through a temporary sibling and a rename, so readers see the
/// old file or the whole new one, never a part (the project's one atomic write,
/// [`crate::atomic_file::write_bytes`]).
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<()> {
    crate::atomic_file::write_bytes(path, bytes)
}

/// Hex SHA-256 of `bytes`.
pub fn sha256_hex(bytes: &[u8]) -> String {
    Sha256::digest(bytes)
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

/// Hex SHA-256 of a file's bytes (the same digest `stack.json` records for sources).
pub use crate::stack::executor::sha256_file;

#[cfg(test)]
mod tests {
    use super::*;

    fn record() -> LedgerRecord {
        LedgerRecord {
            format: LEDGER_FORMAT.into(),
            id: "may".into(),
            date: "2025-05-14".into(),
            inputs: vec![InputHash {
                role: "dsm".into(),
                path: "a/dsm.tif".into(),
                sha256: sha256_hex(b"abc"),
            }],
            parameters_sha256: sha256_hex(b"{}"),
            shift: Some(ShiftRecord {
                dx: 0.25,
                dy: -0.5,
                peak: 0.8,
            }),
            shift_applied: false,
            bands: 7,
            stack_json_sha256: sha256_hex(b""),
        }
    }

    #[test]
    fn sha256_known_answers() {
        // FIPS 180-2, appendix B.1 ("abc") and the empty message (common practice test vectors).
        assert_eq!(
            sha256_hex(b"abc"),
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
        assert_eq!(
            sha256_hex(b""),
            "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855"
        );
        let tmp = tempfile::tempdir().unwrap();
        let p = tmp.path().join("abc.bin");
        std::fs::write(&p, b"abc").unwrap();
        assert_eq!(sha256_file(&p).unwrap(), sha256_hex(b"abc"));
        let e = sha256_file(&tmp.path().join("none.tif"))
            .unwrap_err()
            .to_string();
        assert!(e.contains("none.tif"), "{e}");
    }

    #[test]
    fn store_load_match_forget() {
        let tmp = tempfile::tempdir().unwrap();
        let rec = record();
        assert!(LedgerRecord::load(tmp.path(), "may").is_none());
        rec.store(tmp.path()).unwrap();
        let back = LedgerRecord::load(tmp.path(), "may").unwrap();
        assert_eq!(back, rec);
        assert!(back.matches(&rec.inputs, &rec.parameters_sha256));
        let mut changed = rec.inputs.clone();
        changed[0].sha256 = sha256_hex(b"abd");
        assert!(!back.matches(&changed, &rec.parameters_sha256));
        assert!(!back.matches(&rec.inputs, &sha256_hex(b"{\"x\":1}")));
        // Only the record is left in the ledger folder: no temporary file.
        let names: Vec<_> = std::fs::read_dir(tmp.path().join(LEDGER_DIR))
            .unwrap()
            .map(|e| e.unwrap().file_name())
            .collect();
        assert_eq!(names, vec![std::ffi::OsString::from("may.json")]);
        LedgerRecord::forget(tmp.path(), "may").unwrap();
        LedgerRecord::forget(tmp.path(), "may").unwrap();
        assert!(LedgerRecord::load(tmp.path(), "may").is_none());
    }

    #[test]
    fn damaged_record_counts_as_absent() {
        let tmp = tempfile::tempdir().unwrap();
        std::fs::create_dir_all(tmp.path().join(LEDGER_DIR)).unwrap();
        std::fs::write(LedgerRecord::path(tmp.path(), "may"), "{\"format\": \"terr").unwrap();
        assert!(LedgerRecord::load(tmp.path(), "may").is_none());
        let mut other = record();
        other.id = "june".into();
        let text = serde_json::to_string(&other).unwrap();
        std::fs::write(LedgerRecord::path(tmp.path(), "may"), text).unwrap();
        assert!(LedgerRecord::load(tmp.path(), "may").is_none());
    }
}

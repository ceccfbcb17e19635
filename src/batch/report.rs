//! The batch report: `batch-report.json` in the output root and a table on the terminal.
//!
//! One entry per flight of the run (its shard's flights when sharded): status (`built`,
//! `skipped` because its ledger record still matches, or `failed`), seconds, band count,
//! the estimated shift against the reference flight and the error text of a failure; and
//! the multi-temporal stack's status. Sharded runs write `batch-report-shard-I-of-N.json`
//! so that shards sharing an output root do not overwrite each other's report.

use std::fmt::Write as _;
use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

use crate::error::Result;

use super::ledger::write_atomic;
use super::shard::Shard;

/// The `format` value of the report.
pub const REPORT_FORMAT: &str = "terrastack-batch-report/1";

/// What happened to one flight or to the multi-temporal stack.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Status {
    Built,
    Skipped,
    Failed,
}

impl Status {
    pub fn as_str(self) -> &'static str {
        match self {
            Status::Built => "built",
            Status::Skipped => "skipped",
            Status::Failed => "failed",
        }
    }
}

/// A flight's estimated offset against the reference flight.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ShiftReport {
    /// East offset in CRS units (metres on projected grids).
    pub dx: f64,
    /// North offset in CRS units.
    pub dy: f64,
    /// The same in cells of the common grid (columns east, rows north).
    pub dx_cells: f64,
    pub dy_cells: f64,
    /// Correlation peak height (see `shift::CellShift::peak`).
    pub peak: f64,
    /// Whether the peak clears the confidence threshold (`alignment.min_peak`).
    #[serde(default)]
    pub confident: bool,
    /// Whether the flight was built on the common grid moved by this offset.
    pub applied: bool,
    /// Why it was or was not applied, in words.
    #[serde(default)]
    pub reason: String,
}

/// How shifts were applied in this run, and what that means for the multi-temporal stack.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct AlignmentReport {
    /// `auto`, `on` or `off` (see `shift::AlignMode`).
    pub mode: String,
    /// `auto` applies shifts longer than this, in cells of the common grid.
    pub min_shift_cells: f64,
    /// `auto` applies shifts whose correlation peak is at least this high.
    pub min_peak: f64,
    /// What was done, in one sentence.
    pub summary: String,
}

/// One flight's line of the report.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct FlightReport {
    pub id: String,
    pub date: String,
    pub status: Status,
    pub seconds: f64,
    /// Bands of the flight's stack (null when it failed).
    pub bands: Option<usize>,
    /// The flight's stack folder.
    pub dir: PathBuf,
    /// Estimated shift (null for the reference flight).
    pub shift: Option<ShiftReport>,
    /// Why the shift could not be estimated, when it could not (the build goes on).
    pub shift_error: Option<String>,
    pub error: Option<String>,
}

/// The multi-temporal stack's line of the report.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct TemporalReport {
    pub status: Status,
    pub seconds: f64,
    pub bands: Option<usize>,
    pub dir: PathBuf,
    pub error: Option<String>,
}

/// The manifest's reference flight, when it could not be used.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ReferenceReplaced {
    /// The reference the manifest asked for (or the earliest flight, when it names none).
    pub requested: String,
    /// Why it could not be used.
    pub reason: String,
}

/// `batch-report.json`.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct BatchReport {
    pub format: String,
    pub manifest: PathBuf,
    pub out: PathBuf,
    /// `I/N`; "0/1" for an unsharded run.
    pub shard: String,
    /// The reference flight used for the common grid's lattice and the shifts.
    pub reference: String,
    /// Set when the manifest's reference could not be used and `reference` is another
    /// flight (the earliest readable one); null otherwise.
    #[serde(default)]
    pub reference_replaced: Option<ReferenceReplaced>,
    /// How shifts were applied (null in reports written before alignment was reported).
    #[serde(default)]
    pub alignment: Option<AlignmentReport>,
    pub flights: Vec<FlightReport>,
    /// Null when not made in this run (sharded runs, `temporal = false`, or a failed flight).
    pub temporal: Option<TemporalReport>,
}

impl BatchReport {
    /// Flights that failed.
    pub fn failed(&self) -> Vec<&FlightReport> {
        self.flights
            .iter()
            .filter(|f| f.status == Status::Failed)
            .collect()
    }

    /// File name of the report of `shard`.
    pub fn file_name(shard: Shard) -> String {
        if shard.is_all() {
            "batch-report.json".into()
        } else {
            format!("batch-report-shard-{}-of-{}.json", shard.index, shard.count)
        }
    }

    /// Write the report atomically as `root/NAME` and return its path.
    pub fn store(&self, root: &Path, shard: Shard) -> Result<PathBuf> {
        let path = root.join(BatchReport::file_name(shard));
        let text = serde_json::to_string_pretty(self).expect("report serialises") + "\n";
        write_atomic(&path, text.as_bytes())?;
        Ok(path)
    }

    /// The report as a plain-text table: one line per flight, then the temporal stack and
    /// the errors in full.
    pub fn table(&self) -> String {
        let mut s = String::new();
        let idw = self
            .flights
            .iter()
            .map(|f| f.id.len())
            .max()
            .unwrap_or(6)
            .max(6);
        let _ = writeln!(
            s,
            "{:<idw$}  {:<10}  {:<7}  {:>8}  {:>5}  {:>17}",
            "flight", "date", "status", "seconds", "bands", "shift dx,dy"
        );
        for f in &self.flights {
            let shift = match &f.shift {
                Some(sh) => format!(
                    "{:+.3},{:+.3}{}",
                    sh.dx,
                    sh.dy,
                    if sh.applied {
                        "*"
                    } else if !sh.confident {
                        "?"
                    } else {
                        ""
                    }
                ),
                None if f.id == self.reference => "reference".into(),
                None => "-".into(),
            };
            let _ = writeln!(
                s,
                "{:<idw$}  {:<10}  {:<7}  {:>8.1}  {:>5}  {:>17}",
                f.id,
                f.date,
                f.status.as_str(),
                f.seconds,
                f.bands.map(|b| b.to_string()).unwrap_or_else(|| "-".into()),
                shift
            );
        }
        if let Some(t) = &self.temporal {
            let _ = writeln!(
                s,
                "{:<idw$}  {:<10}  {:<7}  {:>8.1}  {:>5}",
                "temporal",
                "all dates",
                t.status.as_str(),
                t.seconds,
                t.bands.map(|b| b.to_string()).unwrap_or_else(|| "-".into())
            );
        }
        if self
            .flights
            .iter()
            .any(|f| f.shift.as_ref().is_some_and(|s| s.applied))
        {
            let _ = writeln!(
                s,
                "* shift applied to the flight's grid (east, north in CRS units)"
            );
        }
        if self
            .flights
            .iter()
            .any(|f| f.shift.as_ref().is_some_and(|s| !s.confident))
        {
            let _ = writeln!(s, "? estimate not confident (weak correlation peak)");
        }
        if let Some(a) = &self.alignment {
            let _ = writeln!(s, "alignment ({}): {}", a.mode, a.summary);
        }
        for f in &self.flights {
            if let Some(e) = &f.error {
                let _ = writeln!(s, "\n{} failed: {e}", f.id);
            }
            if let Some(e) = &f.shift_error {
                let _ = writeln!(s, "\n{}: shift not estimated: {e}", f.id);
            }
        }
        if let Some(e) = self.temporal.as_ref().and_then(|t| t.error.as_ref()) {
            let _ = writeln!(s, "\ntemporal stack failed: {e}");
        }
        if let Some(r) = &self.reference_replaced {
            let _ = writeln!(
                s,
                "\nreference flight: {} in place of {} ({})",
                self.reference,
                r.requested,
                r.reason.lines().next().unwrap_or("")
            );
        }
        s
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn report() -> BatchReport {
        BatchReport {
            format: REPORT_FORMAT.into(),
            manifest: "site/flights.toml".into(),
            out: "site/out".into(),
            shard: "0/1".into(),
            reference: "may".into(),
            reference_replaced: None,
            alignment: Some(AlignmentReport {
                mode: "auto".into(),
                min_shift_cells: 0.2,
                min_peak: 0.04,
                summary: "1 of 1 flights aligned".into(),
            }),
            flights: vec![
                FlightReport {
                    id: "may".into(),
                    date: "2025-05-14".into(),
                    status: Status::Built,
                    seconds: 1.25,
                    bands: Some(12),
                    dir: "site/out/flights/may".into(),
                    shift: None,
                    shift_error: None,
                    error: None,
                },
                FlightReport {
                    id: "june".into(),
                    date: "2025-06-20".into(),
                    status: Status::Failed,
                    seconds: 0.5,
                    bands: None,
                    dir: "site/out/flights/june".into(),
                    shift: Some(ShiftReport {
                        dx: 0.3,
                        dy: -0.2,
                        dx_cells: 3.0,
                        dy_cells: -2.0,
                        peak: 0.4,
                        confident: true,
                        applied: true,
                        reason: "applied".into(),
                    }),
                    shift_error: None,
                    error: Some("b/dsm.tif: not a TIFF file".into()),
                },
            ],
            temporal: None,
        }
    }

    #[test]
    fn table_lists_every_flight_and_errors() {
        let t = report().table();
        let lines: Vec<&str> = t.lines().collect();
        assert!(lines[0].starts_with("flight"));
        assert!(
            lines[1].contains("may")
                && lines[1].contains("built")
                && lines[1].contains("reference")
        );
        assert!(
            lines[2].contains("failed") && lines[2].contains("+0.300,-0.200*"),
            "{}",
            lines[2]
        );
        assert!(t.contains("june failed: b/dsm.tif: not a TIFF file"));
        assert!(
            t.contains("alignment (auto): 1 of 1 flights aligned"),
            "{t}"
        );
        assert_eq!(report().failed().len(), 1);
    }

    #[test]
    fn report_round_trips_and_shards_get_their_own_file() {
        let tmp = tempfile::tempdir().unwrap();
        let p = report().store(tmp.path(), Shard::ALL).unwrap();
        assert!(p.ends_with("batch-report.json"));
        let back: BatchReport =
            serde_json::from_str(&std::fs::read_to_string(&p).unwrap()).unwrap();
        assert_eq!(back, report());
        assert!(std::fs::read_to_string(&p)
            .unwrap()
            .contains("\"status\": \"failed\""));
        assert_eq!(
            BatchReport::file_name(Shard { index: 1, count: 2 }),
            "batch-report-shard-1-of-2.json"
        );
    }
}

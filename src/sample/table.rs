//! The training table: one CSV row per sampled cell (or per sample when aggregated).
//!
//! Columns: `sample_id`, `class`, `x`, `y`, `fold` (1-based), then one column per stack
//! band in stack order, headed by the band's name. `x`, `y` are the cell centre in the
//! stack's CRS (the sample's anchor for aggregated rows). Cell values are the stack's
//! float32 values printed in the shortest form that reads back to the same float32;
//! aggregated values are float64 printed the same way. Nodata is an empty field. Fields
//! holding a comma, quote, line break or outer space are quoted (RFC 4180).
//!
//! The table is written under a temporary name in the output's folder
//! (`.NAME.partial-PID`, [`crate::atomic_file`]) and renamed into place once complete, so a
//! reader never sees a half-written table; while it is made, the table is locked
//! (`.NAME.lock`, [`crate::output_lock`]) so two runs never write it at once.

use std::io::Write;
use std::path::{Path, PathBuf};

use crate::error::{Error, Result};
use crate::input_guard;
use crate::output_lock::OutputLock;

/// Precision the values of a table were computed in.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Precision {
    /// Values straight from the stack's float32 cells.
    F32,
    /// Aggregates computed in float64.
    F64,
}

/// One row of the table.
#[derive(Clone, Debug, PartialEq)]
pub struct Row {
    /// Index of the sample in the sample file.
    pub sample: usize,
    pub x: f64,
    pub y: f64,
    /// One value per band; NaN for nodata.
    pub values: Vec<f64>,
}

/// A finished table, ready to write.
#[derive(Clone, Debug, PartialEq)]
pub struct SampleTable {
    pub band_names: Vec<String>,
    pub precision: Precision,
    pub rows: Vec<Row>,
}

/// A CSV field, quoted when it needs to be.
fn field(text: &str) -> String {
    let needs = text.contains([',', '"', '\n', '\r']) || text.trim() != text;
    if needs {
        format!("\"{}\"", text.replace('"', "\"\""))
    } else {
        text.to_string()
    }
}

fn number(v: f64, precision: Precision) -> String {
    if v.is_nan() {
        String::new()
    } else {
        match precision {
            Precision::F32 => format!("{}", v as f32),
            Precision::F64 => format!("{v}"),
        }
    }
}

impl SampleTable {
    /// Write the table as CSV to `out`. `ids`, `classes` and `folds` (0-based; every
    /// sample with a row has one) are indexed by [`Row::sample`].
    pub fn write_csv(
        &self,
        out: &mut impl Write,
        ids: &[String],
        classes: &[String],
        folds: &[Option<usize>],
    ) -> std::io::Result<()> {
        let mut header = vec![
            "sample_id".to_string(),
            "class".into(),
            "x".into(),
            "y".into(),
            "fold".into(),
        ];
        header.extend(self.band_names.iter().map(|n| field(n)));
        writeln!(out, "{}", header.join(","))?;
        let mut line = String::new();
        for row in &self.rows {
            line.clear();
            line.push_str(&field(&ids[row.sample]));
            line.push(',');
            line.push_str(&field(&classes[row.sample]));
            let fold = folds[row.sample].map_or(0, |f| f + 1);
            line.push_str(&format!(",{},{},{fold}", row.x, row.y));
            for &v in &row.values {
                line.push(',');
                line.push_str(&number(v, self.precision));
            }
            writeln!(out, "{line}")?;
        }
        Ok(())
    }
}

/// Refuse an output that exists (unless `force`), is a folder, or is one of `inputs`
/// (role, path; compared by [`crate::input_guard`], so links and `..` do not escape).
/// Call it while holding the table's lock ([`crate::output_lock::OutputLock::file`]).
pub fn check_output(out: &Path, force: bool, inputs: &[(&str, &Path)]) -> Result<()> {
    if out.is_dir() {
        return Err(Error::file(out, "the output is a folder")
            .with_fix("give --out a file name ending in .csv"));
    }
    let inputs: Vec<(String, PathBuf)> = inputs
        .iter()
        .map(|(role, p)| (role.to_string(), p.to_path_buf()))
        .collect();
    let outputs = [out.to_path_buf(), OutputLock::file_lock_path(out)];
    input_guard::refuse_output_over_input(&outputs, &inputs)?;
    if out.exists() && !force {
        return Err(Error::file(out, "the output table already exists")
            .with_fix("choose another --out name, or add --force to replace it"));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn csv_layout_and_float32_round_trip() {
        let t = SampleTable {
            band_names: vec!["slope_horn".into(), "nir, raw".into()],
            precision: Precision::F32,
            rows: vec![
                Row {
                    sample: 0,
                    x: 512_000.25,
                    y: 5_300_000.75,
                    values: vec![0.1f32 as f64, f64::NAN],
                },
                Row {
                    sample: 1,
                    x: 1.5,
                    y: -2.0,
                    values: vec![-3.25, 1e-7f32 as f64],
                },
            ],
        };
        let mut buf = Vec::new();
        t.write_csv(
            &mut buf,
            &["s1".into(), "s 2 ".into()],
            &["fen".into(), "wet \"meadow\"".into()],
            &[Some(0), Some(4)],
        )
        .unwrap();
        let text = String::from_utf8(buf).unwrap();
        let lines: Vec<&str> = text.lines().collect();
        assert_eq!(lines[0], "sample_id,class,x,y,fold,slope_horn,\"nir, raw\"");
        assert_eq!(lines[1], "s1,fen,512000.25,5300000.75,1,0.1,");
        assert_eq!(
            lines[2],
            "\"s 2 \",\"wet \"\"meadow\"\"\",1.5,-2,5,-3.25,0.0000001"
        );
        // Shortest round-trip printing (Rust's float Display): the text parses back to the
        // same float32 bits.
        assert_eq!("0.1".parse::<f32>().unwrap().to_bits(), 0.1f32.to_bits());
        assert_eq!(
            "0.0000001".parse::<f32>().unwrap().to_bits(),
            1e-7f32.to_bits()
        );
    }

    #[test]
    fn existing_folder_or_input_outputs_are_refused() {
        let dir = tempfile::tempdir().unwrap();
        let out = dir.path().join("t.csv");
        check_output(&out, false, &[]).unwrap();
        std::fs::write(&out, "a,b\n").unwrap();
        let e = check_output(&out, false, &[]).unwrap_err().to_string();
        assert!(e.contains("already exists") && e.contains("--force"), "{e}");
        check_output(&out, true, &[]).unwrap();
        let e = check_output(&out, true, &[("samples", out.as_path())]).unwrap_err();
        assert!(e.to_string().contains("samples input"), "{e}");
        assert!(check_output(dir.path(), true, &[]).is_err());
    }
}

//! The training table: one row per sampled cell (or per sample when aggregated), as CSV
//! or as GeoParquet ([`super::geoparquet`]), chosen by the output's extension.
//!
//! Columns: `sample_id`, `class`, `x`, `y`, `fold` (1-based), `block` (the spatial block
//! of the sample, with `--block-size` only), `cells` (the number of valid cells a row
//! aggregates, with `--aggregate` only), then one column per stack band in stack order.
//! Band columns are named by [`identifier`]: the band's name made into an identifier that
//! formula interfaces (R, patsy, SQL) accept, e.g. `ndvi_2026-07-08` → `ndvi_20260708`,
//! `tpi_r2.5m` → `tpi_r2p5m`. `x`, `y` are the cell centre in the stack's CRS (the sample's
//! anchor for aggregated rows). Cell values are the stack's float32 values printed in the
//! shortest form that reads back to the same float32; aggregated values are float64
//! printed the same way. Nodata is an empty field. CSV is written by the `csv` crate
//! (RFC 4180 quoting of fields holding a comma, quote or line break).
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
    /// Valid cells the row stands for: 1 for a cell row, the sample's cells with a value
    /// in some band for an aggregated row.
    pub cells: usize,
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

/// Per-sample columns of a table, indexed by [`Row::sample`].
#[derive(Clone, Copy, Debug)]
pub struct SampleColumns<'a> {
    pub ids: &'a [String],
    pub classes: &'a [String],
    /// 0-based folds; every sample with a row has one.
    pub folds: &'a [Option<usize>],
    /// Spatial block ids (block folds only); every sample with a row has one.
    pub blocks: Option<&'a [Option<u64>]>,
}

/// Output formats of a table.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum TableFormat {
    Csv,
    GeoParquet,
}

impl TableFormat {
    /// The format of `out` from its extension (`.parquet` or `.geoparquet`: GeoParquet,
    /// anything else: CSV).
    pub fn of(out: &Path) -> TableFormat {
        let ext = out
            .extension()
            .and_then(|e| e.to_str())
            .map(|e| e.to_ascii_lowercase());
        match ext.as_deref() {
            Some("parquet" | "geoparquet") => TableFormat::GeoParquet,
            _ => TableFormat::Csv,
        }
    }
}

/// `name` as an identifier: ASCII letters, digits and underscores, not starting with a
/// digit. A `.` becomes `p` (decimal point: `r2.5m` → `r2p5m`), a `-` between digits is
/// dropped (dates: `2026-07-08` → `20260708`), any other character becomes `_`; a
/// leading digit gets the prefix `b_`.
pub fn identifier(name: &str) -> String {
    let chars: Vec<char> = name.chars().collect();
    let mut out = String::with_capacity(name.len());
    for (i, &c) in chars.iter().enumerate() {
        match c {
            'a'..='z' | 'A'..='Z' | '0'..='9' | '_' => out.push(c),
            '.' => out.push('p'),
            '-' if i > 0
                && chars[i - 1].is_ascii_digit()
                && chars.get(i + 1).is_some_and(|n| n.is_ascii_digit()) => {}
            _ => out.push('_'),
        }
    }
    if out.is_empty() || out.starts_with(|c: char| c.is_ascii_digit()) {
        out.insert_str(0, "b_");
    }
    out
}

impl SampleTable {
    /// Whether the rows aggregate several cells (one row per sample).
    pub fn aggregated(&self) -> bool {
        self.precision == Precision::F64
    }

    /// The column names: the fixed columns, then the band identifiers. Refuses band
    /// names whose identifiers collide with each other or with a fixed column.
    pub fn column_names(&self, with_blocks: bool) -> Result<Vec<String>> {
        let mut names: Vec<String> = ["sample_id", "class", "x", "y", "fold"]
            .iter()
            .map(|s| s.to_string())
            .collect();
        if with_blocks {
            names.push("block".into());
        }
        if self.aggregated() {
            names.push("cells".into());
        }
        let mut taken: std::collections::HashSet<String> = names
            .iter()
            .chain(["geometry".to_string()].iter())
            .map(|n| n.to_ascii_lowercase())
            .collect();
        for band in &self.band_names {
            let id = identifier(band);
            if !taken.insert(id.to_ascii_lowercase()) {
                return Err(Error::usage(format!(
                    "stack band '{band}' gives the table column '{id}', which another column already has"
                ))
                .with_fix(
                    "rename the band-math band (--index NAME=...) so that no table column is named twice \
                     (sample_id, class, x, y, fold, block, cells and geometry are the table's own)",
                ));
            }
            names.push(id);
        }
        Ok(names)
    }

    /// Write the table as CSV to `out`, headed by `names` ([`SampleTable::column_names`]).
    pub fn write_csv(
        &self,
        out: &mut impl Write,
        cols: &SampleColumns,
        names: &[String],
    ) -> std::io::Result<()> {
        let mut w = csv::WriterBuilder::new().from_writer(out);
        w.write_record(names)?;
        let mut record: Vec<String> = Vec::with_capacity(names.len());
        for row in &self.rows {
            record.clear();
            record.push(cols.ids[row.sample].clone());
            record.push(cols.classes[row.sample].clone());
            record.push(format!("{}", row.x));
            record.push(format!("{}", row.y));
            record.push(format!("{}", cols.folds[row.sample].map_or(0, |f| f + 1)));
            if let Some(blocks) = cols.blocks {
                record.push(blocks[row.sample].map_or(String::new(), |b| b.to_string()));
            }
            if self.aggregated() {
                record.push(row.cells.to_string());
            }
            for &v in &row.values {
                record.push(number(v, self.precision));
            }
            w.write_record(&record)?;
        }
        w.flush()
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

/// Spatial block ids of the samples: the distinct blocks (column, row) of the samples
/// that made rows, numbered 1, 2, … in order of block row, then block column, counted
/// from the stack's origin; `None` for samples without rows.
pub fn block_ids(blocks: &[(i64, i64)], has_rows: &[bool]) -> Vec<Option<u64>> {
    let mut used: Vec<(i64, i64)> = blocks
        .iter()
        .zip(has_rows)
        .filter(|(_, &h)| h)
        .map(|(&(c, r), _)| (r, c))
        .collect();
    used.sort_unstable();
    used.dedup();
    blocks
        .iter()
        .zip(has_rows)
        .map(|(&(c, r), &h)| {
            h.then(|| used.binary_search(&(r, c)).expect("block listed") as u64 + 1)
        })
        .collect()
}

/// Refuse an output that exists (unless `force`), is a folder, or is one of `inputs`
/// (role, path; compared by [`crate::input_guard`], so links and `..` do not escape).
/// Call it while holding the table's lock ([`crate::output_lock::OutputLock::file`]).
pub fn check_output(out: &Path, force: bool, inputs: &[(&str, &Path)]) -> Result<()> {
    if out.is_dir() {
        return Err(Error::file(out, "the output is a folder")
            .with_fix("give --out a file name ending in .csv or .parquet"));
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

    fn table(precision: Precision) -> SampleTable {
        SampleTable {
            band_names: vec!["slope_horn".into(), "ndvi_2026-07-08".into()],
            precision,
            rows: vec![
                Row {
                    sample: 0,
                    x: 512_000.25,
                    y: 5_300_000.75,
                    cells: 1,
                    values: vec![0.1f32 as f64, f64::NAN],
                },
                Row {
                    sample: 1,
                    x: 1.5,
                    y: -2.0,
                    cells: 7,
                    values: vec![-3.25, 1e-7f32 as f64],
                },
            ],
        }
    }

    fn csv_text(t: &SampleTable, blocks: Option<&[Option<u64>]>) -> String {
        let ids = ["s1".to_string(), "s 2 ".into()];
        let classes = ["fen, wet".to_string(), "wet \"meadow\"".into()];
        let cols = SampleColumns {
            ids: &ids,
            classes: &classes,
            folds: &[Some(0), Some(4)],
            blocks,
        };
        let names = t.column_names(blocks.is_some()).unwrap();
        let mut buf = Vec::new();
        t.write_csv(&mut buf, &cols, &names).unwrap();
        String::from_utf8(buf).unwrap()
    }

    #[test]
    fn csv_layout_and_float32_round_trip() {
        let text = csv_text(&table(Precision::F32), None);
        let lines: Vec<&str> = text.lines().collect();
        assert_eq!(
            lines[0],
            "sample_id,class,x,y,fold,slope_horn,ndvi_20260708"
        );
        assert_eq!(lines[1], "s1,\"fen, wet\",512000.25,5300000.75,1,0.1,");
        // RFC 4180 quoting of quotes; spaces are part of a field and stay unquoted.
        assert_eq!(
            lines[2],
            "s 2 ,\"wet \"\"meadow\"\"\",1.5,-2,5,-3.25,0.0000001"
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
    fn block_and_cell_count_columns() {
        let text = csv_text(&table(Precision::F64), Some(&[Some(3), Some(1)]));
        let lines: Vec<&str> = text.lines().collect();
        assert_eq!(
            lines[0],
            "sample_id,class,x,y,fold,block,cells,slope_horn,ndvi_20260708"
        );
        assert!(
            lines[1].starts_with("s1,\"fen, wet\",512000.25,5300000.75,1,3,1,0.10000000149011612,")
        );
        assert!(
            lines[2].ends_with(",5,1,7,-3.25,0.00000010000000116860974"),
            "{}",
            lines[2]
        );
        // Blocks numbered by (row, column) among blocks of samples with rows.
        let ids = block_ids(
            &[(5, 0), (1, 2), (0, 2), (9, 9)],
            &[true, true, true, false],
        );
        assert_eq!(ids, vec![Some(1), Some(3), Some(2), None]);
    }

    #[test]
    fn identifiers_and_collisions() {
        assert_eq!(identifier("ndvi_2026-07-08"), "ndvi_20260708");
        assert_eq!(identifier("tpi_r2.5m"), "tpi_r2p5m");
        assert_eq!(identifier("ndvi_2026-07-08_mean"), "ndvi_20260708_mean");
        assert_eq!(identifier("nir, raw"), "nir__raw");
        assert_eq!(identifier("a-b"), "a_b");
        assert_eq!(identifier("5x"), "b_5x");
        let mut t = table(Precision::F32);
        t.band_names[1] = "fold".into();
        let e = t.column_names(false).unwrap_err().to_string();
        assert!(e.contains("'fold'") && e.contains("--index"), "{e}");
        t.band_names[1] = "slope_horn".into();
        assert!(t.column_names(false).is_err());
        assert_eq!(
            TableFormat::of(Path::new("t.PARQUET")),
            TableFormat::GeoParquet
        );
        assert_eq!(TableFormat::of(Path::new("t.csv")), TableFormat::Csv);
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

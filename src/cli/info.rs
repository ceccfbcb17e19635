//! `terrastack info`: a human summary of a raster or stack folder; `--json` for scripts.
//!
//! For a file: size, bands (type, description, nodata), transform, CRS, raster space,
//! cell size in metres and, for GeoTIFF, the block layout and compression. For a folder:
//! the same for `DIR/stack.tif`, plus the band table and the per-band statistics of
//! `DIR/stack.json` when present (also for a `stack.tif` given directly with its
//! `stack.json` beside it).
//!
//! JSON output (keys are stable; new keys may be added):
//! - `path` (string): the raster described.
//! - `container`: `"tiff"`, `"bigtiff"` or `"other"` (read through GDAL).
//! - `width`, `height`, `band_count` (integers).
//! - `georeferenced` (bool): false for a TIFF without transform tags, whose transform
//!   is then `[0, 1, 0, 0, 0, 1]` (x = column, y = row).
//! - `transform`: 6 numbers, GDAL order, pixel-is-area convention.
//! - `bounds`: `[xmin, ymin, xmax, ymax]` in CRS units.
//! - `raster_space`: `"area"` or `"point"`, as the file declares it.
//! - `crs`: `{ "epsg", "name", "kind" ("projected" | "geographic" | "unknown"), "wkt",
//!   "linear_unit_m", "vertical_epsg" }`, unknown members null.
//! - `cell_size_m`: `{ "x", "y", "where" }` with `where` `"every row"` (projected) or
//!   `"centre row"` (geographic: the size at the latitude of the middle row), or null when
//!   the CRS gives no metres.
//! - `nodata`: a number, `"NaN"`, `"Infinity"`, `"-Infinity"`, or null.
//! - `blocks`: `{ "kind" ("tiles" | "strips"), "width", "height", "interleave"
//!   ("band" | "pixel"), "compression" ("none" | "deflate" | "lzw" | "zstd" | "packbits"),
//!   "predictor" }`, or null when not a GeoTIFF.
//! - `bands`: `[{ "index", "type", "description", "nodata" }]`.
//! - `truncated`: null for a sound GeoTIFF; for one whose tiles or strips reach past the
//!   end of the file, `{ "kind" ("tiles" | "strips"), "blocks_past_end", "blocks",
//!   "file_bytes", "first_block", "first_end" }`. `info` then also exits 1 with an error
//!   naming the file.

//! - `stack` (a folder, or a file named `stack.tif` with a `stack.json` beside it):
//!   `{ "path", "format", "bands": [{ "index", "name", "feature", "units", "scale_m",
//!   "date", "min", "max", "mean", "std", "valid_fraction" }] }`: the statistics are those
//!   `stack.json` records (over every valid cell; null when a band has none), or `stack` is
//!   null when there is no `stack.json`.

use std::path::{Path, PathBuf};

use serde_json::{json, Value};

use terrastack::grid::{CrsKind, RasterSpace};
use terrastack::raster::geotiff::{self, Compression, GeoTiffReader, Interleave, Layout};
use terrastack::raster::{self, RasterSource};
use terrastack::stack::preview::num as sig_digits;
use terrastack::{Error, Result};

#[derive(clap::Args)]
pub struct Args {
    /// A raster file or a stack folder (a folder, or a stack.tif with its stack.json
    /// beside it, also gets the per-band statistics table).
    pub path: PathBuf,
    /// Print JSON instead of the human summary.
    #[arg(long)]
    pub json: bool,
}

pub fn run(args: Args) -> Result<()> {
    let summary = describe(&args.path)?;
    if args.json {
        let text = serde_json::to_string_pretty(&summary)
            .map_err(|e| Error::usage(format!("could not format the summary as JSON: {e}")))?;
        println!("{text}");
    } else {
        print!("{}", human(&summary));
    }
    // A damaged file is described (what the directory says), then reported as an error.
    let damage = &summary["truncated"];
    if !damage.is_null() {
        return Err(Error::file(
            text(&summary["path"]),
            format!(
                "{} of its {} {} lie past the end of the file ({} bytes; the first, {} {}, ends at byte {}): the file is truncated",
                damage["blocks_past_end"],
                damage["blocks"],
                text(&damage["kind"]),
                damage["file_bytes"],
                text(&damage["kind"]).trim_end_matches('s'),
                damage["first_block"],
                damage["first_end"]
            ),
        )
        .with_fix("copy or export the file again and check that its size matches the original"));
    }
    Ok(())
}

/// The JSON summary of a raster file or stack folder (keys in the module docs).
pub fn describe(path: &Path) -> Result<Value> {
    if path.is_dir() {
        let tif = path.join("stack.tif");
        if !tif.is_file() {
            return Err(Error::file(path, "this folder has no stack.tif").with_fix(
                "give a stack folder written by `terrastack build`, or the path of a raster file",
            ));
        }
        let mut summary = describe_raster(&tif)?;
        let json_path = path.join("stack.json");
        summary["stack"] = if json_path.is_file() {
            stack_table(&json_path)?
        } else {
            Value::Null
        };
        return Ok(summary);
    }
    let mut summary = describe_raster(path)?;
    // A stack's image given directly: its sidecar beside it describes the same bands.
    let sidecar = path.with_file_name("stack.json");
    if path.file_name().is_some_and(|n| n == "stack.tif") && sidecar.is_file() {
        summary["stack"] = stack_table(&sidecar)?;
    }
    Ok(summary)
}

fn number_or_text(v: Option<f64>) -> Value {
    match v {
        None => Value::Null,
        Some(x) if x.is_nan() => json!("NaN"),
        Some(x) if x == f64::INFINITY => json!("Infinity"),
        Some(x) if x == f64::NEG_INFINITY => json!("-Infinity"),
        Some(x) => json!(x),
    }
}

fn describe_raster(path: &Path) -> Result<Value> {
    if !path.exists() {
        return Err(Error::io(
            path,
            std::io::Error::from(std::io::ErrorKind::NotFound),
        ));
    }
    let mut blocks = Value::Null;
    let mut container = "other";
    let mut georeferenced = true;
    let mut truncated = Value::Null;
    let source: Box<dyn RasterSource> = if geotiff::is_tiff(path)? {
        let r = GeoTiffReader::open(path)?;
        let (bw, bh) = r.block_size();
        let kind = match r.layout() {
            Layout::Tiled { .. } => "tiles",
            Layout::Strips { .. } => "strips",
        };
        if let (bad @ 1.., total, Some((first, end))) = r.blocks_past_end() {
            truncated = json!({
                "kind": kind,
                "blocks_past_end": bad,
                "blocks": total,
                "file_bytes": r.file_len(),
                "first_block": first,
                "first_end": end,
            });
        }
        blocks = json!({
            "kind": match r.layout() { Layout::Tiled { .. } => "tiles", Layout::Strips { .. } => "strips" },
            "width": bw,
            "height": bh,
            "interleave": match r.interleave() { Interleave::Band => "band", Interleave::Pixel => "pixel" },
            "compression": match r.compression() {
                Compression::None => "none",
                Compression::Deflate => "deflate",
                Compression::Lzw => "lzw",
                Compression::Zstd => "zstd",
                Compression::PackBits => "packbits",
            },
            "predictor": r.predictor(),
        });
        container = if r.is_bigtiff() { "bigtiff" } else { "tiff" };
        georeferenced = r.is_georeferenced();
        Box::new(r)
    } else {
        raster::open(path)?
    };
    let grid = source.grid();
    let crs = &grid.crs;
    let (xmin, ymin, xmax, ymax) = grid.bounds();
    let cell = match crs.kind {
        CrsKind::Geographic => grid
            .cell_size_m((grid.height as f64 - 1.0) / 2.0)
            .ok()
            .map(|(x, y)| json!({ "x": x, "y": y, "where": "centre row" })),
        _ => grid
            .cell_size_m(0.0)
            .ok()
            .map(|(x, y)| json!({ "x": x, "y": y, "where": "every row" })),
    };
    let bands: Vec<Value> = (1..=source.band_count())
        .map(|b| {
            let info = source.try_band_info(b)?;
            Ok(json!({
                "index": b,
                "type": info.sample_type.name(),
                "description": info.description,
                "nodata": number_or_text(info.nodata),
            }))
        })
        .collect::<Result<_>>()?;
    Ok(json!({
        "path": path.display().to_string(),
        "container": container,
        "width": grid.width,
        "height": grid.height,
        "band_count": source.band_count(),
        "georeferenced": georeferenced,
        "transform": grid.transform,
        "bounds": [xmin, ymin, xmax, ymax],
        "raster_space": match source.raster_space() { RasterSpace::Area => "area", RasterSpace::Point => "point" },
        "crs": {
            "epsg": crs.epsg,
            "name": crs.name,
            "kind": match crs.kind {
                CrsKind::Projected => "projected",
                CrsKind::Geographic => "geographic",
                CrsKind::Unknown => "unknown",
            },
            "wkt": crs.wkt,
            "linear_unit_m": crs.linear_unit_m,
            "vertical_epsg": crs.vertical_epsg,
        },
        "cell_size_m": cell,
        "nodata": number_or_text(grid.nodata),
        "blocks": blocks,
        "bands": bands,
        "truncated": truncated,
    }))
}

/// The band table of a stack's `stack.json`.
fn stack_table(path: &Path) -> Result<Value> {
    let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, e))?;
    let doc: Value = serde_json::from_str(&text).map_err(|e| {
        Error::file(path, format!("is not valid JSON ({e})"))
            .with_fix("rebuild the stack with `terrastack build`, or restore the file from a copy")
    })?;
    let Some(list) = doc.get("bands").and_then(Value::as_array) else {
        return Err(Error::file(path, "has no \"bands\" list")
            .with_fix("rebuild the stack with `terrastack build`"));
    };
    let bands: Vec<Value> = list
        .iter()
        .enumerate()
        .map(|(i, b)| {
            json!({
                "index": b.get("index").cloned().unwrap_or(json!(i + 1)),
                "name": b.get("name").cloned().unwrap_or(Value::Null),
                "feature": b.get("feature").cloned().unwrap_or(Value::Null),
                "units": b.get("units").cloned().unwrap_or(Value::Null),
                "scale_m": b.get("scale_m").cloned().unwrap_or(Value::Null),
                "date": b.get("date").cloned().unwrap_or(Value::Null),
                "min": stat(b, "min"),
                "max": stat(b, "max"),
                "mean": stat(b, "mean"),
                "std": stat(b, "std"),
                "valid_fraction": stat(b, "valid_fraction"),
            })
        })
        .collect();
    Ok(json!({
        "path": path.display().to_string(),
        "format": doc.get("format").cloned().unwrap_or(Value::Null),
        "bands": bands,
    }))
}

/// Statistic `key` of a `stack.json` band record (`stats.KEY`), null when absent.
fn stat(band: &Value, key: &str) -> Value {
    band.get("stats")
        .and_then(|s| s.get(key))
        .cloned()
        .unwrap_or(Value::Null)
}

fn text(v: &Value) -> String {
    match v {
        Value::Null => "-".into(),
        Value::String(s) => s.clone(),
        other => other.to_string(),
    }
}

fn num(v: &Value) -> String {
    match v.as_f64() {
        Some(x) => format!("{x}"),
        None => text(v),
    }
}

/// The human summary, built from the JSON summary so the two never disagree.
pub fn human(s: &Value) -> String {
    let mut out = String::new();
    let mut line = |label: &str, value: String| {
        out.push_str(&format!("{label:<14}{value}\n"));
    };
    line("raster", text(&s["path"]));
    line(
        "dimensions",
        format!(
            "{} columns x {} rows, {} band(s)",
            s["width"], s["height"], s["band_count"]
        ),
    );
    let crs = &s["crs"];
    if s["georeferenced"] == json!(false) {
        line(
            "georeference",
            "not georeferenced: no transform in the file; coordinates below are cell indices"
                .into(),
        );
    }
    let crs_text = match (&crs["epsg"], &crs["name"]) {
        (Value::Null, Value::Null) => "none stated".to_string(),
        (Value::Null, n) => text(n),
        (e, Value::Null) => format!("EPSG:{e}"),
        (e, n) => format!("EPSG:{e} ({})", text(n)),
    };
    let unit = match crs["linear_unit_m"].as_f64() {
        Some(u) => format!(", 1 unit = {u} m"),
        None => String::new(),
    };
    line("crs", format!("{crs_text}; {}{unit}", text(&crs["kind"])));
    if !crs["vertical_epsg"].is_null() {
        line("vertical crs", format!("EPSG:{}", crs["vertical_epsg"]));
    }
    if !crs["wkt"].is_null() {
        line("wkt", text(&crs["wkt"]));
    }
    let t: Vec<String> = s["transform"]
        .as_array()
        .map(|a| a.iter().map(num).collect())
        .unwrap_or_default();
    line(
        "transform",
        format!("[{}] (GDAL order, cell corners)", t.join(", ")),
    );
    let b: Vec<String> = s["bounds"]
        .as_array()
        .map(|a| a.iter().map(num).collect())
        .unwrap_or_default();
    line(
        "extent",
        format!("x {} .. {}, y {} .. {}", b[0], b[2], b[1], b[3]),
    );
    line(
        "values mean",
        match s["raster_space"].as_str() {
            Some("point") => "point samples at cell centres (pixel-is-point)".into(),
            _ => "cell areas (pixel-is-area)".into(),
        },
    );
    let cell = &s["cell_size_m"];
    line(
        "cell size",
        if cell.is_null() {
            "unknown in metres (no CRS with a known unit)".into()
        } else if cell["where"] == json!("centre row") {
            format!(
                "{:.4} m east-west x {:.4} m north-south at the centre row (varies with latitude)",
                cell["x"].as_f64().unwrap_or(f64::NAN),
                cell["y"].as_f64().unwrap_or(f64::NAN)
            )
        } else {
            format!(
                "{} m east-west x {} m north-south",
                num(&cell["x"]),
                num(&cell["y"])
            )
        },
    );
    line("nodata", num(&s["nodata"]));
    let blocks = &s["blocks"];
    if !blocks.is_null() {
        let pred = match blocks["predictor"].as_u64() {
            Some(2) => ", horizontal predictor",
            Some(3) => ", floating-point predictor",
            _ => "",
        };
        line(
            "storage",
            format!(
                "{} of {} x {}, {}-interleaved, {} compression{pred}, {}",
                text(&blocks["kind"]),
                blocks["width"],
                blocks["height"],
                text(&blocks["interleave"]),
                text(&blocks["compression"]),
                if s["container"] == json!("bigtiff") {
                    "BigTIFF"
                } else {
                    "classic TIFF"
                }
            ),
        );
    }
    let damage = &s["truncated"];
    if !damage.is_null() {
        line(
            "damage",
            format!(
                "TRUNCATED: {} of {} {} lie past the end of the file ({} bytes)",
                damage["blocks_past_end"],
                damage["blocks"],
                text(&damage["kind"]),
                damage["file_bytes"]
            ),
        );
    }
    out.push_str("\nband  type      nodata        description\n");
    for band in s["bands"].as_array().into_iter().flatten() {
        out.push_str(&format!(
            "{:<6}{:<10}{:<14}{}\n",
            text(&band["index"]),
            text(&band["type"]),
            num(&band["nodata"]),
            text(&band["description"])
        ));
    }
    let stack = &s["stack"];
    if !stack.is_null() && !stack["bands"].is_null() {
        let list: Vec<&Value> = stack["bands"].as_array().into_iter().flatten().collect();
        // Names longer than the column widen it, so that the columns stay aligned.
        let name_w = list
            .iter()
            .map(|b| text(&b["name"]).chars().count() + 2)
            .max()
            .unwrap_or(0)
            .max(26);
        out.push_str(&format!(
            "\nstack layers ({}, {})\n{:<6}{:<name_w$}{:<22}{:<13}scale_m\n",
            text(&stack["path"]),
            text(&stack["format"]),
            "band",
            "name",
            "feature",
            "units"
        ));
        for band in &list {
            out.push_str(&format!(
                "{:<6}{:<name_w$}{:<22}{:<13}{}\n",
                text(&band["index"]),
                text(&band["name"]),
                text(&band["feature"]),
                text(&band["units"]),
                text(&band["scale_m"])
            ));
        }
        out.push_str("\nband statistics (every valid cell, as stack.json records them)\n");
        out.push_str(&stats_table(&list));
    }
    out
}

/// The per-band statistics table: band, name, units, min, max, mean, std (population) and
/// the valid share of the grid's cells, in columns as wide as their longest entry, numbers
/// right-aligned with six significant digits.
fn stats_table(bands: &[&Value]) -> String {
    let head = [
        "band", "name", "units", "min", "max", "mean", "std", "valid",
    ];
    let rows: Vec<[String; 8]> = bands
        .iter()
        .map(|b| {
            let n = |k: &str| match b[k].as_f64() {
                Some(x) => sig_digits(x, 6),
                None => "-".into(),
            };
            [
                text(&b["index"]),
                text(&b["name"]),
                text(&b["units"]),
                n("min"),
                n("max"),
                n("mean"),
                n("std"),
                valid_percent(b["valid_fraction"].as_f64()),
            ]
        })
        .collect();
    let widths: Vec<usize> = (0..head.len())
        .map(|c| {
            rows.iter()
                .map(|r| r[c].chars().count())
                .chain([head[c].len()])
                .max()
                .unwrap_or(0)
        })
        .collect();
    let line = |cells: [&str; 8]| {
        let mut s = String::new();
        for (c, cell) in cells.iter().enumerate() {
            let w = widths[c];
            // Text columns left-aligned, numbers right-aligned; two spaces between.
            if c < 3 {
                s.push_str(&format!("{cell:<w$}  "));
            } else {
                s.push_str(&format!("{cell:>w$}  "));
            }
        }
        s.truncate(s.trim_end().len());
        s.push('\n');
        s
    };
    let mut out = line(head);
    for r in &rows {
        out.push_str(&line([
            &r[0], &r[1], &r[2], &r[3], &r[4], &r[5], &r[6], &r[7],
        ]));
    }
    out
}

/// A valid fraction as a percentage with one decimal, never rounded to 0 % or 100 % when
/// it is neither: "99.3 %", "<0.1 %", ">99.9 %", "100 %", "-" when unknown.
fn valid_percent(fraction: Option<f64>) -> String {
    match fraction {
        None => "-".into(),
        Some(f) if f >= 1.0 => "100 %".into(),
        Some(f) if f <= 0.0 => "0 %".into(),
        Some(f) if f * 100.0 < 0.1 => "<0.1 %".into(),
        Some(f) if f * 100.0 > 99.9 => ">99.9 %".into(),
        Some(f) => format!("{:.1} %", f * 100.0),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::Array2;
    use terrastack::grid::{Crs, Grid};
    use terrastack::raster::geotiff::{write_geotiff, WriteOptions};

    #[test]
    fn folder_summary_with_band_table() {
        let dir = tempfile::tempdir().unwrap();
        let grid = Grid::new(
            8,
            6,
            [400_000.0, 0.5, 0.0, 6_000_000.0, 0.0, -0.5],
            Crs::from_epsg(25832),
        )
        .unwrap()
        .with_nodata(Some(f64::NAN));
        let a = Array2::<f32>::zeros((6, 8));
        write_geotiff(
            &dir.path().join("stack.tif"),
            &grid,
            &[a.view(), a.view()],
            &["slope_horn", "tpi_r5m"],
            &WriteOptions::default(),
        )
        .unwrap();
        std::fs::write(
            dir.path().join("stack.json"),
            r#"{"format":"terrastack-stack/1","bands":[{"index":1,"name":"slope_horn","feature":"slope","units":"degrees","scale_m":null},{"index":2,"name":"tpi_r5m","feature":"tpi","units":"metres","scale_m":5.0}]}"#,
        )
        .unwrap();
        let s = describe(dir.path()).unwrap();
        assert_eq!(s["width"], 8);
        assert_eq!(s["crs"]["epsg"], 25832);
        assert_eq!(s["crs"]["kind"], "projected");
        assert_eq!(s["nodata"], "NaN");
        assert_eq!(s["cell_size_m"]["x"], 0.5);
        assert_eq!(s["blocks"]["compression"], "deflate");
        assert_eq!(s["blocks"]["predictor"], 3);
        assert_eq!(s["bands"][1]["description"], "tpi_r5m");
        assert_eq!(s["stack"]["bands"][1]["scale_m"], 5.0);
        let h = human(&s);
        assert!(h.contains("EPSG:25832 (ETRS89 / UTM zone 32N)"), "{h}");
        assert!(h.contains("tpi_r5m"), "{h}");
    }

    #[test]
    fn statistics_table_is_aligned_with_every_digit_needed() {
        let bands = [
            json!({"index": 1, "name": "elevation", "units": "metres",
                   "min": 210.72030639648438, "max": 217.81582641601562,
                   "mean": 212.51553605666527, "std": 1.0154000646618395,
                   "valid_fraction": 0.993}),
            json!({"index": 2, "name": "tangential_curvature_evans_young", "units": "1/m",
                   "min": -5.65e-4, "max": null, "mean": null, "std": null,
                   "valid_fraction": 0.0}),
        ];
        let t = stats_table(&bands.iter().collect::<Vec<_>>());
        let lines: Vec<&str> = t.lines().collect();
        assert_eq!(
            lines,
            [
                "band  name                              units        min      max     mean     std   valid",
                "1     elevation                         metres    210.72  217.816  212.516  1.0154  99.3 %",
                "2     tangential_curvature_evans_young  1/m     -5.65e-4        -        -       -     0 %",
            ]
        );
        assert_eq!(valid_percent(Some(0.0004)), "<0.1 %");
        assert_eq!(valid_percent(Some(0.99999)), ">99.9 %");
        assert_eq!(valid_percent(Some(1.0)), "100 %");
        assert_eq!(valid_percent(None), "-");
    }

    #[test]
    fn geographic_cell_size_at_centre_row() {
        // 1 arc-second cells centred on 36.6° N: 30.8251 m x 24.8544 m from the worked
        // metres-per-degree values of docs/methods.md (110970.16 and 89475.76 m per degree).
        let dir = tempfile::tempdir().unwrap();
        let d = 1.0 / 3600.0;
        let grid = Grid::new(
            5,
            5,
            [-5.0, d, 0.0, 36.6 + 2.5 * d, 0.0, -d],
            Crs::from_epsg(4326),
        )
        .unwrap();
        let path = dir.path().join("g.tif");
        let a = Array2::<u16>::zeros((5, 5));
        write_geotiff(&path, &grid, &[a.view()], &[], &WriteOptions::default()).unwrap();
        let s = describe(&path).unwrap();
        assert_eq!(s["cell_size_m"]["where"], "centre row");
        let y = s["cell_size_m"]["y"].as_f64().unwrap();
        let x = s["cell_size_m"]["x"].as_f64().unwrap();
        assert!((y - 110_970.16 * d).abs() < 1e-3, "{y}");
        assert!((x - 89_475.76 * d).abs() < 1e-3, "{x}");
        assert!(human(&s).contains("at the centre row"));
    }

    #[test]
    fn plain_tiff_says_not_georeferenced() {
        let dir = tempfile::tempdir().unwrap();
        let grid = Grid::new(3, 2, [0.0, 1.0, 0.0, 0.0, 0.0, 1.0], Crs::none()).unwrap();
        let path = dir.path().join("p.tif");
        let a = Array2::<u8>::zeros((2, 3));
        write_geotiff(&path, &grid, &[a.view()], &[], &WriteOptions::default()).unwrap();
        let s = describe(&path).unwrap();
        assert_eq!(s["georeferenced"], false);
        assert!(human(&s).contains("not georeferenced"));
        assert!(s["cell_size_m"].is_null());
    }

    #[test]
    fn folder_without_stack_and_bad_json() {
        let dir = tempfile::tempdir().unwrap();
        let e = describe(dir.path()).unwrap_err().to_string();
        assert!(e.contains("no stack.tif") && e.contains("fix:"), "{e}");
        let grid = Grid::new(2, 2, [0.0, 1.0, 0.0, 2.0, 0.0, -1.0], Crs::from_epsg(32633)).unwrap();
        let a = Array2::<f32>::zeros((2, 2));
        write_geotiff(
            &dir.path().join("stack.tif"),
            &grid,
            &[a.view()],
            &[],
            &WriteOptions::default(),
        )
        .unwrap();
        std::fs::write(dir.path().join("stack.json"), "{ not json").unwrap();
        let e = describe(dir.path()).unwrap_err().to_string();
        assert!(
            e.contains("stack.json") && e.contains("not valid JSON"),
            "{e}"
        );
        let e = describe(&dir.path().join("missing.tif"))
            .unwrap_err()
            .to_string();
        assert!(e.contains("missing.tif"), "{e}");
    }
}

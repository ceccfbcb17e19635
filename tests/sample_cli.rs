//! `terrastack sample` end to end: a small stack written with terrastack's GeoTIFF writer,
//! samples as CSV and GeoJSON, the table read back and checked cell by cell against the
//! arrays the stack was written from.

mod util;

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::Output;

use ndarray::Array2;
use terrastack::raster::geotiff::{write_geotiff, Layout, WriteOptions};
use terrastack::stack::sidecar::{
    BandMetadata, BandStats, GridMetadata, SoftwareMetadata, SourceMetadata, StackMetadata,
    STACK_FORMAT,
};
use terrastack::{Crs, Grid};
use util::{command, s, tempdir};

const W: usize = 300;
const H: usize = 260;
const NAMES: [&str; 3] = ["elevation", "slope_horn", "ndvi"];

/// Band b's value at (row, col): an irregular pattern with fractional float32 values;
/// band 1 is nodata on rows 100..110, cols 50..60.
fn value(b: usize, r: usize, c: usize) -> f32 {
    if b == 1 && (100..110).contains(&r) && (50..60).contains(&c) {
        return f32::NAN;
    }
    ((r * 7919 + c * 104_729 + b * 31) % 10_007) as f32 / 7.0 + b as f32
}

fn grid() -> Grid {
    Grid::new(
        W,
        H,
        [431_000.0, 0.25, 0.0, 6_120_000.0, 0.0, -0.25],
        Crs::from_epsg(32632),
    )
    .unwrap()
}

/// Write a stack folder (tiled 64 x 64 so samples cross tiles) and return its path.
fn make_stack(root: &Path) -> PathBuf {
    make_stack_on(root, &grid())
}

/// The same on another grid of W x H cells.
fn make_stack_on(root: &Path, g: &Grid) -> PathBuf {
    let dir = root.join("stack");
    std::fs::create_dir_all(&dir).unwrap();
    let bands: Vec<Array2<f32>> = (1..=3)
        .map(|b| Array2::from_shape_fn((H, W), |(r, c)| value(b, r, c)))
        .collect();
    let views: Vec<_> = bands.iter().map(|a| a.view()).collect();
    let options = WriteOptions {
        layout: Layout::Tiled { size: 64 },
        ..WriteOptions::default()
    };
    write_geotiff(&dir.join("stack.tif"), g, &views, &NAMES, &options).unwrap();
    let meta = StackMetadata {
        format: STACK_FORMAT.into(),
        grid: GridMetadata::from_grid(g),
        nodata: "NaN".into(),
        bands: NAMES
            .iter()
            .enumerate()
            .map(|(i, n)| BandMetadata {
                index: i + 1,
                name: n.to_string(),
                feature: "elevation".into(),
                method: None,
                scale_m: None,
                window_px: None,
                units: "metres".into(),
                source: "dsm".into(),
                date: None,
                stats: BandStats {
                    min: None,
                    max: None,
                    mean: None,
                    std: None,
                    valid_fraction: 1.0,
                },
                extra: Default::default(),
            })
            .collect(),
        sources: vec![SourceMetadata {
            role: "dsm".into(),
            path: "dsm.tif".into(),
            sha256: "0".repeat(64),
        }],
        parameters: serde_json::json!({}),
        software: SoftwareMetadata::default(),
    };
    std::fs::write(
        dir.join("stack.json"),
        serde_json::to_string_pretty(&meta).unwrap(),
    )
    .unwrap();
    dir
}

fn terrastack(args: &[&str], threads: &str) -> Output {
    command()
        .args(args)
        .env("RAYON_NUM_THREADS", threads)
        .output()
        .unwrap()
}

/// Parsed table: header and rows of fields.
fn read_table(path: &Path) -> (Vec<String>, Vec<Vec<String>>) {
    let text = std::fs::read_to_string(path).unwrap();
    let mut lines = text.lines();
    let header = lines.next().unwrap().split(',').map(String::from).collect();
    let rows = lines
        .map(|l| l.split(',').map(String::from).collect())
        .collect();
    (header, rows)
}

const CSV: &str = "id,x,y,class,radius_m\n\
    p1,431010.1,6119990.1,fen,\n\
    p2,431050.3,6119970.2,bog,1.2\n\
    p3,431012.6,6119974.6,fen,1.0\n\
    p4,431030.0,6119950.0,bog,0.6\n\
    p5,431060.0,6119940.0,meadow,\n\
    p6,431070.2,6119945.9,meadow,0.8\n";

#[test]
fn cell_values_equal_the_written_stack_and_folds_hold_samples_together() {
    let tmp = tempdir();
    let stack = make_stack(tmp.path());
    let samples = tmp.path().join("samples.csv");
    std::fs::write(&samples, CSV).unwrap();
    let out = tmp.path().join("table.csv");
    let o = terrastack(
        &[
            "sample",
            "--stack",
            s(&stack),
            "--samples",
            s(&samples),
            "--out",
            s(&out),
            "--folds",
            "2",
        ],
        "2",
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(stdout.contains("6 sample(s) of 3 class(es)"), "{stdout}");
    // p3's circle covers 20 cells of the nodata patch: dropped and counted.
    assert!(
        stdout.contains("with nodata in some band: 20 (dropped)"),
        "{stdout}"
    );

    let (header, rows) = read_table(&out);
    assert_eq!(
        header,
        [
            "sample_id",
            "class",
            "x",
            "y",
            "fold",
            "elevation",
            "slope_horn",
            "ndvi"
        ]
    );
    let g = grid();
    let mut fold_of: BTreeMap<String, String> = BTreeMap::new();
    let mut per_sample: BTreeMap<String, usize> = BTreeMap::new();
    for row in &rows {
        let x: f64 = row[2].parse().unwrap();
        let y: f64 = row[3].parse().unwrap();
        let (fc, fr) = g.to_cell(x, y);
        // Rows are at cell centres (fractional index exactly .5).
        assert_eq!(fc.fract(), 0.5, "{row:?}");
        assert_eq!(fr.fract(), 0.5, "{row:?}");
        let (c, r) = (fc.floor() as usize, fr.floor() as usize);
        for b in 1..=3 {
            let got: f32 = row[4 + b].parse().unwrap();
            // Exact float32 equality with the array the stack was written from.
            assert_eq!(got.to_bits(), value(b, r, c).to_bits(), "{row:?} band {b}");
        }
        let f = fold_of.entry(row[0].clone()).or_insert(row[4].clone());
        assert_eq!(f, &row[4], "sample {} split across folds", row[0]);
        *per_sample.entry(row[0].clone()).or_default() += 1;
    }
    // Points without a radius take one cell each.
    assert_eq!(per_sample["p1"], 1);
    assert_eq!(per_sample["p5"], 1);
    assert!(per_sample["p2"] > 1 && per_sample["p4"] > 1 && per_sample["p6"] > 1);
    // p3's centre is at fractional cell (50.4, 101.6); its 1 m = 4-cell radius holds 47
    // cell centres, 20 of them in the nodata patch (brute-force count over all cells with
    // a plain Python loop): 27 rows remain.
    assert_eq!(per_sample["p3"], 27);
    // Stratified: each class of 2 samples has one sample per fold.
    let mut classes: BTreeMap<(String, String), usize> = BTreeMap::new();
    for row in &rows {
        classes.insert((row[1].clone(), row[0].clone()), row[4].parse().unwrap());
    }
    for class in ["bog", "fen", "meadow"] {
        let folds: Vec<usize> = classes
            .iter()
            .filter(|((c, _), _)| c == class)
            .map(|(_, f)| *f)
            .collect();
        let mut sorted = folds.clone();
        sorted.sort();
        assert_eq!(sorted, vec![1, 2], "class {class}");
    }

    // Same seed, one thread versus two: byte-identical tables.
    let out1 = tmp.path().join("table1.csv");
    let o = terrastack(
        &[
            "sample",
            "--stack",
            s(&stack),
            "--samples",
            s(&samples),
            "--out",
            s(&out1),
            "--folds",
            "2",
        ],
        "1",
    );
    assert!(o.status.success());
    assert_eq!(std::fs::read(&out).unwrap(), std::fs::read(&out1).unwrap());
    // Inputs untouched, no temporary file left behind.
    assert_eq!(std::fs::read_to_string(&samples).unwrap(), CSV);
    let leftovers: Vec<_> = std::fs::read_dir(tmp.path())
        .unwrap()
        .filter_map(|e| e.ok())
        .filter(|e| e.file_name().to_string_lossy().contains("partial"))
        .collect();
    assert!(leftovers.is_empty());
}

#[test]
fn geojson_polygons_aggregate_to_the_mean_of_their_cells() {
    let tmp = tempdir();
    let stack = make_stack(tmp.path());
    let gj = tmp.path().join("plots.geojson");
    std::fs::write(
        &gj,
        r#"{"type":"FeatureCollection","features":[
        {"type":"Feature","id":"wet-1","properties":{"habitat":"reed"},
         "geometry":{"type":"Polygon","coordinates":[[[431005.1,6119995.2],[431009.3,6119994.1],[431007.2,6119989.9],[431005.1,6119995.2]]]}},
        {"type":"Feature","id":"dry-1","properties":{"habitat":"grass","radius_m":1.5},
         "geometry":{"type":"Point","coordinates":[431040.2,6119960.3]}},
        {"type":"Feature","id":"dry-2","properties":{"habitat":"grass"},
         "geometry":{"type":"MultiPolygon","coordinates":[[[[431020.0,6119980.0],[431022.0,6119980.0],[431022.0,6119978.0],[431020.0,6119980.0]]],[[[431030.0,6119930.0],[431031.0,6119930.0],[431031.0,6119929.0],[431030.0,6119929.0]]]]}}
        ]}"#,
    )
    .unwrap();
    let cells = tmp.path().join("cells.csv");
    let means = tmp.path().join("means.csv");
    let base = [
        "sample",
        "--stack",
        s(&stack),
        "--samples",
        s(&gj),
        "--class-field",
        "habitat",
        "--folds",
        "2",
    ];
    let o = terrastack(&[&base[..], &["--out", s(&cells)]].concat(), "2");
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let o = terrastack(
        &[&base[..], &["--out", s(&means), "--aggregate", "mean"]].concat(),
        "2",
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let (_, cell_rows) = read_table(&cells);
    let (_, mean_rows) = read_table(&means);
    assert_eq!(mean_rows.len(), 3);
    for m in &mean_rows {
        let mine: Vec<&Vec<String>> = cell_rows.iter().filter(|r| r[0] == m[0]).collect();
        assert!(!mine.is_empty());
        for b in 0..3 {
            let mean = mine
                .iter()
                .map(|r| r[5 + b].parse::<f32>().unwrap() as f64)
                .sum::<f64>()
                / mine.len() as f64;
            // Aggregated rows carry the cell count before the bands.
            let got: f64 = m[6 + b].parse().unwrap();
            // Same cells, same f64 summation order: equal to rounding of the printout.
            assert!((got - mean).abs() <= 1e-9 * mean.abs(), "{m:?}");
        }
        assert_eq!(m[4], mine[0][4]);
        assert_eq!(m[5], mine.len().to_string());
    }
}

#[test]
fn bad_input_is_refused_with_file_and_fix() {
    let tmp = tempdir();
    let stack = make_stack(tmp.path());
    let samples = tmp.path().join("samples.csv");
    std::fs::write(&samples, CSV).unwrap();
    let out = tmp.path().join("t.csv");
    let run = |extra: &[&str], samples: &Path, stack: &Path| {
        let mut a = vec![
            "sample",
            "--stack",
            s(stack),
            "--samples",
            s(samples),
            "--out",
            s(&out),
        ];
        a.extend_from_slice(extra);
        terrastack(&a, "2")
    };
    let err = |o: &Output| String::from_utf8_lossy(&o.stderr).into_owned();

    // Classes of 2 samples with 5 folds: reported, and fatal with --strict (exit 3).
    let o = run(&["--strict"], &samples, &stack);
    assert_eq!(o.status.code(), Some(3), "{}", err(&o));
    assert!(
        err(&o).contains("fewer samples inside the stack than the 5 folds"),
        "{}",
        err(&o)
    );
    assert!(!out.exists());
    let o = run(&[], &samples, &stack);
    assert!(o.status.success());
    assert!(String::from_utf8_lossy(&o.stdout)
        .contains("fewer samples inside the stack than the 5 folds"));

    // Existing output without --force.
    let o = run(&["--folds", "2"], &samples, &stack);
    assert_eq!(o.status.code(), Some(1));
    assert!(
        err(&o).contains("t.csv") && err(&o).contains("--force"),
        "{}",
        err(&o)
    );
    let o = run(&["--folds", "2", "--force"], &samples, &stack);
    assert!(o.status.success(), "{}", err(&o));

    // One fold is a usage error (exit 2).
    let o = run(&["--folds", "1", "--force"], &samples, &stack);
    assert_eq!(o.status.code(), Some(2));

    // A folder without stack.json.
    let empty = tmp.path().join("empty");
    std::fs::create_dir(&empty).unwrap();
    let o = run(&["--force"], &samples, &empty);
    assert_eq!(o.status.code(), Some(1));
    assert!(
        err(&o).contains("empty") && err(&o).contains("stack.json"),
        "{}",
        err(&o)
    );

    // A CSV with a bad number names the file and the line.
    let bad = tmp.path().join("bad.csv");
    std::fs::write(&bad, "x,y,class\n1,2,a\n3,four,b\n").unwrap();
    let o = run(&["--force"], &bad, &stack);
    assert_eq!(o.status.code(), Some(1));
    assert!(err(&o).contains("bad.csv: line 3"), "{}", err(&o));

    // Duplicate ids.
    let dup = tmp.path().join("dup.csv");
    std::fs::write(
        &dup,
        "id,x,y,class\na,431001,6119999,x\na,431002,6119998,y\n",
    )
    .unwrap();
    let o = run(&["--force"], &dup, &stack);
    assert!(err(&o).contains("used more than once"), "{}", err(&o));

    // Every sample outside the stack: most likely the wrong CRS.
    let far = tmp.path().join("far.csv");
    std::fs::write(&far, "x,y,class\n13.4,52.5,a\n13.5,52.6,b\n").unwrap();
    let o = run(&["--force"], &far, &stack);
    assert_eq!(o.status.code(), Some(1));
    assert!(
        err(&o).contains("none of the 2 sample(s) lies inside the stack"),
        "{}",
        err(&o)
    );
    assert!(err(&o).contains("EPSG:32632"), "{}", err(&o));

    // Lon/lat without GDAL.
    #[cfg(not(feature = "gdal"))]
    {
        let o = run(&["--force", "--lonlat"], &samples, &stack);
        assert_eq!(o.status.code(), Some(1));
        assert!(err(&o).contains("--features gdal"), "{}", err(&o));
    }

    // None of this panicked.
    assert!(!err(&o).contains("panicked"));
}

/// Lon/lat input through GDAL: on the central meridian of UTM zone 32 (9°E) at the
/// equator, easting is 500 000 m and northing 0 m exactly (definition of the UTM false
/// easting and of the equator's northing).
#[cfg(feature = "gdal")]
#[test]
fn lonlat_and_ogr_layers_are_transformed_into_the_stack_crs() {
    let tmp = tempdir();
    // Cell (40, 40) has its north-west corner at (500000, 0).
    let g = Grid::new(
        W,
        H,
        [499_990.0, 0.25, 0.0, 10.0, 0.0, -0.25],
        Crs::from_epsg(32632),
    )
    .unwrap();
    let stack = make_stack_on(tmp.path(), &g);
    let csv = tmp.path().join("ll.csv");
    // 1e-7 degrees (about 1 cm) inside cell (40, 40).
    std::fs::write(&csv, "lon,lat,class\n9.0000001,-0.0000001,a\n").unwrap();
    let out = tmp.path().join("ll_out.csv");
    let o = terrastack(
        &[
            "sample",
            "--stack",
            s(&stack),
            "--samples",
            s(&csv),
            "--out",
            s(&out),
            "--folds",
            "2",
            "--lonlat",
        ],
        "2",
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let (_, rows) = read_table(&out);
    assert_eq!(rows.len(), 1);
    assert_eq!(
        (rows[0][2].as_str(), rows[0][3].as_str()),
        ("500000.125", "-0.125")
    );
    assert_eq!(
        rows[0][5].parse::<f32>().unwrap().to_bits(),
        value(1, 40, 40).to_bits()
    );

    // A GeoJSON text sequence read through OGR: WGS84 by definition (RFC 8142/7946); a
    // 0.3 m circle around (500000, 0) holds the 4 cell centres at (±0.125, ±0.125) m,
    // 0.177 m away; the next ones are 0.395 m away (closed form).
    let seq = tmp.path().join("plots.geojsons");
    std::fs::write(
        &seq,
        "\u{1e}{\"type\":\"Feature\",\"properties\":{\"class\":\"a\",\"radius_m\":0.3,\"id\":\"c1\"},\"geometry\":{\"type\":\"Point\",\"coordinates\":[9.0,0.0]}}\n",
    )
    .unwrap();
    let out = tmp.path().join("seq_out.csv");
    let o = terrastack(
        &[
            "sample",
            "--stack",
            s(&stack),
            "--samples",
            s(&seq),
            "--out",
            s(&out),
            "--folds",
            "2",
        ],
        "2",
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let (_, rows) = read_table(&out);
    assert_eq!(rows.len(), 4, "{rows:?}");
    assert!(rows.iter().all(|r| r[0] == "c1"));
}

#[test]
fn separability_report_beside_the_table_and_its_refusals() {
    let tmp = tempfile::tempdir().unwrap();
    let stack = make_stack(tmp.path());
    let samples = tmp.path().join("samples.csv");
    std::fs::write(&samples, CSV).unwrap();
    let out = tmp.path().join("table.csv");
    let args = |extra: &[&str]| {
        let mut a = vec![
            "sample",
            "--stack",
            s(&stack),
            "--samples",
            s(&samples),
            "--out",
            s(&out),
            "--folds",
            "2",
        ];
        a.extend_from_slice(extra);
        a.into_iter().map(String::from).collect::<Vec<_>>()
    };
    let run = |extra: &[&str]| {
        let a = args(extra);
        terrastack(&a.iter().map(|x| x.as_str()).collect::<Vec<_>>(), "2")
    };
    let o = run(&[]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(stdout.contains("class separability per band"), "{stdout}");
    assert!(stdout.contains("best band per class pair"), "{stdout}");
    let report_path = tmp.path().join("table.separability.json");
    let report: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&report_path).unwrap()).unwrap();
    assert_eq!(report["format"], "terrastack-separability/1");
    assert_eq!(
        report["classes"],
        serde_json::json!(["bog", "fen", "meadow"])
    );
    // Three classes: pairs (bog, fen), (bog, meadow), (fen, meadow), one JM each per band.
    assert_eq!(report["pairs"], serde_json::json!([[0, 1], [0, 2], [1, 2]]));
    let bands = report["bands"].as_array().unwrap();
    assert_eq!(bands.len(), 3);
    for b in bands {
        assert_eq!(b["jm"].as_array().unwrap().len(), 3);
        let f = b["anova_f"].as_f64().unwrap();
        assert!(f > 0.0, "{b}");
    }
    // Rerunning without --force refuses (table first); with it, both are replaced.
    let o = run(&[]);
    assert_eq!(o.status.code(), Some(1));
    std::fs::remove_file(&out).unwrap();
    let o = run(&[]);
    assert_eq!(o.status.code(), Some(1));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains("separability report already exists"), "{err}");
    assert!(!out.exists(), "no table written when the report is refused");
    let o = run(&["--force", "--correlation-threshold", "0.5"]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let report: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&report_path).unwrap()).unwrap();
    assert_eq!(report["correlation_threshold"], 0.5);
    // A threshold that is not a correlation is a usage error.
    let o = run(&["--force", "--correlation-threshold", "1.5"]);
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("--correlation-threshold"));
}

#[test]
fn parquet_table_has_the_csv_rows_and_geoparquet_metadata() {
    use parquet::file::reader::{FileReader, SerializedFileReader};
    let tmp = tempfile::tempdir().unwrap();
    let stack = make_stack(tmp.path());
    let samples = tmp.path().join("samples.csv");
    std::fs::write(&samples, CSV).unwrap();
    let csv = tmp.path().join("t.csv");
    let pq = tmp.path().join("t.parquet");
    for out in [&csv, &pq] {
        let o = terrastack(
            &[
                "sample",
                "--stack",
                s(&stack),
                "--samples",
                s(&samples),
                "--out",
                s(out),
                "--folds",
                "2",
                "--block-size",
                "20",
            ],
            "2",
        );
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    }
    let (header, rows) = read_table(&csv);
    assert_eq!(&header[4..6], ["fold", "block"]);
    // Read back by the parquet crate's reader (pyarrow and geopandas in
    // scripts/ci/catalog.sh): one row per CSV row, geometry first, then the CSV's columns.
    let reader = SerializedFileReader::new(std::fs::File::open(&pq).unwrap()).unwrap();
    let meta = reader.metadata();
    assert_eq!(meta.file_metadata().num_rows() as usize, rows.len());
    let fields: Vec<String> = meta
        .file_metadata()
        .schema()
        .get_fields()
        .iter()
        .map(|f| f.name().to_string())
        .collect();
    assert_eq!(fields[0], "geometry");
    assert_eq!(&fields[1..], &header[..]);
    let kv = meta.file_metadata().key_value_metadata().unwrap();
    let geo = kv.iter().find(|k| k.key == "geo").unwrap();
    let geo: serde_json::Value = serde_json::from_str(geo.value.as_deref().unwrap()).unwrap();
    assert_eq!(geo["version"], "1.1.0");
    assert_eq!(geo["primary_column"], "geometry");
    assert_eq!(geo["columns"]["geometry"]["encoding"], "WKB");
    assert_eq!(geo["columns"]["geometry"]["crs"]["id"]["code"], 32632);
}

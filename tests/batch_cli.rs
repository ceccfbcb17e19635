//! `terrastack batch` end to end through the binary: resume after SIGKILL gives the same
//! bytes as an uninterrupted run, a changed input rebuilds only its flight, one broken
//! flight fails alone, shards add up to the whole batch, and known shifts between flights
//! are recovered.
//!
//! The test site is a closed-form textured surface (many plane waves, see `surface`)
//! sampled for three flights displaced by known offsets; it is test input, not the demo.

mod util;

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::Stdio;
use std::time::Duration;

use ndarray::Array2;
use serde_json::Value;
use terrastack::raster::geotiff::{write_geotiff, WriteOptions};
use terrastack::{Crs, Grid};
use util::{assert_same_files, command, read_json, tempdir, tree};

/// Cell size of the test site in metres.
const CELL: f64 = 0.1;

/// The flights: id, date, and the known offset (east, north, metres) of the flight
/// against the first.
const FLIGHTS: [(&str, &str, f64, f64); 3] = [
    ("spring", "2025-04-10", 0.0, 0.0),
    ("summer", "2025-06-22", 0.23, -0.14),
    ("autumn", "2025-09-30", -0.31, 0.42),
];

/// Closed-form textured surface (metres): 200 plane waves with pseudo-random wavelengths of
/// 0.3 m and more, phases, and amplitudes falling with frequency.
fn surface(x: f64, y: f64) -> f64 {
    let mut state = 0x9e37_79b9_7f4a_7c15u64;
    let mut next = || {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        (state >> 11) as f64 / (1u64 << 53) as f64
    };
    let mut z = 0.0;
    for _ in 0..200 {
        let u = (next() - 0.5) * 7.0; // cycles per metre
        let v = (next() - 0.5) * 7.0;
        let phase = next() * std::f64::consts::TAU;
        let amp = 0.05 / (u * u + v * v).sqrt().max(0.2);
        z += amp * (std::f64::consts::TAU * (u * x + v * y) + phase).cos();
    }
    z
}

/// Write the three flights (DSM and a five-band orthomosaic each) and a manifest into
/// `dir`; `size` cells a side.
fn make_site(dir: &Path, size: usize, extra_manifest: &str) -> PathBuf {
    let (x0, y1) = (600_000.0, 5_300_000.0);
    let grid = Grid::new(
        size,
        size,
        [x0, CELL, 0.0, y1, 0.0, -CELL],
        Crs::from_epsg(32633),
    )
    .unwrap();
    let mut text = String::from(
        "[batch]\nout = \"out\"\n[batch.recipe.features]\nlist = [\"slope\", \"tpi\", \"ndvi\"]\nscales_m = [0.5]\n",
    );
    text += extra_manifest;
    for (k, (id, date, dx, dy)) in FLIGHTS.iter().enumerate() {
        let fdir = dir.join(id);
        std::fs::create_dir_all(&fdir).unwrap();
        // The flight sees at (x, y) the ground the first flight sees at (x − dx, y − dy).
        let z = Array2::from_shape_fn((size, size), |(r, c)| {
            let (x, y) = grid.cell_centre(c as f64, r as f64);
            (100.0 + surface(x - x0 - dx, y - y1 - dy)) as f32
        });
        write_geotiff(
            &fdir.join("dsm.tif"),
            &grid,
            &[z.view()],
            &["elevation"],
            &WriteOptions::default(),
        )
        .unwrap();
        let green = 1.0 + 0.25 * k as f32;
        let bands: Vec<Array2<f32>> = (0..5)
            .map(|b| {
                z.mapv(|v| {
                    let t = (v - 100.0) * 2.0;
                    match b {
                        4 => (0.35 + 0.1 * t) * green,
                        2 => 0.06 - 0.02 * t,
                        _ => 0.05 + 0.01 * b as f32,
                    }
                })
            })
            .collect();
        let views: Vec<_> = bands.iter().map(|a| a.view()).collect();
        write_geotiff(
            &fdir.join("ortho.tif"),
            &grid,
            &views,
            &["blue", "green", "red", "rededge", "nir"],
            &WriteOptions::default(),
        )
        .unwrap();
        text += &format!(
            "[[flight]]\nid = \"{id}\"\ndate = \"{date}\"\ndsm = \"{id}/dsm.tif\"\northo = \"{id}/ortho.tif\"\nbands = \"blue=1,green=2,red=3,rededge=4,nir=5\"\n"
        );
    }
    let path = dir.join("flights.toml");
    std::fs::write(&path, text).unwrap();
    path
}

fn batch(manifest: &Path, args: &[&str]) -> std::process::Output {
    command()
        .arg("batch")
        .arg(manifest)
        .args(["--quiet", "--memory", "512M"])
        .args(args)
        .output()
        .unwrap()
}

fn report(root: &Path, name: &str) -> Value {
    read_json(&root.join(name))
}

fn statuses(r: &Value) -> BTreeMap<String, String> {
    r["flights"]
        .as_array()
        .unwrap()
        .iter()
        .map(|f| {
            (
                f["id"].as_str().unwrap().to_string(),
                f["status"].as_str().unwrap().to_string(),
            )
        })
        .collect()
}

#[test]
fn killed_batch_resumes_to_the_same_bytes() {
    let tmp = tempdir();
    // 520 cells a side: four 512-cell tiles, so tile order in the files is exercised.
    let manifest = make_site(tmp.path(), 520, "");
    let clean = tmp.path().join("clean");
    let out = batch(
        &manifest,
        &["--out", clean.to_str().unwrap(), "--jobs", "2"],
    );
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let whole = tree(&clean);
    assert!(
        whole.contains_key("temporal/stack.tif") && whole.contains_key("flights/summer/stack.json")
    );

    // Kill at several moments (SIGKILL), resuming each time, then finish.
    let resumed = tmp.path().join("resumed");
    for delay_ms in [150u64, 500, 900, 1400] {
        let mut child = command()
            .arg("batch")
            .arg(&manifest)
            .args([
                "--quiet",
                "--memory",
                "512M",
                "--jobs",
                "2",
                "--out",
                resumed.to_str().unwrap(),
            ])
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap();
        std::thread::sleep(Duration::from_millis(delay_ms));
        let _ = child.kill(); // SIGKILL on Unix
        let _ = child.wait();
        if delay_ms == 150 {
            // The first kill lands before the batch could finish.
            assert!(!resumed.join("temporal/stack.json").exists());
        }
    }
    let out = batch(
        &manifest,
        &["--out", resumed.to_str().unwrap(), "--jobs", "2"],
    );
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let after = tree(&resumed);
    assert_same_files(&after, &whole);
    // A further run changes nothing and skips everything.
    let out = batch(&manifest, &["--out", resumed.to_str().unwrap()]);
    assert!(out.status.success());
    let r = report(&resumed, "batch-report.json");
    assert!(statuses(&r).values().all(|s| s == "skipped"), "{r}");
    assert_eq!(r["temporal"]["status"], "skipped");
}

#[test]
fn changed_input_rebuilds_its_flight_only() {
    let tmp = tempdir();
    let manifest = make_site(tmp.path(), 96, "");
    assert!(batch(&manifest, &[]).status.success());
    let root = tmp.path().join("out");
    let before = std::fs::read(root.join("temporal/stack.json")).unwrap();
    // Rewrite autumn's DSM with other heights (relief 1.5 times as high).
    let dsm = tmp.path().join("autumn/dsm.tif");
    let src = terrastack::raster::open(&dsm).unwrap();
    let grid = src.grid().clone();
    let z = src
        .read_window(1, terrastack::Window::full(&grid))
        .unwrap()
        .mapv(|v| (v - 100.0) * 1.5 + 100.0);
    drop(src);
    write_geotiff(
        &dsm,
        &grid,
        &[z.view()],
        &["elevation"],
        &WriteOptions::default(),
    )
    .unwrap();
    let out = batch(&manifest, &[]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let r = report(&root, "batch-report.json");
    let s = statuses(&r);
    assert_eq!(s["autumn"], "built");
    assert_eq!(s["spring"], "skipped");
    assert_eq!(s["summer"], "skipped");
    assert_eq!(r["temporal"]["status"], "built");
    assert_ne!(
        std::fs::read(root.join("temporal/stack.json")).unwrap(),
        before
    );
}

#[test]
fn broken_flight_fails_alone_with_a_named_file() {
    let tmp = tempdir();
    let manifest = make_site(tmp.path(), 64, "");
    std::fs::write(
        tmp.path().join("summer/dsm.tif"),
        "these are not elevations",
    )
    .unwrap();
    let out = batch(&manifest, &["--jobs", "3"]);
    assert!(!out.status.success());
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(
        stderr.contains("1 of 3 flights failed: summer") && stderr.contains("fix:"),
        "{stderr}"
    );
    // The unreadable DSM is left out of the common grid; its flight alone fails.
    let root = tmp.path().join("out");
    let r = report(&root, "batch-report.json");
    let s = statuses(&r);
    assert_eq!(s["summer"], "failed");
    assert_eq!(s["spring"], "built");
    assert_eq!(s["autumn"], "built");
    let err = r["flights"]
        .as_array()
        .unwrap()
        .iter()
        .find(|f| f["id"] == "summer")
        .unwrap()["error"]
        .as_str()
        .unwrap()
        .to_string();
    assert!(err.contains("summer/dsm.tif"), "{err}");
    assert!(r["temporal"].is_null());
    assert!(!root.join("flights/summer/stack.json").exists());
}

#[test]
fn shards_together_equal_a_whole_run() {
    let tmp = tempdir();
    let manifest = make_site(tmp.path(), 64, "");
    let whole_root = tmp.path().join("whole");
    assert!(batch(&manifest, &["--out", whole_root.to_str().unwrap()])
        .status
        .success());
    let sharded = tmp.path().join("sharded");
    let mut ids = Vec::new();
    for i in 0..2 {
        let shard = format!("{i}/2");
        let out = batch(
            &manifest,
            &["--out", sharded.to_str().unwrap(), "--shard", &shard],
        );
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        let r = report(&sharded, &format!("batch-report-shard-{i}-of-2.json"));
        assert!(r["temporal"].is_null());
        ids.extend(statuses(&r).into_keys());
    }
    ids.sort();
    // Sorted ids autumn, spring, summer: shard 0 takes autumn and summer, shard 1 spring.
    assert_eq!(ids, vec!["autumn", "spring", "summer"]);
    // The final unsharded run only adds the temporal stack.
    let out = batch(&manifest, &["--out", sharded.to_str().unwrap()]);
    assert!(out.status.success());
    assert!(statuses(&report(&sharded, "batch-report.json"))
        .values()
        .all(|s| s == "skipped"));
    assert_eq!(tree(&sharded), tree(&whole_root));
    // A bad shard is a usage error.
    let out = batch(&manifest, &["--shard", "2/2"]);
    assert_eq!(out.status.code(), Some(2));
}

#[test]
fn known_shifts_are_recovered_and_applied() {
    let tmp = tempdir();
    let manifest = make_site(tmp.path(), 256, "reference = \"spring\"\n");
    // Move the line into the [batch] table: it was appended after the recipe table.
    let text = std::fs::read_to_string(&manifest).unwrap();
    let text = text.replace("reference = \"spring\"\n", "").replacen(
        "[batch]\n",
        "[batch]\nreference = \"spring\"\n",
        1,
    );
    std::fs::write(&manifest, text).unwrap();
    let out = batch(&manifest, &["--align-shifts"]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let root = tmp.path().join("out");
    let r = report(&root, "batch-report.json");
    for (id, _, dx, dy) in FLIGHTS.iter().skip(1) {
        let f = r["flights"]
            .as_array()
            .unwrap()
            .iter()
            .find(|f| f["id"] == *id)
            .unwrap();
        let got_dx = f["shift"]["dx"].as_f64().unwrap();
        let got_dy = f["shift"]["dy"].as_f64().unwrap();
        // Known offsets by construction of the test site; within 0.25 cell.
        assert!(
            (got_dx - dx).abs() < 0.25 * CELL,
            "{id}: dx {got_dx} vs {dx}"
        );
        assert!(
            (got_dy - dy).abs() < 0.25 * CELL,
            "{id}: dy {got_dy} vs {dy}"
        );
        assert_eq!(f["shift"]["applied"], true);
        // The flight's stack lies on the common grid moved by the estimate.
        let meta: Value = read_json(&root.join(format!("flights/{id}/stack.json")));
        let common: Value = read_json(&root.join("temporal/stack.json"));
        let t = meta["grid"]["transform"].as_array().unwrap();
        let c = common["grid"]["transform"].as_array().unwrap();
        assert!((t[0].as_f64().unwrap() - c[0].as_f64().unwrap() - got_dx).abs() < 1e-9);
        assert!((t[3].as_f64().unwrap() - c[3].as_f64().unwrap() - got_dy).abs() < 1e-9);
    }
    // Dated bands carry their date; summaries say what they summarise.
    let common: Value = read_json(&root.join("temporal/stack.json"));
    let bands = common["bands"].as_array().unwrap();
    let ndvi_summer = bands
        .iter()
        .find(|b| b["name"].as_str().unwrap().starts_with("ndvi") && b["date"] == "2025-06-22");
    assert!(ndvi_summer.is_some());
    let argmax = bands
        .iter()
        .find(|b| b["name"] == "ndvi_argmax_date")
        .unwrap();
    assert_eq!(argmax["summarises"], "ndvi");
    assert_eq!(argmax["dates"].as_array().unwrap().len(), 3);
}

#[test]
fn bad_manifest_is_a_clear_error() {
    let tmp = tempdir();
    let m = tmp.path().join("flights.toml");
    std::fs::write(
        &m,
        "[[flight]]\nid = \"a\"\ndate = \"2025-13-01\"\ndsm = \"x.tif\"\n",
    )
    .unwrap();
    let out = batch(&m, &[]);
    assert!(!out.status.success());
    let e = String::from_utf8_lossy(&out.stderr);
    assert!(
        e.contains("flights.toml") && e.contains("month 13") && e.contains("fix:"),
        "{e}"
    );
    let out = batch(&tmp.path().join("none.toml"), &[]);
    assert!(!out.status.success());
    assert!(String::from_utf8_lossy(&out.stderr).contains("none.toml"));
}

#[test]
fn demo_shifts_are_recovered_within_a_quarter_cell() {
    use terrastack::batch::manifest::{common_grid, Manifest};
    use terrastack::batch::{FlightWork, StackWork};
    let demo = Path::new(env!("CARGO_MANIFEST_DIR")).join("sample-dsm");
    let site: Value = read_json(&demo.join("site.json"));
    let manifest = Manifest::load(&demo.join("flights.toml")).unwrap();
    let work = StackWork;
    let reference = manifest.reference_flight();
    let ref_grid = work.grid_of(&reference.recipe.dsm).unwrap();
    let grids: Vec<_> = manifest
        .flights
        .iter()
        .map(|f| (f.recipe.dsm.clone(), work.grid_of(&f.recipe.dsm).unwrap()))
        .collect();
    let grid = common_grid(&manifest.grid, &ref_grid, &grids).unwrap();
    let cell = grid.res_x();
    for entry in site["flights"].as_array().unwrap() {
        let date = entry["date"].as_str().unwrap();
        let flight = manifest.flights.iter().find(|f| f.date == date).unwrap();
        if flight.id == reference.id {
            continue;
        }
        let (dx, dy, peak) = work
            .shift(reference, flight, manifest.shift_layer, &grid)
            .unwrap();
        // Known shifts written by the demo generator (sample-dsm/site.json, `shift_m`,
        // relative to the reference flight, same sign convention).
        let want_dx = entry["shift_m"][0].as_f64().unwrap();
        let want_dy = entry["shift_m"][1].as_f64().unwrap();
        assert!(
            (dx - want_dx).abs() < 0.25 * cell,
            "{date}: dx {dx} vs {want_dx}"
        );
        assert!(
            (dy - want_dy).abs() < 0.25 * cell,
            "{date}: dy {dy} vs {want_dy}"
        );
        assert!(peak > 0.05, "{date}: weak correlation peak {peak}");
    }
}

#[test]
fn misaligned_flights_are_aligned_by_default_and_the_choice_is_reported() {
    let tmp = tempdir();
    let manifest = make_site(tmp.path(), 128, "");
    // Default (auto): the known shifts of 2.7 and 5.2 cells are confident and applied.
    let auto = tmp.path().join("auto");
    let out = batch(&manifest, &["--out", auto.to_str().unwrap()]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let r = report(&auto, "batch-report.json");
    assert_eq!(r["alignment"]["mode"], "auto");
    assert_eq!(r["alignment"]["min_shift_cells"], 0.2);
    for f in r["flights"].as_array().unwrap() {
        if f["id"] != "spring" {
            assert_eq!(f["shift"]["applied"], true, "{f}");
            assert_eq!(f["shift"]["confident"], true, "{f}");
        }
    }
    assert_eq!(r["temporal"]["status"], "built");
    // --align off: nothing applied, the temporal stack is written as the flights are, and
    // the report says so.
    let off = tmp.path().join("off");
    let out = batch(
        &manifest,
        &["--out", off.to_str().unwrap(), "--align", "off"],
    );
    assert!(out.status.success());
    let r = report(&off, "batch-report.json");
    assert_eq!(r["alignment"]["mode"], "off");
    assert!(r["flights"]
        .as_array()
        .unwrap()
        .iter()
        .all(|f| f["shift"].is_null() || f["shift"]["applied"] == false));
    assert_eq!(r["temporal"]["status"], "built");
    // A flight that shares nothing with the reference (its DSM replaced by unrelated
    // pseudo-random relief): its estimate is not confident, so auto refuses the
    // multi-temporal stack until a choice is made.
    let grid = terrastack::raster::open(&tmp.path().join("summer/dsm.tif"))
        .unwrap()
        .grid()
        .clone();
    let mut state = 0x5851_f42d_4c95_7f2du64;
    let z = Array2::from_shape_fn((grid.height, grid.width), |_| {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        100.0 + (state >> 40) as f32 / (1u64 << 24) as f32
    });
    write_geotiff(
        &tmp.path().join("summer/dsm.tif"),
        &grid,
        &[z.view()],
        &["elevation"],
        &WriteOptions::default(),
    )
    .unwrap();
    let doubt = tmp.path().join("doubt");
    let out = batch(&manifest, &["--out", doubt.to_str().unwrap()]);
    assert!(!out.status.success());
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(
        stderr.contains("summer") && stderr.contains("--align off"),
        "{stderr}"
    );
    let r = report(&doubt, "batch-report.json");
    let summer = r["flights"]
        .as_array()
        .unwrap()
        .iter()
        .find(|f| f["id"] == "summer")
        .unwrap();
    assert_eq!(summer["shift"]["confident"], false, "{summer}");
    assert_eq!(summer["shift"]["applied"], false);
    assert_eq!(r["temporal"]["status"], "failed");
    assert!(!doubt.join("temporal/stack.json").exists());
    // The explicit choice builds it.
    let out = batch(
        &manifest,
        &["--out", doubt.to_str().unwrap(), "--align", "off"],
    );
    assert!(out.status.success());
    assert_eq!(
        report(&doubt, "batch-report.json")["temporal"]["status"],
        "built"
    );
}

//! Never overwrite, never mix (issue #12, items 1-3 and 9), through the binary: two runs
//! into one output (one is refused, the survivor's parts belong together), outputs that
//! are inputs (refused in every command, however the path is spelled), leftovers of
//! killed runs and of early failures, kill -9 during `sample`, and a batch whose
//! reference flight is unusable (with kill -9 and resume).
//!
//! Test inputs are closed-form surfaces (`util::surface`), not the demo.

mod util;

use std::collections::BTreeMap;
use std::fs;
use std::path::{Path, PathBuf};
use std::process::{Child, Output, Stdio};
use std::time::{Duration, Instant};

use serde_json::Value;
use terrastack::output_lock::OutputLock;
use terrastack::raster;
use terrastack::stack::sidecar::StackMetadata;
use terrastack::Window;
use util::*;

fn spawn(args: &[&str]) -> Child {
    command()
        .args(args)
        .stdout(Stdio::null())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap()
}

/// Names in `dir`, sorted.
fn names(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> = fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    v.sort();
    v
}

/// Assert that `dir/stack.json` describes `dir/stack.tif` band by band: the same count,
/// each band's description is its name, and its minimum, maximum and valid fraction
/// recomputed from the image equal the sidecar's. Returns the band names.
fn assert_sidecar_matches_image(dir: &Path) -> Vec<String> {
    let meta: StackMetadata = read_json(&dir.join("stack.json"));
    let src = raster::open(&dir.join("stack.tif")).unwrap();
    assert_eq!(src.band_count(), meta.bands.len(), "band count");
    let w = Window::full(src.grid());
    for b in &meta.bands {
        assert_eq!(
            src.band_info(b.index).description.as_deref(),
            Some(b.name.as_str())
        );
        let data = src.read_window(b.index, w).unwrap();
        let valid: Vec<f64> = data
            .iter()
            .filter(|v| !v.is_nan())
            .map(|&v| v as f64)
            .collect();
        let min = valid.iter().copied().fold(f64::INFINITY, f64::min);
        let max = valid.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        assert_eq!(b.stats.min, Some(min), "{} min", b.name);
        assert_eq!(b.stats.max, Some(max), "{} max", b.name);
        let fraction = valid.len() as f64 / data.len() as f64;
        assert!(
            (b.stats.valid_fraction - fraction).abs() < 1e-12,
            "{}",
            b.name
        );
    }
    meta.bands.iter().map(|b| b.name.clone()).collect()
}

#[test]
fn concurrent_builds_into_one_folder_never_mix() {
    let tmp = tempdir();
    // Large enough that a build lasts well over a second on one thread, so the two runs
    // always overlap.
    let grid = utm_grid(1400, 1400, 0.25);
    write_dsm(&tmp.path().join("dsm.tif"), &grid, &surface(&grid));
    let dsm = p(tmp.path(), "dsm.tif");
    let out = tmp.path().join("out");
    let feature_sets = ["slope,tpi,roughness", "aspect,elevation"];
    for round in 0..6 {
        let mut children: Vec<(usize, Child)> = Vec::new();
        for (k, features) in feature_sets.iter().enumerate() {
            let child = spawn(&[
                "build",
                "--dsm",
                &dsm,
                "--features",
                features,
                "--scales",
                "3",
                "--threads",
                "1",
                "--force",
                "--quiet",
                "--out",
                s(&out),
            ]);
            children.push((k, child));
        }
        let results: Vec<(usize, Output)> = children
            .into_iter()
            .map(|(k, c)| (k, c.wait_with_output().unwrap()))
            .collect();
        let winners: Vec<usize> = results
            .iter()
            .filter(|(_, o)| o.status.success())
            .map(|(k, _)| *k)
            .collect();
        assert_eq!(
            winners.len(),
            1,
            "round {round}: exactly one build may finish"
        );
        let (_, refused) = results.iter().find(|(_, o)| !o.status.success()).unwrap();
        assert_eq!(refused.status.code(), Some(1), "round {round}");
        let e = stderr(refused);
        assert!(
            e.contains(s(&out)) && e.contains("another terrastack run") && e.contains("process "),
            "round {round}: {e}"
        );
        let bands = assert_sidecar_matches_image(&out);
        let expected: &[&str] = if winners[0] == 0 {
            &["slope_horn", "tpi_r3m", "roughness_r3m"]
        } else {
            &["aspect_horn", "elevation"]
        };
        assert_eq!(bands.len(), expected.len(), "round {round}: {bands:?}");
        for n in expected {
            assert!(
                bands.iter().any(|b| b == n),
                "round {round}: {n} in {bands:?}"
            );
        }
        assert_eq!(names(&out), vec!["preview.png", "stack.json", "stack.tif"]);
    }
}

#[test]
fn batch_root_and_sample_table_are_locked_too() {
    let tmp = tempdir();
    let grid = utm_grid(60, 50, 0.5);
    write_dsm(&tmp.path().join("dsm.tif"), &grid, &surface(&grid));
    fs::write(
        tmp.path().join("flights.toml"),
        "[batch]\nout = \"root\"\ntemporal = false\n[batch.recipe.features]\nlist = [\"slope\"]\n\
         [[flight]]\nid = \"a\"\ndate = \"2025-05-01\"\ndsm = \"dsm.tif\"\n",
    )
    .unwrap();
    let root = tmp.path().join("root");
    fs::create_dir_all(&root).unwrap();
    let held = OutputLock::folder(&root).unwrap();
    let o = run(&["batch", &p(tmp.path(), "flights.toml"), "--quiet"]);
    assert_eq!(o.status.code(), Some(1));
    let e = stderr(&o);
    let me = format!("process {}", std::process::id());
    assert!(e.contains("root") && e.contains(&me), "{e}");
    assert!(!root.join("batch-report.json").exists() && !root.join("flights/a").exists());
    drop(held);
    let o = run(&["batch", &p(tmp.path(), "flights.toml"), "--quiet"]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(!root.join(".terrastack.lock").exists());
    // Shards of one batch share the root (a shared lock); a whole run excludes them.
    let shard_peer = OutputLock::folder_shared(&root).unwrap();
    let o = run(&[
        "batch",
        &p(tmp.path(), "flights.toml"),
        "--quiet",
        "--shard",
        "0/2",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    let o = run(&["batch", &p(tmp.path(), "flights.toml"), "--quiet"]);
    assert_eq!(o.status.code(), Some(1));
    assert!(
        stderr(&o).contains("another terrastack run"),
        "{}",
        stderr(&o)
    );
    drop(shard_peer);

    // sample: the table's lock lives beside it.
    let stack = root.join("flights/a");
    fs::write(
        tmp.path().join("s.csv"),
        "x,y,class\n500010,4999990,fen\n500020,4999985,bog\n",
    )
    .unwrap();
    let table = tmp.path().join("t.csv");
    let held = OutputLock::file(&table).unwrap();
    let args = [
        "sample",
        "--stack",
        s(&stack),
        "--samples",
        &p(tmp.path(), "s.csv"),
        "--out",
        s(&table),
        "--folds",
        "2",
    ];
    let o = run(&args);
    assert_eq!(o.status.code(), Some(1));
    let e = stderr(&o);
    assert!(e.contains("t.csv") && e.contains(&me), "{e}");
    assert!(!table.exists());
    drop(held);
    let o = run(&args);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(table.exists() && !tmp.path().join(".t.csv.lock").exists());
}

#[test]
fn output_over_an_input_is_refused_in_every_command() {
    let tmp = tempdir();
    let d = tmp.path();
    let grid = utm_grid(60, 50, 0.5);
    fs::create_dir_all(d.join("out/x")).unwrap();
    write_dsm(&d.join("out/x/stack.tif"), &grid, &surface(&grid));
    let dsm_bytes = fs::read(d.join("out/x/stack.tif")).unwrap();
    let refused = |o: &Output, what: &str| {
        assert_eq!(o.status.code(), Some(1), "{}", stderr(o));
        let e = stderr(o);
        assert!(
            e.contains(what) && e.contains("would be overwritten") && e.contains("--force"),
            "{e}"
        );
    };
    // build: the DSM is the stack to be written, spelled plainly, through `..`, through
    // a symbolic link and a hard link.
    let mut spellings = vec![p(d, "out/x/stack.tif"), p(d, "out/../out/x/stack.tif")];
    #[cfg(unix)]
    {
        std::os::unix::fs::symlink(d.join("out/x/stack.tif"), d.join("soft.tif")).unwrap();
        fs::hard_link(d.join("out/x/stack.tif"), d.join("hard.tif")).unwrap();
        spellings.push(p(d, "soft.tif"));
        spellings.push(p(d, "hard.tif"));
    }
    for dsm in &spellings {
        let o = run(&[
            "build",
            "--dsm",
            dsm,
            "--features",
            "slope",
            "--force",
            "--out",
            &p(d, "out/x"),
            "--quiet",
        ]);
        refused(&o, "stack.tif");
    }
    // build: an orthomosaic named preview.png in the output folder.
    write_dsm(&d.join("dsm.tif"), &grid, &surface(&grid));
    write_ortho(&d.join("out/x/preview.png"), &grid);
    let ortho_bytes = fs::read(d.join("out/x/preview.png")).unwrap();
    let o = run(&[
        "build",
        "--dsm",
        &p(d, "dsm.tif"),
        "--ortho",
        &p(d, "out/x/preview.png"),
        "--bands",
        "blue=1,green=2,red=3,rededge=4,nir=5",
        "--features",
        "slope,ndvi",
        "--out",
        &p(d, "out/x"),
        "--quiet",
    ]);
    refused(&o, "preview.png");
    // batch (which replaces flight stacks without --force): one flight's DSM is another
    // flight's stack.
    fs::create_dir_all(d.join("root/flights/a")).unwrap();
    fs::copy(d.join("dsm.tif"), d.join("root/flights/a/stack.tif")).unwrap();
    let batch_bytes = fs::read(d.join("root/flights/a/stack.tif")).unwrap();
    fs::write(
        d.join("flights.toml"),
        "[batch]\nout = \"root\"\ntemporal = false\n[batch.recipe.features]\nlist = [\"slope\"]\n\
         [[flight]]\nid = \"a\"\ndate = \"2025-05-01\"\ndsm = \"dsm.tif\"\n\
         [[flight]]\nid = \"b\"\ndate = \"2025-06-01\"\ndsm = \"root/flights/../flights/a/stack.tif\"\n",
    )
    .unwrap();
    let o = run(&["batch", &p(d, "flights.toml"), "--quiet"]);
    refused(&o, "flight \"b\" dsm");
    assert!(!d.join("root/batch-report.json").exists());
    // sample: the table is the stack's own sidecar, spelled through `..`.
    let o = run(&[
        "build",
        "--dsm",
        &p(d, "dsm.tif"),
        "--features",
        "slope",
        "--out",
        &p(d, "st"),
        "--quiet",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    let sidecar = fs::read(d.join("st/stack.json")).unwrap();
    fs::write(d.join("s.csv"), "x,y,class\n500010,4999990,fen\n").unwrap();
    let o = run(&[
        "sample",
        "--stack",
        &p(d, "st"),
        "--samples",
        &p(d, "s.csv"),
        "--out",
        &p(d, "st/../st/stack.json"),
        "--force",
    ]);
    refused(&o, "stack.json");
    assert_eq!(fs::read(d.join("st/stack.json")).unwrap(), sidecar);
    // Nothing was touched.
    assert_eq!(fs::read(d.join("out/x/stack.tif")).unwrap(), dsm_bytes);
    assert_eq!(fs::read(d.join("out/x/preview.png")).unwrap(), ortho_bytes);
    assert_eq!(
        fs::read(d.join("root/flights/a/stack.tif")).unwrap(),
        batch_bytes
    );
    assert_eq!(names(&d.join("out/x")), vec!["preview.png", "stack.tif"]);
    // demo: its outputs stay out of the demo site's folder.
    let site = Path::new(env!("CARGO_MANIFEST_DIR")).join("sample-dsm");
    let o = run(&[
        "demo",
        "--data",
        s(&site),
        "--out",
        s(&site.join("x/../runs")),
        "--quiet",
    ]);
    assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
    assert!(
        stderr(&o).contains("inside the demo site"),
        "{}",
        stderr(&o)
    );
    assert!(!site.join("runs").exists());
}

#[test]
fn leftovers_of_killed_runs_and_early_failures_are_cleaned() {
    let tmp = tempdir();
    let d = tmp.path();
    let grid = utm_grid(80, 60, 0.5);
    write_dsm(&d.join("dsm.tif"), &grid, &surface(&grid));
    // What killed runs leave: partials and an unheld lock file. PID 4194304 is above
    // Linux's pid_max limit (2^22, from memory), so that writer is surely gone; this test
    // process is alive, so its partial is kept.
    let out = d.join("out");
    fs::create_dir_all(&out).unwrap();
    let live = format!(".notes.csv.partial-{}", std::process::id());
    for n in [
        ".stack.tif.partial-4194304",
        ".stack.json.partial-4194304",
        live.as_str(),
    ] {
        fs::write(out.join(n), "half").unwrap();
    }
    fs::write(out.join(".terrastack.lock"), "pid 4194304\n").unwrap();
    let o = run(&[
        "build",
        "--dsm",
        &p(d, "dsm.tif"),
        "--features",
        "slope",
        "--out",
        s(&out),
        "--quiet",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    let mut expected = vec![
        live.clone(),
        "preview.png".into(),
        "stack.json".into(),
        "stack.tif".into(),
    ];
    expected.sort();
    if cfg!(target_os = "linux") {
        assert_eq!(names(&out), expected);
    }
    // An early failure (the memory budget is checked once the folder is locked) leaves no
    // folder behind, nested or not.
    for rel in ["fresh", "a/b/c"] {
        let o = run(&[
            "build",
            "--dsm",
            &p(d, "dsm.tif"),
            "--memory",
            "1M",
            "--out",
            &p(d, rel),
            "--quiet",
        ]);
        assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
        assert!(stderr(&o).contains("memory"), "{}", stderr(&o));
    }
    assert!(!d.join("fresh").exists() && !d.join("a").exists());
}

/// A stack of `size`² cells (elevation, slope) and GeoJSON samples: four quadrant
/// polygons covering it, so the table has a row per cell.
fn sample_site(d: &Path, size: usize) -> (PathBuf, PathBuf) {
    let grid = utm_grid(size, size, 0.5);
    write_dsm(&d.join("dsm.tif"), &grid, &surface(&grid));
    let stack = d.join("stack");
    let o = run(&[
        "build",
        "--dsm",
        &p(d, "dsm.tif"),
        "--features",
        "elevation,slope",
        "--out",
        s(&stack),
        "--quiet",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    let half = size as f64 * 0.25;
    let (x0, y1) = (500_000.0, 5_000_000.0);
    let mut features = Vec::new();
    for (k, (cx, cy)) in [(0, 0), (1, 0), (0, 1), (1, 1)].iter().enumerate() {
        let (a, b) = (x0 + *cx as f64 * half, y1 - *cy as f64 * half);
        let ring = format!(
            "[[{a},{b}],[{},{b}],[{},{}],[{a},{}],[{a},{b}]]",
            a + half,
            a + half,
            b - half,
            b - half
        );
        let class = if k % 2 == 0 { "fen" } else { "bog" };
        features.push(format!(
            "{{\"type\":\"Feature\",\"properties\":{{\"class\":\"{class}\"}},\"geometry\":{{\"type\":\"Polygon\",\"coordinates\":[{ring}]}}}}"
        ));
    }
    let samples = d.join("samples.geojson");
    fs::write(
        &samples,
        format!(
            "{{\"type\":\"FeatureCollection\",\"features\":[{}]}}",
            features.join(",")
        ),
    )
    .unwrap();
    (stack, samples)
}

#[test]
fn killed_sample_keeps_the_old_table_and_the_next_run_cleans_up() {
    let tmp = tempdir();
    let d = tmp.path();
    let (stack, samples) = sample_site(d, 1200);
    let table = d.join("t.csv");
    let args = [
        "sample",
        "--stack",
        s(&stack),
        "--samples",
        s(&samples),
        "--out",
        s(&table),
        "--folds",
        "2",
        "--force",
    ];
    let o = run(&args);
    assert!(o.status.success(), "{}", stderr(&o));
    let before = fs::read(&table).unwrap();
    assert!(before.len() > 10 << 20, "a table of 1.44 million rows");
    // Kill (SIGKILL) the moment the new table's temporary file appears.
    let mut caught = 0;
    for _ in 0..3 {
        let mut child = spawn(&args);
        let started = Instant::now();
        loop {
            let partial = names(d).iter().any(|n| n.starts_with(".t.csv.partial-"));
            let ended = child.try_wait().unwrap().is_some();
            if partial || ended || started.elapsed() > Duration::from_secs(60) {
                caught += usize::from(partial && !ended);
                break;
            }
            std::thread::sleep(Duration::from_millis(2));
        }
        let _ = child.kill();
        let _ = child.wait();
        // The table under its final name is the whole old one (or the same bytes, rewritten).
        assert!(
            fs::read(&table).unwrap() == before,
            "the killed run damaged the table"
        );
    }
    assert!(
        caught > 0,
        "no kill landed while the table was being written"
    );
    // The next run removes the dead run's partial (under the table's lock) and its lock file.
    let o = run(&args);
    assert!(o.status.success(), "{}", stderr(&o));
    if cfg!(target_os = "linux") {
        assert_eq!(
            names(d),
            vec![
                "dsm.tif",
                "samples.geojson",
                "stack",
                "t.csv",
                "t.separability.json"
            ]
        );
    }
    assert!(fs::read(&table).unwrap() == before);
}

/// Three flights of one closed-form surface; the reference (earliest, "spring") has a DSM
/// that is `broken` ("missing" or "corrupt").
fn batch_site(d: &Path, broken: &str) -> PathBuf {
    let grid = utm_grid(300, 260, 0.2);
    let mut text = String::from(
        "[batch]\nout = \"root\"\n[batch.recipe.features]\nlist = [\"slope\", \"tpi\"]\nscales_m = [1.0]\n",
    );
    for (id, date) in [
        ("spring", "2025-04-10"),
        ("summer", "2025-06-22"),
        ("autumn", "2025-09-30"),
    ] {
        let dsm = format!("{id}.tif");
        if id == "spring" {
            if broken == "corrupt" {
                fs::write(d.join(&dsm), b"II*\0this is not a TIFF after all").unwrap();
            }
        } else {
            write_dsm(&d.join(&dsm), &grid, &surface(&grid));
        }
        text += &format!("[[flight]]\nid = \"{id}\"\ndate = \"{date}\"\ndsm = \"{dsm}\"\n");
    }
    let manifest = d.join("flights.toml");
    fs::write(&manifest, text).unwrap();
    manifest
}

#[test]
fn unusable_reference_flight_fails_alone_and_survives_kill() {
    for broken in ["missing", "corrupt"] {
        let tmp = tempdir();
        let d = tmp.path();
        let manifest = batch_site(d, broken);
        let batch = |root: &str| {
            run(&[
                "batch",
                s(&manifest),
                "--out",
                &p(d, root),
                "--jobs",
                "2",
                "--quiet",
            ])
        };
        let o = batch("clean");
        assert_eq!(o.status.code(), Some(1), "{broken}: {}", stderr(&o));
        let e = stderr(&o);
        assert!(
            e.contains("spring") && e.contains("1 of 3 flights failed"),
            "{broken}: {e}"
        );
        let r: Value = read_json(&d.join("clean/batch-report.json"));
        let status: BTreeMap<&str, &str> = r["flights"]
            .as_array()
            .unwrap()
            .iter()
            .map(|f| (f["id"].as_str().unwrap(), f["status"].as_str().unwrap()))
            .collect();
        assert_eq!(
            status,
            BTreeMap::from([
                ("autumn", "built"),
                ("spring", "failed"),
                ("summer", "built")
            ]),
            "{broken}: {r}"
        );
        // The earliest readable flight took over as reference, and the report says so.
        assert_eq!(r["reference"], "summer", "{broken}");
        assert_eq!(r["reference_replaced"]["requested"], "spring", "{broken}");
        assert!(r["reference_replaced"]["reason"]
            .as_str()
            .unwrap()
            .contains("spring.tif"));
        let spring = r["flights"]
            .as_array()
            .unwrap()
            .iter()
            .find(|f| f["id"] == "spring")
            .unwrap();
        assert!(
            spring["error"].as_str().unwrap().contains("spring.tif"),
            "{broken}"
        );
        assert!(r["temporal"].is_null());
        assert_sidecar_matches_image(&d.join("clean/flights/autumn"));
        if broken == "missing" {
            continue;
        }
        // Kill (SIGKILL) at several moments, resuming each time: the same bytes in the end.
        let whole = tree(&d.join("clean"));
        for delay_ms in [60u64, 200, 400] {
            let mut child = spawn(&[
                "batch",
                s(&manifest),
                "--out",
                &p(d, "resumed"),
                "--jobs",
                "2",
                "--quiet",
            ]);
            std::thread::sleep(Duration::from_millis(delay_ms));
            let _ = child.kill();
            let _ = child.wait();
        }
        let o = batch("resumed");
        assert_eq!(o.status.code(), Some(1), "{}", stderr(&o));
        let after = tree(&d.join("resumed"));
        assert_same_files(&after, &whole);
        assert!(d.join("resumed/batch-report.json").exists());
    }
}

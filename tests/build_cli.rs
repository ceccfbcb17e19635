//! `terrastack build` end to end, through the binary and the library: determinism,
//! `--force`, interrupted builds, bad input.

mod util;

use std::fs;
use std::process::Stdio;
use std::time::{Duration, Instant};

use terrastack::raster;
use terrastack::stack::{self, BuildOptions, Progress, Recipe, RecipeFlags};
use util::*;

fn flags(dsm: &str) -> RecipeFlags {
    RecipeFlags {
        dsm: Some(dsm.into()),
        features: Some(vec![
            "slope".into(),
            "curvature".into(),
            "tpi".into(),
            "roughness".into(),
            "relative_elevation".into(),
            "vrm".into(),
        ]),
        scales_m: Some(vec![2.0, 12.0]),
        ..Default::default()
    }
}

#[test]
fn results_do_not_depend_on_threads_block_size_or_budget() {
    let tmp = tempdir();
    let grid = utm_grid(1300, 1100, 0.25);
    write_dsm(&tmp.path().join("dsm.tif"), &grid, &surface(&grid));
    let dsm = p(tmp.path(), "dsm.tif");
    let build = |name: &str, threads: usize, block: Option<usize>, memory: u64| {
        let mut o = BuildOptions::new(tmp.path().join(name));
        o.threads = Some(threads);
        o.block_size = block;
        o.memory_bytes = memory;
        o.progress = Progress::Quiet;
        stack::build(Recipe::resolve(None, &flags(&dsm)).unwrap(), &o).unwrap()
    };
    let a = build("a", 1, Some(512), 2 << 30);
    let b = build("b", 2, Some(512), 512 << 20);
    let c = build("c", 2, Some(1024), 2 << 30);
    assert_eq!(a.block_size, 512);
    // Same block size, other threads and budget: the very same file.
    let fa = fs::read(tmp.path().join("a/stack.tif")).unwrap();
    let fb = fs::read(tmp.path().join("b/stack.tif")).unwrap();
    assert!(fa == fb, "stack.tif differs between 1 and 2 threads");
    assert_eq!(a.metadata.bands, b.metadata.bands);
    // Other block size: the same bits in every band, the same statistics.
    assert_eq!(
        band_bits(&tmp.path().join("a/stack.tif")),
        band_bits(&tmp.path().join("c/stack.tif"))
    );
    for (x, y) in a.metadata.bands.iter().zip(c.metadata.bands.iter()) {
        assert_eq!(x.stats.min, y.stats.min, "{}", x.name);
        assert_eq!(x.stats.max, y.stats.max, "{}", x.name);
        assert!(
            (x.stats.mean.unwrap() - y.stats.mean.unwrap()).abs()
                <= 1e-12 * x.stats.mean.unwrap().abs().max(1.0)
        );
    }
}

#[test]
fn existing_stack_is_kept_without_force() {
    let tmp = tempdir();
    let grid = utm_grid(300, 200, 0.5);
    write_dsm(&tmp.path().join("dsm.tif"), &grid, &surface(&grid));
    let out = p(tmp.path(), "out");
    let args = [
        "build",
        "--dsm",
        &p(tmp.path(), "dsm.tif"),
        "--features",
        "slope",
        "--out",
        &out,
        "--quiet",
    ];
    assert!(run(&args).status.success());
    let before = fs::read(tmp.path().join("out/stack.tif")).unwrap();
    let again = run(&args);
    assert_eq!(again.status.code(), Some(1));
    let e = stderr(&again);
    assert!(
        e.contains("already holds a stack") && e.contains("--force"),
        "{e}"
    );
    assert_eq!(fs::read(tmp.path().join("out/stack.tif")).unwrap(), before);
    let mut forced = args.to_vec();
    forced.extend(["--force", "--features", "slope,tpi"]);
    assert!(run(&forced).status.success(), "{}", stderr(&run(&forced)));
    let meta: serde_json::Value = read_json(&tmp.path().join("out/stack.json"));
    assert_eq!(meta["bands"].as_array().unwrap().len(), 3); // slope, tpi at the default 1 and 5 m
}

#[test]
fn killed_build_leaves_nothing_that_looks_finished() {
    let tmp = tempdir();
    let grid = utm_grid(3000, 3000, 0.1);
    write_dsm(&tmp.path().join("dsm.tif"), &grid, &surface(&grid));
    let out = tmp.path().join("out");
    let mut child = command()
        .args([
            "build",
            "--dsm",
            &p(tmp.path(), "dsm.tif"),
            "--scales",
            "1,5",
            "--threads",
            "1",
            "--out",
        ])
        .arg(&out)
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    // Wait until the build has started writing, then kill it (SIGKILL).
    let started = Instant::now();
    loop {
        let partial = fs::read_dir(&out)
            .map(|d| {
                d.flatten()
                    .any(|e| e.file_name().to_string_lossy().contains(".partial"))
            })
            .unwrap_or(false);
        if partial || started.elapsed() > Duration::from_secs(60) {
            break;
        }
        std::thread::sleep(Duration::from_millis(20));
    }
    child.kill().unwrap();
    child.wait().unwrap();
    assert!(
        !out.join("stack.tif").exists(),
        "a killed build left stack.tif"
    );
    assert!(
        !out.join("stack.json").exists(),
        "a killed build left stack.json"
    );
    // The next build succeeds and does not need --force.
    let o = run(&[
        "build",
        "--dsm",
        &p(tmp.path(), "dsm.tif"),
        "--features",
        "slope",
        "--out",
        &out.to_string_lossy(),
        "--quiet",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
}

#[test]
fn dsm_without_crs_is_refused_and_nothing_written() {
    let tmp = tempdir();
    let mut grid = utm_grid(50, 40, 0.5);
    grid.crs = terrastack::Crs::none();
    write_dsm(&tmp.path().join("dsm.tif"), &grid, &surface(&grid));
    let o = run(&[
        "build",
        "--dsm",
        &p(tmp.path(), "dsm.tif"),
        "--out",
        &p(tmp.path(), "out"),
    ]);
    assert_eq!(o.status.code(), Some(1));
    let e = stderr(&o);
    assert!(
        e.contains("dsm.tif") && e.contains("no coordinate reference system") && e.contains("fix:"),
        "{e}"
    );
    assert!(!tmp.path().join("out").exists());
}

#[test]
fn ortho_that_does_not_overlap_is_refused() {
    let tmp = tempdir();
    let grid = utm_grid(50, 40, 0.5);
    write_dsm(&tmp.path().join("dsm.tif"), &grid, &surface(&grid));
    let far = terrastack::Grid::new(
        30,
        30,
        [510_000.0, 0.5, 0.0, 5_000_000.0, 0.0, -0.5],
        terrastack::Crs::from_epsg(32633),
    )
    .unwrap();
    write_ortho(&tmp.path().join("ortho.tif"), &far);
    let o = run(&[
        "build",
        "--dsm",
        &p(tmp.path(), "dsm.tif"),
        "--ortho",
        &p(tmp.path(), "ortho.tif"),
        "--bands",
        "blue=1,green=2,red=3,rededge=4,nir=5",
        "--out",
        &p(tmp.path(), "out"),
    ]);
    assert_eq!(o.status.code(), Some(1));
    let e = stderr(&o);
    assert!(
        e.contains("ortho.tif") && e.contains("does not overlap"),
        "{e}"
    );
    assert!(!tmp.path().join("out").exists());
}

/// Build a small DSM plus a 5-band orthomosaic on the same grid with `bands` and
/// `features`, into `tmp/out`.
fn build_small_with_ortho(
    tmp: &std::path::Path,
    bands: &str,
    features: &str,
) -> std::process::Output {
    let grid = utm_grid(50, 40, 0.5);
    write_dsm(&tmp.join("dsm.tif"), &grid, &surface(&grid));
    write_ortho(&tmp.join("ortho.tif"), &grid);
    run(&[
        "build",
        "--dsm",
        &p(tmp, "dsm.tif"),
        "--ortho",
        &p(tmp, "ortho.tif"),
        "--bands",
        bands,
        "--features",
        features,
        "--out",
        &p(tmp, "out"),
    ])
}

#[test]
fn band_number_past_the_files_bands_is_refused() {
    let tmp = tempdir();
    let o = build_small_with_ortho(tmp.path(), "red=3,nir=7", "ndvi");
    assert_ne!(o.status.code(), Some(0));
    let e = stderr(&o);
    assert!(
        e.contains("ortho.tif") && e.contains("band 7") && e.contains("5 band"),
        "{e}"
    );
    assert!(!tmp.path().join("out").exists());
}

#[test]
fn unwritable_output_folder_is_refused() {
    let tmp = tempdir();
    let grid = utm_grid(50, 40, 0.5);
    write_dsm(&tmp.path().join("dsm.tif"), &grid, &surface(&grid));
    fs::write(tmp.path().join("a-file"), "x").unwrap();
    // A folder below a regular file cannot be created, even by root.
    let o = run(&[
        "build",
        "--dsm",
        &p(tmp.path(), "dsm.tif"),
        "--out",
        &p(tmp.path(), "a-file/out"),
    ]);
    assert_eq!(o.status.code(), Some(1));
    let e = stderr(&o);
    assert!(e.contains("a-file/out"), "{e}");
    assert_eq!(fs::read_to_string(tmp.path().join("a-file")).unwrap(), "x");
}

#[test]
fn index_without_its_band_names_the_role() {
    let tmp = tempdir();
    let o = build_small_with_ortho(tmp.path(), "red=3,nir=5", "ndre");
    assert_eq!(o.status.code(), Some(2));
    assert!(stderr(&o).contains("rededge"), "{}", stderr(&o));
    assert!(!tmp.path().join("out").exists());
}

#[test]
fn stack_metadata_matches_the_image() {
    let tmp = tempdir();
    let grid = utm_grid(400, 300, 0.2);
    write_dsm(&tmp.path().join("dsm.tif"), &grid, &surface(&grid));
    let ortho_grid = terrastack::Grid::new(
        260,
        200,
        [500_000.07, 0.3, 0.0, 5_000_000.0 - 0.05, 0.0, -0.3],
        terrastack::Crs::from_epsg(32633),
    )
    .unwrap();
    write_ortho(&tmp.path().join("ortho.tif"), &ortho_grid);
    let out = tmp.path().join("out");
    let o = run(&[
        "build",
        "--dsm",
        &p(tmp.path(), "dsm.tif"),
        "--ortho",
        &p(tmp.path(), "ortho.tif"),
        "--bands",
        "blue=1,green=2,red=3,rededge=4,nir=5",
        "--reflectance-scale",
        "1e-4",
        "--index",
        "wet=(green - nir) / (green + nir)",
        "--out",
        &out.to_string_lossy(),
        "--quiet",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    let meta: terrastack::stack::sidecar::StackMetadata = read_json(&out.join("stack.json"));
    assert_eq!(meta.format, "terrastack-stack/1");
    let src = raster::open(&out.join("stack.tif")).unwrap();
    assert_eq!(src.band_count(), meta.bands.len());
    assert_eq!(src.grid().transform, meta.grid.transform);
    assert_eq!(meta.grid.transform, grid.transform);
    assert_eq!(meta.grid.crs.epsg, Some(32633));
    for b in &meta.bands {
        assert_eq!(
            src.band_info(b.index).description.as_deref(),
            Some(b.name.as_str())
        );
    }
    let names: Vec<&str> = meta.bands.iter().map(|b| b.name.as_str()).collect();
    assert!(
        names.contains(&"ndvi") && names.contains(&"wet") && names.contains(&"reflectance_nir"),
        "{names:?}"
    );
    let wet = meta.bands.iter().find(|b| b.name == "wet").unwrap();
    assert_eq!(wet.feature, "expression");
    assert_eq!(meta.sources.len(), 2);
    assert_eq!(
        meta.sources[0].sha256,
        terrastack::stack::executor::sha256_file(&tmp.path().join("dsm.tif")).unwrap()
    );
    assert!(out.join("preview.png").exists());
    assert_eq!(meta.parameters["resampling"], "bilinear");
}

#[test]
fn dated_build_writes_a_stac_item_and_undated_replaces_none_stale() {
    let tmp = tempdir();
    let grid = utm_grid(120, 80, 0.5);
    write_dsm(&tmp.path().join("dsm.tif"), &grid, &surface(&grid));
    let out = p(tmp.path(), "out");
    let base = [
        "build",
        "--dsm",
        &p(tmp.path(), "dsm.tif"),
        "--features",
        "slope,tpi@2.5",
        "--out",
        &out,
        "--quiet",
        "--force",
    ];
    let o = run(&[&base[..], &["--date", "2026-07-08"]].concat());
    assert!(o.status.success(), "{}", stderr(&o));
    let item: serde_json::Value =
        serde_json::from_str(&fs::read_to_string(tmp.path().join("out/stack.stac.json")).unwrap())
            .unwrap();
    let meta: serde_json::Value =
        serde_json::from_str(&fs::read_to_string(tmp.path().join("out/stack.json")).unwrap())
            .unwrap();
    let names = |v: &serde_json::Value| -> Vec<String> {
        v.as_array()
            .unwrap()
            .iter()
            .map(|b| b["name"].as_str().unwrap().to_string())
            .collect()
    };
    assert_eq!(
        names(&item["assets"]["stack"]["bands"]),
        names(&meta["bands"])
    );
    // Window radii are identifiers: 2.5 m is written r2p5m.
    assert!(names(&meta["bands"]).contains(&"tpi_r2p5m".to_string()));
    assert_eq!(item["properties"]["proj:code"], "EPSG:32633");
    assert_eq!(item["properties"]["start_datetime"], "2026-07-08T00:00:00Z");
    // The grid's west edge is UTM 33N's central meridian, 15° E (zone definition).
    assert!((item["bbox"][0].as_f64().unwrap() - 15.0).abs() < 1e-9);
    assert_eq!(
        item["assets"]["stack"]["file:size"].as_u64().unwrap(),
        fs::metadata(tmp.path().join("out/stack.tif"))
            .unwrap()
            .len()
    );
    // Without a date: no Item (as --help says, without a warning), and the old one is gone.
    let o = run(&base);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(!stderr(&o).contains("warning"), "{}", stderr(&o));
    assert!(!tmp.path().join("out/stack.stac.json").exists());
    let o = run(&[&base[..], &["--date", "2026-02-30"]].concat());
    assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
}

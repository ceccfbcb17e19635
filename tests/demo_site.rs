//! Guards the committed demo data in `sample-dsm/`: a fresh generation matches it byte for
//! byte, it stays under its size budget, the files read back as the generator's arrays,
//! the georeferencing shifts recorded in `site.json` are the ones in the data, and every
//! labelled circle in `samples.csv` lies wholly in its class.
//!
//! Regenerate the data with `cargo run --release --example make_sample_site -- sample-dsm`.

mod util;

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use ndarray::Array2;
use terrastack::demo_site::{self, CoverClass, FlightPlan};
use terrastack::raster::{self, RasterSource};
use terrastack::Window;
use util::{read_json, tempdir};

/// Size budget of everything under `sample-dsm/`, bytes.
const BUDGET_BYTES: u64 = 12_000_000;

fn committed() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("sample-dsm")
}

fn read_band(path: &Path, band: usize) -> (Box<dyn RasterSource>, Array2<f32>) {
    let src = raster::open(path).unwrap_or_else(|e| panic!("{e}"));
    let w = Window::full(src.grid());
    let a = src.read_window(band, w).unwrap_or_else(|e| panic!("{e}"));
    (src, a)
}

fn site_json() -> serde_json::Value {
    read_json(&committed().join("site.json"))
}

#[test]
fn committed_files_match_a_fresh_generation() {
    let tmp = tempdir();
    let summary = demo_site::generate(tmp.path()).unwrap();
    assert_eq!(summary.files.len(), 8);
    assert_eq!(summary.samples, 6 * demo_site::CIRCLES_PER_CLASS);
    for (rel, size) in &summary.files {
        let fresh = std::fs::read(tmp.path().join(rel)).unwrap();
        let kept = std::fs::read(committed().join(rel)).unwrap_or_else(|e| {
            panic!("sample-dsm/{}: {e}; regenerate with `cargo run --release --example make_sample_site -- sample-dsm`", rel.display())
        });
        assert_eq!(fresh.len() as u64, *size);
        assert!(
            fresh == kept,
            "sample-dsm/{} differs from a fresh generation; if the generator changed on \
             purpose, regenerate with `cargo run --release --example make_sample_site -- sample-dsm`",
            rel.display()
        );
    }
    // Nothing is left under a temporary name.
    for entry in walk(tmp.path()) {
        assert!(
            !entry.to_string_lossy().ends_with(".partial"),
            "{}",
            entry.display()
        );
    }
}

fn walk(dir: &Path) -> Vec<PathBuf> {
    let mut out = Vec::new();
    for entry in std::fs::read_dir(dir).unwrap() {
        let path = entry.unwrap().path();
        if path.is_dir() {
            out.extend(walk(&path));
        } else {
            out.push(path);
        }
    }
    out
}

#[test]
fn committed_data_under_budget() {
    let total: u64 = walk(&committed())
        .iter()
        .map(|p| std::fs::metadata(p).unwrap().len())
        .sum();
    assert!(total < BUDGET_BYTES, "sample-dsm/ holds {total} bytes");
    assert!(committed().join("README.md").exists());
}

#[test]
fn files_read_back_as_the_generated_arrays() {
    for f in demo_site::flights() {
        let (src, z) = read_band(&committed().join(f.date).join("dsm.tif"), 1);
        let grid = src.grid();
        let expect = demo_site::dsm_grid();
        assert_eq!((grid.width, grid.height), (expect.width, expect.height));
        assert_eq!(grid.transform, expect.transform);
        assert_eq!(grid.crs.epsg, Some(demo_site::EPSG));
        assert_eq!(src.band_count(), 1);
        let info = src.band_info(1);
        assert_eq!(info.description.as_deref(), Some("elevation"));
        assert_eq!(info.nodata, Some(demo_site::DSM_NODATA as f64));
        let gen = demo_site::dsm(&f);
        for (a, b) in z.iter().zip(gen.iter()) {
            if *b == demo_site::DSM_NODATA {
                assert!(a.is_nan());
            } else {
                assert_eq!(a.to_bits(), b.to_bits());
            }
        }

        let path = committed().join(f.date).join("ortho.tif");
        let src = raster::open(&path).unwrap();
        let grid = src.grid();
        assert_eq!(grid.transform, demo_site::ortho_grid().transform);
        assert_eq!(src.band_count(), 5);
        let gen = demo_site::ortho(&f);
        for (b, name) in demo_site::spectra::BAND_NAMES.iter().enumerate() {
            let info = src.band_info(b + 1);
            assert_eq!(info.description.as_deref(), Some(*name));
            assert_eq!(info.nodata, Some(0.0));
            let a = src.read_window(b + 1, Window::full(grid)).unwrap();
            for (x, y) in a.iter().zip(gen.index_axis(ndarray::Axis(0), b).iter()) {
                if *y == 0 {
                    assert!(x.is_nan());
                } else {
                    assert_eq!(*x, *y as f32);
                }
            }
        }
    }
}

/// Displacement (metres east, north) of `other`'s content relative to `reference`, both
/// on the same grid of cell size `h`: the integer cell shift minimising the mean squared
/// difference (after removing the mean difference) over `mask`, refined by a parabola
/// through the neighbouring costs on each axis (a standard sub-pixel peak fit, common
/// practice).
fn estimate_shift(
    reference: &Array2<f32>,
    other: &Array2<f32>,
    mask: &Array2<bool>,
    h: f64,
) -> (f64, f64) {
    const R: i64 = 5;
    let (rows, cols) = reference.dim();
    let cost = |sc: i64, sr: i64| {
        let (mut n, mut s, mut s2) = (0.0f64, 0.0f64, 0.0f64);
        for r in R..rows as i64 - R {
            for c in R..cols as i64 - R {
                if !mask[[r as usize, c as usize]] {
                    continue;
                }
                let a = reference[[r as usize, c as usize]];
                let b = other[[(r + sr) as usize, (c + sc) as usize]];
                if a.is_nan() || b.is_nan() {
                    continue;
                }
                let d = (b - a) as f64;
                n += 1.0;
                s += d;
                s2 += d * d;
            }
        }
        s2 / n - (s / n).powi(2)
    };
    let mut best = (0, 0, f64::INFINITY);
    for sr in -R + 1..R {
        for sc in -R + 1..R {
            let v = cost(sc, sr);
            if v < best.2 {
                best = (sc, sr, v);
            }
        }
    }
    let (sc, sr, c0) = best;
    let vertex = |m: f64, p: f64| 0.5 * (m - p) / (m - 2.0 * c0 + p);
    let fc = sc as f64 + vertex(cost(sc - 1, sr), cost(sc + 1, sr));
    let fr = sr as f64 + vertex(cost(sc, sr - 1), cost(sc, sr + 1));
    // Content moved east appears at higher columns; moved north at lower rows.
    (fc * h, -fr * h)
}

#[test]
fn recorded_shifts_are_the_shifts_in_the_data() {
    let site = site_json();
    let flights = site["flights"].as_array().unwrap();
    assert_eq!(flights.len(), 3);
    let plans: BTreeMap<&str, FlightPlan> =
        demo_site::flights().iter().map(|f| (f.date, *f)).collect();
    let reference = flights.iter().find(|f| f["reference"] == true).unwrap();
    let (_, zref) = read_band(&committed().join(reference["dsm"].as_str().unwrap()), 1);
    // Bare or low ground only: willow crowns and the water surface change most between
    // seasons.
    let classes = demo_site::class_map(&demo_site::dsm_grid(), (0.0, 0.0));
    let mask = classes.mapv(|c| {
        let c = CoverClass::from_code(c).unwrap();
        c != CoverClass::WillowScrub && c != CoverClass::OpenWater
    });
    for f in flights {
        let date = f["date"].as_str().unwrap();
        let shift = f["shift_m"].as_array().unwrap();
        let (dx, dy) = (shift[0].as_f64().unwrap(), shift[1].as_f64().unwrap());
        assert_eq!(
            plans[date].shift_m,
            (dx, dy),
            "{date}: site.json and generator disagree"
        );
        let (_, z) = read_band(&committed().join(f["dsm"].as_str().unwrap()), 1);
        let (ex, ey) = estimate_shift(&zref, &z, &mask, demo_site::DSM_CELL);
        // Tolerance 2 cm (0.2 cell): the parabola fit and the seasonal vegetation change
        // bias the estimate by up to about 6 mm on these surfaces.
        assert!(
            (ex - dx).abs() < 0.02 && (ey - dy).abs() < 0.02,
            "{date}: recorded ({dx}, {dy}) m, found ({ex:.3}, {ey:.3}) m"
        );
    }
}

#[test]
fn sample_circles_lie_wholly_in_their_class_on_the_reference_dsm() {
    let text = std::fs::read_to_string(committed().join("samples.csv")).unwrap();
    let mut lines = text.lines();
    assert_eq!(lines.next(), Some("id,x,y,radius_m,class"));
    let grid = demo_site::dsm_grid();
    let classes = demo_site::class_map(&grid, (0.0, 0.0));
    let site = site_json();
    let reference = site["flights"]
        .as_array()
        .unwrap()
        .iter()
        .find(|f| f["reference"] == true)
        .unwrap()
        .clone();
    let (_, zref) = read_band(&committed().join(reference["dsm"].as_str().unwrap()), 1);
    let mut per_class: BTreeMap<String, usize> = BTreeMap::new();
    let mut n = 0;
    for line in lines {
        n += 1;
        let f: Vec<&str> = line.split(',').collect();
        assert_eq!(f.len(), 5, "{line}");
        assert_eq!(f[0].parse::<usize>().unwrap(), n);
        let (x, y, r): (f64, f64, f64) = (
            f[1].parse().unwrap(),
            f[2].parse().unwrap(),
            f[3].parse().unwrap(),
        );
        assert!((0.5..=2.0).contains(&r), "{line}");
        let class = CoverClass::ALL
            .into_iter()
            .find(|c| c.name() == f[4])
            .unwrap();
        *per_class.entry(f[4].to_string()).or_default() += 1;
        // Every DSM cell the circle touches (its centre within r + half a cell diagonal).
        let reach = r + demo_site::DSM_CELL * std::f64::consts::FRAC_1_SQRT_2;
        let mut touched = 0;
        for ((row, col), code) in classes.indexed_iter() {
            let (cx, cy) = grid.cell_centre(col as f64, row as f64);
            if (cx - x).abs() > reach || (cy - y).abs() > reach || (cx - x).hypot(cy - y) > reach {
                continue;
            }
            touched += 1;
            assert_eq!(
                *code,
                class.code(),
                "circle {n} touches another class at {col},{row}"
            );
            assert!(
                zref[[row, col]].is_finite(),
                "circle {n} touches nodata at {col},{row}"
            );
        }
        // π(r + h/√2)² / h² cells, give or take the rim.
        let expect = std::f64::consts::PI * (reach / demo_site::DSM_CELL).powi(2);
        assert!(
            (touched as f64 / expect - 1.0).abs() < 0.1,
            "circle {n}: {touched} cells"
        );
    }
    assert_eq!(per_class.len(), 6);
    assert!(
        per_class.values().all(|&k| (15..=30).contains(&k)),
        "{per_class:?}"
    );
    assert_eq!(site["samples"]["count"].as_u64(), Some(n as u64));
}

#[test]
fn unwritable_output_is_a_clear_error() {
    let tmp = tempdir();
    let file = tmp.path().join("plain-file");
    std::fs::write(&file, b"not a folder").unwrap();
    let target = file.join("site");
    let err = demo_site::generate(&target).unwrap_err();
    assert!(err.to_string().contains("plain-file"), "{err}");
    assert_ne!(err.exit_code(), 0);
    // The file in the way is left as it was.
    assert_eq!(std::fs::read(&file).unwrap(), b"not a folder");
}

/// Values of `band` of the raster at `path` at the cells whose centres lie within each
/// circle of `samples.csv` (moved by `shift`, metres, as the flight sees it), grouped by
/// class; nodata cells are skipped.
fn circle_values(
    path: &Path,
    bands: &[usize],
    shift: (f64, f64),
    f: impl Fn(&[f32]) -> f64,
) -> BTreeMap<String, Vec<f64>> {
    let src = raster::open(path).unwrap();
    let grid = src.grid().clone();
    let arrays: Vec<Array2<f32>> = bands
        .iter()
        .map(|&b| src.read_window(b, Window::full(&grid)).unwrap())
        .collect();
    let text = std::fs::read_to_string(committed().join("samples.csv")).unwrap();
    let mut out: BTreeMap<String, Vec<f64>> = BTreeMap::new();
    for line in text.lines().skip(1) {
        let v: Vec<&str> = line.split(',').collect();
        let (x, y, r): (f64, f64, f64) = (
            v[1].parse::<f64>().unwrap() + shift.0,
            v[2].parse::<f64>().unwrap() + shift.1,
            v[3].parse().unwrap(),
        );
        let (fc, fr) = grid.to_cell(x, y);
        let k = (r / grid.transform[1]).ceil() as i64 + 1;
        for row in fr as i64 - k..=fr as i64 + k {
            for col in fc as i64 - k..=fc as i64 + k {
                let (cx, cy) = grid.cell_centre(col as f64, row as f64);
                if (cx - x).hypot(cy - y) > r {
                    continue;
                }
                let vals: Vec<f32> = arrays
                    .iter()
                    .map(|a| a[[row as usize, col as usize]])
                    .collect();
                if vals.iter().all(|x| x.is_finite()) {
                    out.entry(v[4].to_string()).or_default().push(f(&vals));
                }
            }
        }
    }
    out
}

/// Jeffries–Matusita distance of two classes' values (Gaussian model, terrastack's
/// separability kernel, itself checked against numpy by scripts/xcheck_separability.py).
fn jm(values: &BTreeMap<String, Vec<f64>>, a: &str, b: &str) -> f64 {
    let stats = |v: &[f64]| {
        let m = v.iter().sum::<f64>() / v.len() as f64;
        let var = v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (v.len() - 1) as f64;
        (m, var)
    };
    terrastack::sample::separability::jeffries_matusita(stats(&values[a]), stats(&values[b]))
}

#[test]
fn look_alike_classes_part_only_in_height_or_elevation() {
    // The demo's design (src/demo_site/spectra.rs): the track is surfaced with the bar's
    // gravel (one spectrum), willow leaves look like the wet meadow beneath them until
    // autumn, and wet and dry meadow are alike in spring and mixed over a 6 m transition.
    let spring = demo_site::flights()[0];
    let summer = demo_site::flights()[1];
    let ndvi = |v: &[f32]| ((v[1] - v[0]) / (v[1] + v[0])) as f64;
    let ortho = |f: &FlightPlan| committed().join(f.date).join("ortho.tif");
    let spring_ndvi = circle_values(&ortho(&spring), &[3, 5], (0.0, 0.0), ndvi);
    let summer_ndvi = circle_values(&ortho(&summer), &[3, 5], summer.shift_m, ndvi);
    let dsm = circle_values(
        &committed().join(spring.date).join("dsm.tif"),
        &[1],
        (0.0, 0.0),
        |v| v[0] as f64,
    );
    // Same spectrum: NDVI JM near 0; elevation apart: the bar lies within 0.5 m of the
    // water, the track on the lower terrace about 1 m higher, both with 1.5 cm noise.
    let ndvi_jm = jm(&spring_ndvi, "farm_track", "gravel_bar");
    let z_jm = jm(&dsm, "farm_track", "gravel_bar");
    assert!(
        ndvi_jm < 0.2 && z_jm > 1.9,
        "track/bar: NDVI {ndvi_jm}, DSM {z_jm}"
    );
    // Willow over wet meadow: spring tables within 8 %, mixed through the gaps, so NDVI
    // JM is small; the 2–4 m canopy against a 0.1 m spring sward puts the DSM apart.
    let ndvi_jm = jm(&spring_ndvi, "wet_meadow", "willow_scrub");
    let z_jm = jm(&dsm, "wet_meadow", "willow_scrub");
    assert!(
        ndvi_jm < 0.3 && z_jm > 1.9,
        "willow/wet: NDVI {ndvi_jm}, DSM {z_jm}"
    );
    // Meadows: spring NDVI 0.70 against 0.65 (tables) with ±0.05 of vigour and the mixed
    // transition overlap (JM well below 2); the summer gap of 0.13 separates them more.
    let (sp, su) = (
        jm(&spring_ndvi, "dry_meadow", "wet_meadow"),
        jm(&summer_ndvi, "dry_meadow", "wet_meadow"),
    );
    assert!(
        sp < 1.6 && su > sp,
        "meadows: spring NDVI JM {sp}, summer {su}"
    );
    println!(
        "track/bar, willow/wet and meadow JM as designed; meadows spring {sp:.3}, summer {su:.3}"
    );
}

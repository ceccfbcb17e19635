//! Values that cannot be elevations or reflectances, and band maps that cannot be meant,
//! through the binary: each is refused with the file or flag and the fix (and no output),
//! or built with a warning and a record in `stack.json` when explicitly accepted.
//!
//! Inputs are small closed-form surfaces (tests/util); the implausible values are planted
//! by hand.

mod util;

use std::path::Path;

use ndarray::Array2;
use serde_json::Value;
use terrastack::raster::geotiff::{write_geotiff, WriteOptions};
use util::*;

fn sidecar(dir: &Path) -> Value {
    read_json(&dir.join("stack.json"))
}

/// A refused build leaves no stack and no temporary file in its output folder.
fn assert_no_output(out: &Path) {
    if let Ok(entries) = std::fs::read_dir(out) {
        let names: Vec<String> = entries
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .collect();
        assert!(names.is_empty(), "left in {}: {names:?}", out.display());
    }
}

fn dsm_with(dir: &Path, edit: impl Fn(&mut Array2<f32>)) -> String {
    let grid = utm_grid(48, 40, 0.5);
    let mut z = surface(&grid);
    edit(&mut z);
    write_dsm(&dir.join("dsm.tif"), &grid, &z);
    p(dir, "dsm.tif")
}

#[test]
fn infinite_dsm_cells_read_as_nodata() {
    let tmp = tempdir();
    let dsm = dsm_with(tmp.path(), |z| {
        z[[10, 10]] = f32::INFINITY;
        z[[20, 30]] = f32::NEG_INFINITY;
    });
    let out = p(tmp.path(), "out");
    let o = run(&[
        "build",
        "--dsm",
        &dsm,
        "--features",
        "elevation,slope",
        "--out",
        &out,
        "--quiet",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    let meta = sidecar(Path::new(&out));
    let elev = sidecar_band(&meta, "elevation");
    // Two of 48 x 40 cells are nodata; min and max are the surface's (util::surface:
    // 200 m plus at most a few metres), not ±inf.
    let valid = elev["stats"]["valid_fraction"].as_f64().unwrap();
    assert!((valid - (1920.0 - 2.0) / 1920.0).abs() < 1e-12, "{valid}");
    let (min, max) = (
        elev["stats"]["min"].as_f64().unwrap(),
        elev["stats"]["max"].as_f64().unwrap(),
    );
    assert!(min > 190.0 && max < 220.0, "{min} {max}");
    let stack = terrastack::raster::open(&Path::new(&out).join("stack.tif")).unwrap();
    let e = stack
        .read_window(1, terrastack::Window::full(stack.grid()))
        .unwrap();
    assert!(e[[10, 10]].is_nan() && e[[20, 30]].is_nan());
}

#[test]
fn multi_band_dsm_needs_a_chosen_band() {
    let tmp = tempdir();
    let grid = utm_grid(40, 32, 0.5);
    // A five-band uint16 orthomosaic given as the DSM (the 88° "DSM").
    write_ortho(&tmp.path().join("ortho.tif"), &grid);
    let out = p(tmp.path(), "out");
    let o = run(&[
        "build",
        "--dsm",
        &p(tmp.path(), "ortho.tif"),
        "--features",
        "slope",
        "--out",
        &out,
    ]);
    assert_eq!(o.status.code(), Some(1), "{}", stderr(&o));
    let e = stderr(&o);
    assert!(
        e.contains("ortho.tif") && e.contains("5 bands") && e.contains("--dsm-band"),
        "{e}"
    );
    assert_no_output(Path::new(&out));
    // Choosing a band builds it (its values, 700–5500, are plausible elevations).
    let o = run(&[
        "build",
        "--dsm",
        &p(tmp.path(), "ortho.tif"),
        "--dsm-band",
        "2",
        "--features",
        "elevation",
        "--out",
        &out,
        "--quiet",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    let meta = sidecar(Path::new(&out));
    assert_eq!(meta["parameters"]["dsm_band"], 2);
    // Band 2 of util::write_ortho is 1500 + 600·1 ± 800.
    let min = sidecar_band(&meta, "elevation")["stats"]["min"]
        .as_f64()
        .unwrap();
    assert!((1300.0..2900.0).contains(&min), "{min}");
    // A band past the file's count is refused, naming the file.
    let o = run(&[
        "build",
        "--dsm",
        &p(tmp.path(), "ortho.tif"),
        "--dsm-band",
        "6",
        "--out",
        &p(tmp.path(), "out6"),
    ]);
    assert_eq!(o.status.code(), Some(1));
    assert!(stderr(&o).contains("band 6"), "{}", stderr(&o));
}

#[test]
fn elevations_outside_the_plausible_range_are_refused_unless_accepted() {
    let tmp = tempdir();
    // An undeclared fill value (−32768) in one corner: not an elevation.
    let dsm = dsm_with(tmp.path(), |z| {
        for r in 0..5 {
            for c in 0..6 {
                z[[r, c]] = -32768.0;
            }
        }
    });
    let out = p(tmp.path(), "out");
    let args = [
        "build",
        "--dsm",
        &dsm,
        "--features",
        "elevation,slope",
        "--out",
        &out,
    ];
    let o = run(&args);
    assert_eq!(o.status.code(), Some(1), "{}", stderr(&o));
    let e = stderr(&o);
    assert!(
        e.contains("dsm.tif")
            && e.contains("30 cells")
            && e.contains("-500 m to 9000 m")
            && e.contains("--allow-any-elevation"),
        "{e}"
    );
    assert_no_output(Path::new(&out));
    // Feet read as metres are caught after the z-factor too: 30000 · 0.3048 = 9144 m.
    let high = dsm_with(tmp.path(), |z| z[[3, 3]] = 30000.0);
    let o = run(&[
        "build",
        "--dsm",
        &high,
        "--z-factor",
        "0.3048",
        "--features",
        "slope",
        "--out",
        &out,
    ]);
    assert_eq!(o.status.code(), Some(1), "{}", stderr(&o));
    // Accepted explicitly: built, with a warning and the count in stack.json.
    let dsm = dsm_with(tmp.path(), |z| z[[0, 0]] = -32768.0);
    let o = run(&[
        "build",
        "--dsm",
        &dsm,
        "--features",
        "elevation",
        "--allow-any-elevation",
        "--out",
        &out,
        "--quiet",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(stderr(&o).contains("warning:"), "{}", stderr(&o));
    let meta = sidecar(Path::new(&out));
    let rec = &sidecar_band(&meta, "elevation")["outside_plausible_range"];
    assert_eq!(rec["cells"], 1);
    assert_eq!(rec["range"], serde_json::json!([-500.0, 9000.0]));
}

#[test]
fn all_nodata_dsm_is_an_error() {
    let tmp = tempdir();
    let dsm = dsm_with(tmp.path(), |z| z.fill(f32::NAN));
    let out = p(tmp.path(), "out");
    let o = run(&["build", "--dsm", &dsm, "--features", "slope", "--out", &out]);
    assert_eq!(o.status.code(), Some(1), "{}", stderr(&o));
    let e = stderr(&o);
    assert!(
        e.contains("dsm.tif") && e.contains("no valid elevation"),
        "{e}"
    );
    assert_no_output(Path::new(&out));
}

#[test]
fn unparsable_nodata_tag_is_an_error() {
    let tmp = tempdir();
    let dsm = dsm_with(tmp.path(), |_| {});
    // The writer stores nodata -9999 as GDAL_NODATA text "-9999": spoil it in place.
    let mut bytes = std::fs::read(&dsm).unwrap();
    let at = bytes
        .windows(6)
        .position(|w| w == b"-9999\0")
        .expect("nodata tag text");
    bytes[at..at + 5].copy_from_slice(b"n/a?!");
    std::fs::write(&dsm, bytes).unwrap();
    let o = run(&["build", "--dsm", &dsm, "--out", &p(tmp.path(), "out")]);
    assert_eq!(o.status.code(), Some(1), "{}", stderr(&o));
    let e = stderr(&o);
    assert!(
        e.contains("dsm.tif") && e.contains("n/a?!") && e.contains("nodata"),
        "{e}"
    );
}

#[test]
fn integer_nodata_the_type_cannot_hold_is_flagged() {
    let tmp = tempdir();
    let grid = utm_grid(40, 32, 0.5).with_nodata(Some(-9999.0));
    let z = surface(&grid).mapv(|v| v.round() as u16);
    let o = WriteOptions {
        sample_type: terrastack::raster::SampleType::U16,
        ..WriteOptions::default()
    };
    write_geotiff(
        &tmp.path().join("dsm.tif"),
        &grid,
        &[z.view()],
        &["elevation"],
        &o,
    )
    .unwrap();
    let out = run(&[
        "build",
        "--dsm",
        &p(tmp.path(), "dsm.tif"),
        "--features",
        "slope",
        "--out",
        &p(tmp.path(), "out"),
        "--quiet",
    ]);
    assert!(out.status.success(), "{}", stderr(&out));
    let e = stderr(&out);
    assert!(
        e.contains("warning:") && e.contains("-9999") && e.contains("uint16"),
        "{e}"
    );
}

/// A DSM and util's five-band uint16 orthomosaic (reflectance × 10000) on one grid.
fn site(dir: &Path) -> (String, String) {
    let grid = utm_grid(48, 40, 0.5);
    write_dsm(&dir.join("dsm.tif"), &grid, &surface(&grid));
    write_ortho(&dir.join("ortho.tif"), &grid);
    (p(dir, "dsm.tif"), p(dir, "ortho.tif"))
}

const BANDS: &str = "blue=1,green=2,red=3,rededge=4,nir=5";

#[test]
fn unscaled_integer_reflectance_is_refused_with_the_flag_to_fix_it() {
    let tmp = tempdir();
    let (dsm, ortho) = site(tmp.path());
    let out = p(tmp.path(), "out");
    let base = [
        "build",
        "--dsm",
        &dsm,
        "--ortho",
        &ortho,
        "--bands",
        BANDS,
        "--features",
        "savi,evi2,ndvi",
        "--out",
        &out,
    ];
    let o = run(&base);
    assert_eq!(o.status.code(), Some(1), "{}", stderr(&o));
    let e = stderr(&o);
    assert!(
        e.contains("ortho.tif")
            && e.contains("-0.05 to 1.5")
            && e.contains("--reflectance-scale")
            && e.contains("--allow-any-reflectance"),
        "{e}"
    );
    assert_no_output(Path::new(&out));
    // With the scale, reflectance 0.07–0.55: built, every index inside its range.
    let mut scaled = base.to_vec();
    scaled.extend(["--reflectance-scale", "1e-4", "--quiet"]);
    let o = run(&scaled);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(!stderr(&o).contains("warning"), "{}", stderr(&o));
    let meta = sidecar(Path::new(&out));
    for name in ["savi", "evi2", "ndvi"] {
        assert_eq!(
            sidecar_band(&meta, name)["outside_valid_range"]["cells"],
            0,
            "{name}"
        );
    }
    assert_eq!(
        sidecar_band(&meta, "ndvi")["outside_valid_range"]["range"],
        serde_json::json!([-1.0, 1.0])
    );
    // Accepted as they are: built, and the indices outside their range are flagged. A red
    // offset of −0.5 makes red −0.31 to −0.15 and nir 0.31 to 0.47, so SAVI =
    // 1.5(N − R)/(N + R + 0.5) lies between 1.04 and 1.77, above its range's end of 1.
    let mut accepted = base.to_vec();
    accepted.extend([
        "--reflectance-scale",
        "1e-4",
        "--reflectance-offset",
        "red=-0.5",
        "--allow-any-reflectance",
        "--force",
        "--quiet",
    ]);
    let o = run(&accepted);
    assert!(o.status.success(), "{}", stderr(&o));
    let e = stderr(&o);
    assert!(e.contains("warning:") && e.contains("savi"), "{e}");
    let meta = sidecar(Path::new(&out));
    let savi = &sidecar_band(&meta, "savi")["outside_valid_range"];
    assert!(savi["cells"].as_u64().unwrap() > 0, "{savi}");
    assert!(savi["fraction"].as_f64().unwrap() > 0.5, "{savi}");
}

#[test]
fn unknown_band_roles_are_refused_and_own_bands_are_explicit() {
    let tmp = tempdir();
    let (dsm, ortho) = site(tmp.path());
    let out = p(tmp.path(), "out");
    let o = run(&[
        "build",
        "--dsm",
        &dsm,
        "--ortho",
        &ortho,
        "--bands",
        "b=1,g=2,r=3",
        "--out",
        &out,
    ]);
    assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
    let e = stderr(&o);
    assert!(
        e.contains("unknown band role `b`")
            && e.contains("did you mean `blue`")
            && e.contains("extra:NAME"),
        "{e}"
    );
    // A band of one's own is declared with `extra:` and used by its name in band math.
    let o = run(&[
        "build",
        "--dsm",
        &dsm,
        "--ortho",
        &ortho,
        "--bands",
        "red=3,nir=5,extra:edge2=4",
        "--reflectance-scale",
        "1e-4",
        "--features",
        "ndvi",
        "--index",
        "ratio=nir / edge2",
        "--out",
        &out,
        "--quiet",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    let meta = sidecar(Path::new(&out));
    assert_eq!(sidecar_band(&meta, "ratio")["source"], "nir,edge2");
}

#[test]
fn band_math_names_may_not_shadow_built_in_bands() {
    let tmp = tempdir();
    let (dsm, ortho) = site(tmp.path());
    let out = p(tmp.path(), "out");
    for (name, word) in [
        ("ndvi", "ndvi"),
        ("slope_horn", "slope"),
        ("TPI_r5m", "tpi"),
        ("reflectance_nir", "reflectance"),
    ] {
        let spec = format!("{name}=nir - red");
        let o = run(&[
            "build",
            "--dsm",
            &dsm,
            "--ortho",
            &ortho,
            "--bands",
            BANDS,
            "--reflectance-scale",
            "1e-4",
            "--index",
            &spec,
            "--out",
            &out,
        ]);
        assert_eq!(o.status.code(), Some(2), "{name}: {}", stderr(&o));
        let e = stderr(&o);
        assert!(
            e.contains(&format!("`{name}`")) && e.contains(&format!("`{word}")),
            "{e}"
        );
    }
    // The same in a recipe file.
    let recipe = tmp.path().join("r.toml");
    std::fs::write(
        &recipe,
        "[features]\nlist = [\"slope\"]\nexpressions = { slope = \"nir\" }\n",
    )
    .unwrap();
    let o = run(&[
        "build",
        "--dsm",
        &dsm,
        "--ortho",
        &ortho,
        "--bands",
        BANDS,
        "--recipe",
        recipe.to_str().unwrap(),
        "--out",
        &out,
    ]);
    assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
    // The same name twice on the command line.
    let o = run(&[
        "build", "--dsm", &dsm, "--ortho", &ortho, "--bands", BANDS, "--index", "w=nir", "--index",
        "w=red", "--out", &out,
    ]);
    assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
    assert!(stderr(&o).contains("twice"), "{}", stderr(&o));
    assert_no_output(Path::new(&out));
}

#[test]
fn one_band_two_roles_or_one_role_two_bands_is_refused() {
    let tmp = tempdir();
    let (dsm, ortho) = site(tmp.path());
    let out = p(tmp.path(), "out");
    // nir both in --bands and from --band.
    let nir_file = format!("nir={ortho}:5");
    let o = run(&[
        "build", "--dsm", &dsm, "--ortho", &ortho, "--bands", BANDS, "--band", &nir_file, "--out",
        &out,
    ]);
    assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
    assert!(stderr(&o).contains("mapped twice"), "{}", stderr(&o));
    // One band as two roles through --band.
    let red = format!("red={ortho}:3");
    let nir = format!("nir={ortho}:3");
    let o = run(&[
        "build", "--dsm", &dsm, "--band", &red, "--band", &nir, "--out", &out,
    ]);
    assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
    assert!(stderr(&o).contains("two roles"), "{}", stderr(&o));
    // A role's band past the file's band count names the file.
    let o = run(&[
        "build",
        "--dsm",
        &dsm,
        "--ortho",
        &ortho,
        "--bands",
        "red=3,nir=6",
        "--out",
        &out,
    ]);
    assert_eq!(o.status.code(), Some(1), "{}", stderr(&o));
    assert!(stderr(&o).contains("band 6"), "{}", stderr(&o));
}

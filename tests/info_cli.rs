//! `terrastack info` on a stack through the binary: the per-band statistics table holds
//! exactly what `stack.json` records (to its six printed digits), for the folder and for its
//! `stack.tif` given directly; `--json` carries the very numbers; a raster that is not a
//! stack gets no table.

mod util;

use std::path::Path;

use serde_json::Value;
use util::{p, run, stderr, surface, tempdir, utm_grid, write_dsm};

fn stdout(o: &std::process::Output) -> String {
    String::from_utf8_lossy(&o.stdout).into_owned()
}

/// Build a small stack with a hole in its DSM; returns the stack folder.
fn stack(dir: &Path) -> String {
    let grid = utm_grid(40, 30, 0.5);
    let mut z = surface(&grid);
    for r in 5..9 {
        for c in 5..12 {
            z[[r, c]] = f32::NAN;
        }
    }
    write_dsm(&dir.join("dsm.tif"), &grid, &z);
    let out = p(dir, "stack");
    let o = run(&[
        "build",
        "--dsm",
        &p(dir, "dsm.tif"),
        "--features",
        "elevation,slope,tpi,profile_curvature",
        "--scales",
        "1.5",
        "--out",
        &out,
        "-q",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    out
}

/// Check the statistics table of `text` against `stack.json`'s records.
fn check_table(text: &str, sidecar: &Value) {
    let start = text
        .find("band statistics (every valid cell, as stack.json records them)\n")
        .unwrap_or_else(|| panic!("no statistics table:\n{text}"));
    let lines: Vec<&str> = text[start..].lines().skip(1).collect();
    let head: Vec<&str> = lines[0].split_whitespace().collect();
    assert_eq!(
        head,
        ["band", "name", "units", "min", "max", "mean", "std", "valid"]
    );
    let bands = sidecar["bands"].as_array().unwrap();
    for (band, line) in bands.iter().zip(&lines[1..]) {
        let cells: Vec<&str> = line.split_whitespace().collect();
        assert_eq!(cells[0], band["index"].to_string());
        assert_eq!(cells[1], band["name"].as_str().unwrap());
        assert_eq!(cells[2], band["units"].as_str().unwrap());
        for (i, key) in ["min", "max", "mean", "std"].iter().enumerate() {
            let want = band["stats"][key].as_f64().unwrap();
            let got: f64 = cells[3 + i].parse().unwrap();
            // Six significant digits: within half a unit of the sixth digit.
            assert!(
                (got - want).abs() <= 5e-6 * want.abs().max(1e-300) * 10.0,
                "{} {key}: printed {got}, stack.json {want}",
                cells[1]
            );
        }
        let valid = band["stats"]["valid_fraction"].as_f64().unwrap() * 100.0;
        let printed: f64 = cells[7].parse().unwrap();
        assert!((printed - valid).abs() <= 0.05, "{line}");
        assert_eq!(cells[8], "%");
    }
    // Columns line up: the last column is right-aligned, so every row ends where the
    // heading does.
    let ends: Vec<usize> = lines[..=bands.len()].iter().map(|l| l.len()).collect();
    assert!(ends.windows(2).all(|w| w[0] == w[1]), "{ends:?}");
}

#[test]
fn info_prints_the_statistics_of_a_stack() {
    let dir = tempdir();
    let out = stack(dir.path());
    let sidecar: Value =
        serde_json::from_str(&std::fs::read_to_string(Path::new(&out).join("stack.json")).unwrap())
            .unwrap();
    assert_eq!(sidecar["bands"].as_array().unwrap().len(), 4);
    // Some band must have nodata, so that the valid column says something.
    assert!(
        sidecar["bands"][0]["stats"]["valid_fraction"]
            .as_f64()
            .unwrap()
            < 1.0
    );

    let o = run(&["info", &out]);
    assert!(o.status.success(), "{}", stderr(&o));
    let text = stdout(&o);
    assert!(
        text.contains("stack layers"),
        "the band table stays:\n{text}"
    );
    check_table(&text, &sidecar);

    let tif = Path::new(&out).join("stack.tif");
    let o = run(&["info", tif.to_str().unwrap()]);
    assert!(o.status.success(), "{}", stderr(&o));
    check_table(&stdout(&o), &sidecar);

    let o = run(&["info", "--json", &out]);
    let summary: Value = serde_json::from_str(&stdout(&o)).unwrap();
    for (i, band) in sidecar["bands"].as_array().unwrap().iter().enumerate() {
        let row = &summary["stack"]["bands"][i];
        for key in ["min", "max", "mean", "std", "valid_fraction"] {
            assert_eq!(row[key], band["stats"][key], "{key}");
        }
    }

    let o = run(&["info", &p(dir.path(), "dsm.tif")]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(!stdout(&o).contains("band statistics"));
}

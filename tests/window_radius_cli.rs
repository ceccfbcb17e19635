//! Window radii through the binary: radii below 1.5 cells, negative, zero and non-finite
//! radii are usage errors (exit 2) naming where they came from; the edge rule of every
//! windowed band is in `stack.json`.

mod util;

use util::*;

fn build(dir: &std::path::Path, extra: &[&str]) -> std::process::Output {
    let dsm = p(dir, "dsm.tif");
    let out = p(dir, "out");
    let mut args = vec!["build", "--dsm", &dsm, "--out", &out, "--quiet"];
    args.extend_from_slice(extra);
    run(&args)
}

fn site() -> tempfile::TempDir {
    let tmp = tempdir();
    let grid = utm_grid(60, 50, 0.1);
    write_dsm(&tmp.path().join("dsm.tif"), &grid, &surface(&grid));
    tmp
}

#[test]
fn scale_below_one_and_a_half_cells_is_refused() {
    // 0.05 m on 0.1 m cells is half a cell: a one-cell window whose TPI is 0 everywhere.
    let tmp = site();
    let o = build(tmp.path(), &["--features", "tpi", "--scales", "0.05"]);
    assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
    let e = stderr(&o);
    assert!(e.contains("--scales") && e.contains("1.5 cells"), "{e}");
    assert!(e.contains("at least 0.15"), "{e}");
    assert!(!tmp.path().join("out").join("stack.tif").exists());
    let o = build(tmp.path(), &["--features", "tpi@0.1", "--scales", "1"]);
    assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
    assert!(stderr(&o).contains("`tpi@0.1`"), "{}", stderr(&o));
    // Exactly 1.5 cells (decimal input) is accepted.
    let o = build(tmp.path(), &["--features", "tpi", "--scales", "0.15"]);
    assert!(o.status.success(), "{}", stderr(&o));
}

#[test]
fn negative_zero_and_non_finite_radii_are_bad_values() {
    let tmp = site();
    for bad in ["-5", "0", "nan", "inf", "2,-1"] {
        let o = build(tmp.path(), &["--features", "tpi", "--scales", bad]);
        assert_eq!(o.status.code(), Some(2), "{bad}: {}", stderr(&o));
        let e = stderr(&o);
        assert!(e.contains("--scales"), "{bad}: {e}");
        assert!(!e.contains("unexpected argument"), "{bad}: {e}");
    }
    for bad in ["tpi@-1", "tpi@nan", "dev@0", "vrm@inf"] {
        let o = build(tmp.path(), &["--features", bad]);
        assert_eq!(o.status.code(), Some(2), "{bad}: {}", stderr(&o));
        assert!(stderr(&o).contains(bad), "{bad}: {}", stderr(&o));
    }
    let recipe = tmp.path().join("r.toml");
    std::fs::write(&recipe, "[features]\nlist = [\"tpi\"]\nscales_m = [-2.0]\n").unwrap();
    let o = build(tmp.path(), &["--recipe", recipe.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
    assert!(stderr(&o).contains("scales_m"), "{}", stderr(&o));
}

#[test]
fn stack_json_states_the_edge_rule_of_windowed_bands() {
    let tmp = site();
    let o = build(
        tmp.path(),
        &["--features", "tpi,roughness,slope", "--scales", "0.5"],
    );
    assert!(o.status.success(), "{}", stderr(&o));
    let meta: serde_json::Value = read_json(&tmp.path().join("out").join("stack.json"));
    let rule = |name: &str| -> String {
        sidecar_band(&meta, name)["edge_rule"]
            .as_str()
            .unwrap()
            .to_string()
    };
    assert!(rule("tpi_r0p5m").contains("least-squares plane"));
    assert!(rule("roughness_r0p5m").contains("not corrected"));
    assert!(rule("slope_horn").contains("3x3"));
}

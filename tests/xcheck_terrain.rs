//! Cross-check of terrain kernels against independent numpy/scipy references on a real
//! open DEM (matplotlib's Jacksboro fault sample, 3″ geographic grid, with a punched
//! nodata hole). The references and the DEM come from `scripts/xcheck_terrain.py DIR`;
//! run with `TERRASTACK_XCHECK_DIR=DIR cargo test --release --test xcheck_terrain`.
//! The test is ignored under plain `cargo test`; `scripts/ci/terrain.sh` runs it with
//! `--ignored`, and without the variable it fails.
//!
//! Sources: numpy (Horn slope and aspect with per-row WGS84 metres per degree) and
//! scipy.ndimage.correlate (disc TPI and roughness), both written from docs/methods.md
//! independently of the Rust code; the DEM ships with matplotlib.

mod util;

use std::path::{Path, PathBuf};

use ndarray::{s, Array2};
use serde_json::Value;
use terrastack::grid::{Crs, Grid};
use terrastack::terrain::{
    compute, Quantity, SlopeMethod, TerrainFeature, TerrainParams, WindowShape,
};

/// The DEM through terrastack's raster reader when this build has one, else the raw
/// float32 copy the script writes alongside the GeoTIFF.
fn load_dem(dir: &Path, m: &Value, rows: usize, cols: usize) -> (Array2<f32>, &'static str) {
    let tif: PathBuf = dir.join(m["geotiff"].as_str().expect("geotiff"));
    // A build whose reader is still a skeleton panics; keep that quiet and fall back.
    let hook = std::panic::take_hook();
    std::panic::set_hook(Box::new(|_| {}));
    let attempt = std::panic::catch_unwind(|| {
        let src = terrastack::raster::open(&tif).ok()?;
        src.read_window(1, terrastack::Window::new(0, 0, cols, rows))
            .ok()
    });
    std::panic::set_hook(hook);
    match attempt {
        Ok(Some(a)) => (a, "GeoTIFF through terrastack::raster::open"),
        _ => (
            util::read_raw_f32(
                &dir.join(m["raw_dem"].as_str().expect("raw_dem")),
                rows,
                cols,
            ),
            "raw float32 copy (GeoTIFF reader not available in this build)",
        ),
    }
}

struct Tally {
    compared: usize,
    max_err: f64,
    nan_mismatch: usize,
}

fn compare(got: &Array2<f32>, want: &Array2<f32>, angle: bool, tol: f64) -> Tally {
    let mut t = Tally {
        compared: 0,
        max_err: 0.0,
        nan_mismatch: 0,
    };
    for (g, w) in got.iter().zip(want.iter()) {
        match (g.is_nan(), w.is_nan()) {
            (true, true) => {}
            (false, false) => {
                let mut e = (*g as f64 - *w as f64).abs();
                if angle {
                    e = e.min(360.0 - e);
                }
                t.max_err = t.max_err.max(e);
                t.compared += 1;
            }
            _ => t.nan_mismatch += 1,
        }
    }
    assert!(
        t.max_err <= tol,
        "max error {} above tolerance {tol}",
        t.max_err
    );
    t
}

#[test]
#[ignore = "cross-check: needs TERRASTACK_XCHECK_DIR from scripts/xcheck_terrain.py (run by scripts/ci/terrain.sh)"]
fn jacksboro_matches_numpy_and_scipy() {
    let dir = util::xcheck_dir("python3 scripts/xcheck_terrain.py DIR");
    let m: Value = util::read_json(&dir.join("manifest.json"));
    let rows = m["height"].as_u64().expect("height") as usize;
    let cols = m["width"].as_u64().expect("width") as usize;
    let t: Vec<f64> = m["transform"]
        .as_array()
        .expect("transform")
        .iter()
        .map(|v| v.as_f64().expect("number"))
        .collect();
    let grid = Grid::new(
        cols,
        rows,
        [t[0], t[1], t[2], t[3], t[4], t[5]],
        Crs::from_epsg(4326),
    )
    .expect("grid");
    let (dem, how) = load_dem(&dir, &m, rows, cols);
    eprintln!("DEM read from the {how}");
    let frac = m["min_valid_fraction"].as_f64().expect("fraction");
    let radii: Vec<f64> = m["radii_m"]
        .as_array()
        .expect("radii")
        .iter()
        .map(|v| v.as_f64().expect("radius"))
        .collect();

    let mut feats = vec![
        TerrainFeature::derivative(Quantity::Slope, SlopeMethod::Horn, None),
        TerrainFeature::derivative(Quantity::Aspect, SlopeMethod::Horn, None),
    ];
    for &r in &radii {
        feats.push(TerrainFeature::windowed(Quantity::Tpi, r));
        feats.push(TerrainFeature::windowed(Quantity::Roughness, r));
    }
    // Halo from the narrowest cells (the northern row).
    let (hx_min, hy_min) = grid.cell_size_m(0.0).expect("cell size");
    let halo = feats
        .iter()
        .map(|f| f.halo_px(hx_min, hy_min))
        .max()
        .expect("features");
    let mut padded = Array2::from_elem((rows + 2 * halo, cols + 2 * halo), f32::NAN);
    padded
        .slice_mut(s![halo..halo + rows, halo..halo + cols])
        .assign(&dem);
    let cells = grid
        .cell_sizes(-(halo as i64), rows + 2 * halo)
        .expect("cell sizes");
    // The reference computes disc windows (the non-default shape, given explicitly).
    let params = TerrainParams {
        min_valid_fraction: frac,
        shape: WindowShape::Disc,
        ..TerrainParams::default()
    };
    let out = compute(&feats, padded.view(), &cells, halo, 500.0, &params);

    let refs = &m["references"];
    let want =
        |name: &str| util::read_raw_f32(&dir.join(refs[name].as_str().expect(name)), rows, cols);
    // Tolerances: both sides round to f32 at the end; slope and aspect agree to f32
    // rounding of degrees (~4e-6 at 90°) — allow 1e-4°; windowed statistics differ only
    // by f64 summation order (integer elevations quantise exactly) — allow 1e-4 m.
    let checks: Vec<(usize, String, bool, f64)> = {
        let mut v = vec![
            (0, "slope_horn".to_string(), false, 1e-4),
            (1, "aspect_horn".to_string(), true, 1e-4),
        ];
        for (k, r) in radii.iter().enumerate() {
            v.push((2 + 2 * k, format!("tpi_r{r}m"), false, 1e-4));
            v.push((3 + 2 * k, format!("roughness_r{r}m"), false, 1e-4));
        }
        v
    };
    for (idx, name, angle, tol) in checks {
        let tally = compare(&out[idx], &want(&name), angle, tol);
        eprintln!(
            "{name}: {} cells compared, max |error| {:.3e} (tolerance {tol:e}), {} NaN mismatches",
            tally.compared, tally.max_err, tally.nan_mismatch
        );
        assert!(
            tally.compared > rows * cols / 2,
            "{name}: too few cells compared"
        );
        assert_eq!(tally.nan_mismatch, 0, "{name}: nodata patterns differ");
    }
}

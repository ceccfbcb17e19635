//! DSM storage precision through a whole build: a float64 DSM keeps its precision until the
//! float32 output, a float32 DSM gets its curvature noise floor recorded (and a warning
//! when it dominates), and the memory plan counts an f64 block at 8 bytes a cell.

mod util;

use std::path::Path;

use ndarray::Array2;
use terrastack::raster::geotiff::{write_geotiff, GeoTiffReader, WriteOptions};
use terrastack::raster::RasterSource;
use terrastack::stack::plan::StackPlan;
use terrastack::stack::{Recipe, RecipeFlags};
use terrastack::{Grid, Window};
use util::*;

const R: f64 = 37.0;
const H: f64 = 0.05;
const N: usize = 121;
const BASE: f64 = 1500.0;

/// Sphere cap z = √(R² − x² − y²) + 1500 m (R = 37 m), centred on the grid, at 5 cm cells
/// (closed form, docs/methods.md), and its exact mean curvature 1/R everywhere.
fn cap() -> Array2<f64> {
    let c = (N as f64 - 1.0) / 2.0;
    Array2::from_shape_fn((N, N), |(i, j)| {
        let (x, y) = ((j as f64 - c) * H, -(i as f64 - c) * H);
        BASE + (R * R - x * x - y * y).sqrt()
    })
}

fn write<T: terrastack::raster::geotiff::TiffSample>(path: &Path, grid: &Grid, z: &Array2<T>) {
    write_geotiff(
        path,
        grid,
        &[z.view()],
        &["elevation"],
        &WriteOptions::default(),
    )
    .unwrap();
}

fn band(dir: &Path, k: usize) -> Array2<f32> {
    let r = GeoTiffReader::open(&dir.join("stack.tif")).unwrap();
    let g = r.grid().clone();
    r.read_window(k, Window::full(&g)).unwrap()
}

fn json(dir: &Path) -> serde_json::Value {
    read_json(&dir.join("stack.json"))
}

#[test]
fn float64_dsm_keeps_its_precision_through_the_curvatures() {
    // The same sphere cap 1500 m up stored as float64 and as float32. Mean curvature from
    // the f64 DSM is within the Evans–Young truncation error of 1/R (far below 1e-5 1/m
    // at 5 cm cells) everywhere; from the f32 DSM the storage noise floor
    // (0.408·2⁻¹³/0.05² = 2.0e-2 1/m) dominates, and stack.json says so.
    let dir = tempdir();
    let grid = utm_grid(N, N, H);
    let z = cap();
    let (p64, p32) = (dir.path().join("dsm64.tif"), dir.path().join("dsm32.tif"));
    write(&p64, &grid, &z);
    write(&p32, &grid, &z.mapv(|v| v as f32));
    let (o64, o32) = (dir.path().join("s64"), dir.path().join("s32"));
    for (dsm, out) in [(&p64, &o64), (&p32, &o32)] {
        let o = run(&[
            "build",
            "--dsm",
            dsm.to_str().unwrap(),
            "--features",
            "mean_curvature",
            "--out",
            out.to_str().unwrap(),
        ]);
        assert!(o.status.success(), "{}", stderr(&o));
        if dsm == &p32 {
            let e = stderr(&o);
            assert!(e.contains("warning") && e.contains("noise floor"), "{e}");
            assert!(e.contains("float64"), "the fix names a float64 DSM: {e}");
        } else {
            assert!(!stderr(&o).contains("warning"), "{}", stderr(&o));
        }
    }
    let err = |a: &Array2<f32>| {
        a.iter()
            .filter(|v| v.is_finite())
            .map(|v| (*v as f64 - 1.0 / R).abs())
            .fold(0.0, f64::max)
    };
    let (e64, e32) = (err(&band(&o64, 1)), err(&band(&o32, 1)));
    assert!(e64 < 1e-5, "f64 DSM: max error {e64:e}");
    assert!(e32 > 1e-3, "f32 DSM: max error {e32:e}");
    let prec64 = &json(&o64)["bands"][0]["precision"];
    let prec32 = &json(&o32)["bands"][0]["precision"];
    assert_eq!(prec64["dsm_sample_type"], "float64");
    assert_eq!(prec32["dsm_sample_type"], "float32");
    let floor32 = prec32["noise_floor_per_m"].as_f64().unwrap();
    // 0.408 · 2⁻¹³ m / (0.05 m)² (terrain::precision: √2·u/(√12·h²)).
    assert!((floor32 / (0.408248 * 2f64.powi(-13) / (H * H)) - 1.0).abs() < 1e-4);
    assert!(prec64["noise_floor_per_m"].as_f64().unwrap() < 1e-8 * floor32);
    // f64 spacing at 1500 m is 2⁻⁴² m against f32's 2⁻¹³ m: a ratio of 2⁻²⁹ = 1.9e-9.
    assert!(prec32["noise_floor_share_of_std"].as_f64().unwrap() > 0.1);
}

#[test]
fn directional_curvature_bands_record_their_undefined_rule() {
    let dir = tempdir();
    let grid = utm_grid(40, 40, 0.5);
    let dsm = dir.path().join("dsm.tif");
    write_dsm(&dsm, &grid, &surface(&grid));
    let out = dir.path().join("s");
    let o = run(&[
        "build",
        "--dsm",
        dsm.to_str().unwrap(),
        "--features",
        "curvature",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    let j = json(&out);
    for b in j["bands"].as_array().unwrap() {
        let directional = [
            "profile_curvature",
            "plan_curvature",
            "tangential_curvature",
        ]
        .contains(&b["feature"].as_str().unwrap());
        assert_eq!(
            b.get("undefined_where").is_some(),
            directional,
            "{}",
            b["name"]
        );
        assert!(b["precision"]["noise_floor_per_m"].as_f64().unwrap() > 0.0);
    }
}

#[test]
fn memory_plan_counts_a_float64_block_twice() {
    // One padded DSM cell costs 4 bytes as f32 and 8 as f64 (terrain::DsmSample): the
    // plans of the same DSM in both types differ by exactly 4 bytes per padded cell.
    let dir = tempdir();
    let grid = utm_grid(N, N, H);
    let z = cap();
    let (p64, p32) = (dir.path().join("a64.tif"), dir.path().join("a32.tif"));
    write(&p64, &grid, &z);
    write(&p32, &grid, &z.mapv(|v| v as f32));
    let plan = |p: &Path| {
        let flags = RecipeFlags {
            dsm: Some(p.to_path_buf()),
            features: Some(vec!["slope".into()]),
            ..RecipeFlags::default()
        };
        StackPlan::new(Recipe::resolve(None, &flags).unwrap(), None).unwrap()
    };
    let (a, b) = (plan(&p64), plan(&p32));
    assert!(a.dsm_reads_f64() && !b.dsm_reads_f64());
    let padded = ((256 + 2 * a.halo) as u64).pow(2);
    assert_eq!(a.block_bytes(256) - b.block_bytes(256), 4 * padded);
}

//! The ground bands (`dtm`, `height`, `ground`, `ground_distance`, `WORD@dtm`) end to end:
//! through the binary on a closed-form DSM, and block independence through the library.

mod util;

use ndarray::Array2;
use terrastack::grid::Grid;
use terrastack::raster;
use terrastack::stack::{self, BuildOptions, Progress, Recipe, RecipeFlags};
use util::*;

/// Ground plane z = 200 + 0.05x + 0.02y (x east, y north, metres) on `grid`, carrying a
/// flat-roofed box 3.5 m high over rows 40..56 and columns 50..74 (8 m x 12 m at 0.5 m).
fn plane_with_box(grid: &Grid) -> (Array2<f32>, Array2<f64>) {
    let h = grid.res_x();
    let ground = Array2::from_shape_fn((grid.height, grid.width), |(r, c)| {
        let x = (c as f64 + 0.5) * h;
        let y = -(r as f64 + 0.5) * h;
        200.0 + 0.05 * x + 0.02 * y
    });
    let dsm = Array2::from_shape_fn(ground.dim(), |(r, c)| {
        let lift = if (40..56).contains(&r) && (50..74).contains(&c) {
            3.5
        } else {
            0.0
        };
        (ground[[r, c]] + lift) as f32
    });
    (dsm, ground)
}

fn band(path: &std::path::Path, b: usize) -> Array2<f32> {
    let src = raster::open(path).unwrap();
    src.read_window(b, terrastack::Window::full(src.grid()))
        .unwrap()
}

#[test]
fn ground_bands_through_the_command_line() {
    let tmp = tempdir();
    let grid = utm_grid(160, 120, 0.5);
    let (dsm, ground) = plane_with_box(&grid);
    write_dsm(&tmp.path().join("dsm.tif"), &grid, &dsm);
    let out = tmp.path().join("out");
    let o = run(&[
        "build",
        "--dsm",
        &p(tmp.path(), "dsm.tif"),
        "--features",
        "dtm,height,ground,ground_distance,slope@dtm,slope",
        "--ground-max-object",
        "14",
        "--out",
        &out.to_string_lossy(),
        "--quiet",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    let meta: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("stack.json")).unwrap()).unwrap();
    let names: Vec<&str> = meta["bands"]
        .as_array()
        .unwrap()
        .iter()
        .map(|b| b["name"].as_str().unwrap())
        .collect();
    assert_eq!(
        names,
        [
            "dtm",
            "height",
            "ground",
            "ground_distance",
            "slope_horn_dtm",
            "slope_horn"
        ]
    );
    let record = &meta["bands"][0]["ground_filter"];
    assert_eq!(record["max_object_m"], 14.0);
    assert_eq!(record["reach_m"], 14.0);
    assert_eq!(record["window"], "square");
    assert_eq!(meta["bands"][4]["source"], "dtm");
    assert_eq!(meta["parameters"]["ground"]["max_object_m"], 14.0);
    assert_eq!(meta["parameters"]["ground"]["slope"], 0.15);

    let tif = out.join("stack.tif");
    let (dtm, height, mask, dist, slope_dtm, slope) = (
        band(&tif, 1),
        band(&tif, 2),
        band(&tif, 3),
        band(&tif, 4),
        band(&tif, 5),
        band(&tif, 6),
    );
    // Closed form: the line-pair interpolation is exact on a plane, so under the box the
    // ground is the plane and the height 3.5 m (to f32 rounding at 200 m: 1.5e-5 m).
    for r in 10..110 {
        for c in 10..150 {
            let inside = (40..56).contains(&r) && (50..74).contains(&c);
            assert!(
                (dtm[[r, c]] as f64 - ground[[r, c]]).abs() < 1e-4,
                "{r},{c}"
            );
            let want = if inside { 3.5 } else { 0.0 };
            assert!((height[[r, c]] as f64 - want).abs() < 1e-4, "{r},{c}");
            assert_eq!(mask[[r, c]], if inside { 0.0 } else { 1.0 }, "{r},{c}");
        }
    }
    // The box's centre (row 47/48, column 61/62) lies 4 m from the nearest ground cell.
    assert!((dist[[47, 61]] - 4.0).abs() < 1e-6);
    assert_eq!(dist[[20, 20]], 0.0);
    // Slope of the ground: atan(√(0.05² + 0.02²)) = 3.0852° everywhere (worked), also at
    // the box's edge, where the DSM's slope is steep.
    let want = (0.05f64.hypot(0.02)).atan().to_degrees();
    assert!((slope_dtm[[40, 60]] as f64 - want).abs() < 1e-3);
    assert!(slope[[40, 60]] > 45.0);
}

#[test]
fn ground_bands_do_not_depend_on_the_block_size() {
    let tmp = tempdir();
    let grid = utm_grid(700, 600, 0.25);
    let mut dsm = surface(&grid);
    // Boxes and a crown scattered across block edges (blocks of 512 cells, against one block).
    for &(r0, c0, hgt) in &[(240, 240, 4.0f32), (500, 100, 2.5), (100, 490, 6.0)] {
        for r in r0..r0 + 30 {
            for c in c0..c0 + 40 {
                dsm[[r, c]] += hgt;
            }
        }
    }
    for r in 0..600 {
        for c in 0..700 {
            let d2 = ((r as f64 - 380.0).powi(2) + (c as f64 - 520.0).powi(2)) * 0.0625;
            dsm[[r, c]] += (8.0 * (1.0 - d2 / 16.0)).max(0.0) as f32;
        }
    }
    write_dsm(&tmp.path().join("dsm.tif"), &grid, &dsm);
    let flags = RecipeFlags {
        dsm: Some(tmp.path().join("dsm.tif")),
        features: Some(
            ["dtm", "height", "ground", "ground_distance", "tpi@2@dtm"]
                .map(String::from)
                .to_vec(),
        ),
        ground: terrastack::ground::settings::GroundSection {
            max_object_m: Some(12.0),
            ..Default::default()
        },
        ..Default::default()
    };
    let build = |name: &str, block: usize, memory: u64, threads: usize| {
        let mut o = BuildOptions::new(tmp.path().join(name));
        o.block_size = Some(block);
        o.memory_bytes = memory;
        o.threads = Some(threads);
        o.progress = Progress::Quiet;
        stack::build(Recipe::resolve(None, &flags).unwrap(), &o).unwrap()
    };
    let a = build("a", 512, 2 << 30, 1);
    let b = build("b", 1024, 1 << 30, 2);
    assert_eq!((a.block_size, b.block_size), (512, 1024));
    assert!(a.blocks > b.blocks);
    assert_eq!(
        band_bits(&tmp.path().join("a/stack.tif")),
        band_bits(&tmp.path().join("b/stack.tif"))
    );
}

#[test]
fn ground_flags_are_checked() {
    let tmp = tempdir();
    let grid = utm_grid(60, 40, 0.5);
    write_dsm(&tmp.path().join("dsm.tif"), &grid, &surface(&grid));
    let dsm = p(tmp.path(), "dsm.tif");
    let out = p(tmp.path(), "out");
    // NDVI guidance without red and NIR bands.
    let o = run(&[
        "build",
        "--dsm",
        &dsm,
        "--features",
        "height",
        "--ground-ndvi",
        "--out",
        &out,
    ]);
    assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
    assert!(stderr(&o).contains("`red`"), "{}", stderr(&o));
    // A negative slope threshold.
    let o = run(&[
        "build",
        "--dsm",
        &dsm,
        "--features",
        "dtm",
        "--ground-slope=-1",
        "--out",
        &out,
    ]);
    assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
    assert!(stderr(&o).contains("slope threshold"), "{}", stderr(&o));
    assert!(!tmp.path().join("out/stack.tif").exists());
}

#[test]
fn ndvi_guidance_reads_the_orthomosaic() {
    let tmp = tempdir();
    let grid = utm_grid(80, 60, 0.5);
    write_dsm(&tmp.path().join("dsm.tif"), &grid, &surface(&grid));
    write_ortho(&tmp.path().join("ortho.tif"), &grid);
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
        "--features",
        "height,ground",
        "--ground-ndvi-max",
        "0.3",
        "--ground-max-object",
        "8",
        "--out",
        &out.to_string_lossy(),
        "--quiet",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    let meta: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("stack.json")).unwrap()).unwrap();
    assert_eq!(meta["bands"][0]["ground_filter"]["ndvi_guidance_max"], 0.3);
    assert_eq!(meta["bands"].as_array().unwrap().len(), 2);
}

#[test]
fn the_catalogue_lists_the_ground_words() {
    let o = run(&["features", "--json"]);
    assert!(o.status.success());
    let rows: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    let ground: Vec<&str> = rows
        .as_array()
        .unwrap()
        .iter()
        .filter(|r| r["kind"] == "ground")
        .map(|r| r["word"].as_str().unwrap())
        .collect();
    assert_eq!(
        ground,
        ["dtm", "height", "ground", "ground_distance", "WORD@dtm"]
    );
    let help = run(&["build", "--help"]);
    let text = String::from_utf8_lossy(&help.stdout);
    assert!(text.contains("--ground-max-object") && text.contains("slope@dtm"));
}

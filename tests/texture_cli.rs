//! The texture bands (`glcm@R@SOURCE`, `stddev@R@SOURCE`) end to end: through the binary
//! with their records and flag checks, and block independence through the library (the
//! kernels themselves are checked against scikit-image by `scripts/ci/texture.sh`).

mod util;

use ndarray::Array2;
use terrastack::grid::{CellSizes, Grid};
use terrastack::raster::geotiff::{write_geotiff, WriteOptions};
use terrastack::stack::{self, BuildOptions, Progress, Recipe, RecipeFlags};
use terrastack::terrain::WindowShape;
use terrastack::texture::first_order::window_std;
use terrastack::texture::glcm::{glcm_features, GlcmWindow, Quantiser};
use util::*;

/// A 5-band uint16 orthomosaic (reflectance × 10000) with texture of several scales
/// (seeded noise on smooth fields) and a nodata patch across a block edge.
fn write_textured_ortho(path: &std::path::Path, grid: &Grid) {
    let mut rng = terrastack::random::SplitMix64::new(3);
    let bands: Vec<Array2<u16>> = (0..5)
        .map(|b| {
            Array2::from_shape_fn((grid.height, grid.width), |(r, c)| {
                if (500..530).contains(&r) && (40..90).contains(&c) {
                    return 0;
                }
                let v = 1500.0
                    + 500.0 * b as f64
                    + 400.0 * ((r as f64 * 0.07).sin() * (c as f64 * 0.05).cos())
                    + 600.0 * rng.next_f64();
                v as u16
            })
        })
        .collect();
    let views: Vec<_> = bands.iter().map(|b| b.view()).collect();
    let o = WriteOptions {
        sample_type: terrastack::raster::SampleType::U16,
        ..WriteOptions::default()
    };
    write_geotiff(
        path,
        &grid.clone().with_nodata(Some(0.0)),
        &views,
        &["blue", "green", "red", "rededge", "nir"],
        &o,
    )
    .unwrap();
}

fn flags(tmp: &std::path::Path, features: &[&str]) -> RecipeFlags {
    RecipeFlags {
        dsm: Some(tmp.join("dsm.tif")),
        ortho: Some(tmp.join("ortho.tif")),
        bands: Some("blue=1,green=2,red=3,rededge=4,nir=5".into()),
        reflectance_scale: Some("1/10000".into()),
        features: Some(features.iter().map(|s| s.to_string()).collect()),
        ..Default::default()
    }
}

#[test]
fn texture_bands_do_not_depend_on_the_block_and_equal_the_kernels_on_the_whole_raster() {
    let tmp = tempdir();
    let grid = utm_grid(700, 600, 0.25);
    write_dsm(&tmp.path().join("dsm.tif"), &grid, &surface(&grid));
    write_textured_ortho(&tmp.path().join("ortho.tif"), &grid);
    // A large terrain window too: the reflectance is read with the texture's halo only.
    let f = flags(
        tmp.path(),
        &[
            "reflectance",
            "glcm@1@nir",
            "stddev@2@nir",
            "glcm_entropy@0.75@ndvi",
            "tpi@20",
        ],
    );
    let build = |name: &str, block: usize, threads: usize| {
        let mut o = BuildOptions::new(tmp.path().join(name));
        o.block_size = Some(block);
        o.threads = Some(threads);
        o.progress = Progress::Quiet;
        stack::build(Recipe::resolve(None, &f).unwrap(), &o).unwrap()
    };
    let a = build("a", 512, 1);
    let b = build("b", 1024, 2);
    assert!(a.blocks > b.blocks);
    let bits = band_bits(&tmp.path().join("a/stack.tif"));
    assert_eq!(bits, band_bits(&tmp.path().join("b/stack.tif")));

    let names: Vec<&str> = a.metadata.bands.iter().map(|b| b.name.as_str()).collect();
    assert_eq!(
        &names[5..],
        [
            "glcm_contrast_r1m_nir",
            "glcm_homogeneity_r1m_nir",
            "glcm_entropy_r1m_nir",
            "glcm_correlation_r1m_nir",
            "stddev_r2m_nir",
            "glcm_entropy_r0p75m_ndvi",
            "tpi_r20m"
        ]
    );
    // The stack's bands against the kernels run once over the whole raster's reflectance
    // (as the stack holds it): the same bits, so no block edge shows.
    let tif = tmp.path().join("a/stack.tif");
    let nir = read_band(&tif, 5);
    let red = read_band(&tif, 3);
    let q = Quantiser::new(0.0, 1.0, 32).unwrap();
    let whole = glcm_features(
        q.quantise(nir.view()).view(),
        32,
        GlcmWindow {
            kx: 4,
            ky: 4,
            distance: 1,
        },
        0..600,
        0..700,
    );
    for (k, want) in whole.iter().enumerate() {
        let got = read_band(&tif, 6 + k);
        let same = got
            .iter()
            .zip(want.iter())
            .all(|(g, w)| g.to_bits() == (*w as f32).to_bits());
        assert!(
            same,
            "glcm feature {k} differs from the whole-raster kernel"
        );
    }
    let sizes = CellSizes::uniform(0.25, 0.25, 600);
    let std = window_std(
        nir.view(),
        &sizes,
        WindowShape::Square,
        2.0,
        0,
        (600, 700),
        0.75,
    )
    .unwrap();
    let got = read_band(&tif, 10);
    assert!(got
        .iter()
        .zip(std.iter())
        .all(|(g, w)| g.to_bits() == (*w as f32).to_bits()));
    // NDVI from the stack's reflectance, quantised over its valid range −1..1.
    let ndvi = Array2::from_shape_fn(nir.dim(), |(r, c)| {
        let (n, rd) = (nir[[r, c]] as f64, red[[r, c]] as f64);
        ((n - rd) / (n + rd)) as f32
    });
    let qn = Quantiser::new(-1.0, 1.0, 32).unwrap();
    let e = &glcm_features(
        qn.quantise(ndvi.view()).view(),
        32,
        GlcmWindow {
            kx: 3,
            ky: 3,
            distance: 1,
        },
        0..600,
        0..700,
    )[2];
    let got = read_band(&tif, 11);
    let differing = got
        .iter()
        .zip(e.iter())
        .filter(|(g, w)| g.to_bits() != (**w as f32).to_bits())
        .count();
    // The stack computes NDVI in f32 from the same reflectance; a value on a level
    // boundary may fall either side, so a few cells may differ.
    assert!(differing < 60, "{differing} cells differ");
    // The nodata patch is nodata in every texture band at its centre.
    for band in 6..=11 {
        assert!(read_band(&tif, band)[[515, 65]].is_nan());
    }
}

#[test]
fn texture_records_and_flags_through_the_command_line() {
    let tmp = tempdir();
    let grid = utm_grid(90, 70, 0.5);
    write_dsm(&tmp.path().join("dsm.tif"), &grid, &surface(&grid));
    write_ortho(&tmp.path().join("ortho.tif"), &grid);
    let base = |features: &str, extra: &[&str], out: &str| {
        let mut args = vec![
            "build".to_string(),
            "--dsm".into(),
            p(tmp.path(), "dsm.tif"),
            "--ortho".into(),
            p(tmp.path(), "ortho.tif"),
            "--bands".into(),
            "blue=1,green=2,red=3,rededge=4,nir=5".into(),
            "--reflectance-scale".into(),
            "1/10000".into(),
            "--index".into(),
            "ratio=nir/red".into(),
            "--features".into(),
            features.into(),
            "--out".into(),
            p(tmp.path(), out),
            "--quiet".into(),
        ];
        args.extend(extra.iter().map(|s| s.to_string()));
        let refs: Vec<&str> = args.iter().map(String::as_str).collect();
        run(&refs)
    };
    let o = base(
        "glcm_contrast@1.5@ratio,stddev@red",
        &[
            "--texture-range",
            "ratio=0..8",
            "--texture-levels",
            "16",
            "--texture-distance",
            "2",
            "--scales",
            "1,2",
        ],
        "ok",
    );
    assert!(o.status.success(), "{}", stderr(&o));
    let meta: serde_json::Value = read_json(&tmp.path().join("ok/stack.json"));
    let c = sidecar_band(&meta, "glcm_contrast_r1p5m_ratio");
    assert_eq!(c["feature"], "glcm_contrast");
    assert_eq!(c["source"], "ratio");
    assert_eq!(c["units"], "levels^2");
    assert_eq!(c["window_px"], 7);
    assert_eq!(c["texture"]["grey_levels"], 16);
    assert_eq!(c["texture"]["pair_distance_px"], 2);
    assert_eq!(
        c["texture"]["quantisation_range"],
        serde_json::json!([0.0, 8.0])
    );
    let s = sidecar_band(&meta, "stddev_r2m_red");
    assert_eq!(s["method"], "window_std_square");
    assert!(sidecar_band(&meta, "stddev_r1m_red").is_object());
    assert_eq!(meta["parameters"]["texture"]["levels"], 16);

    // Refusals: exit 2, the fix named, nothing written.
    for (features, extra, says) in [
        ("glcm@1.5@ratio", &[][..], "--texture-range ratio=LOW..HIGH"),
        ("glcm@1.5@blu", &[][..], "neither a mapped band"),
        ("glcm", &[][..], "does not name its source"),
        ("glcm@0.5@nir", &[][..], "at least 1.5 cells"),
        ("glcm@1.5@nir", &["--texture-levels", "300"][..], "2 to 256"),
        (
            "glcm@1.5@nir",
            &["--texture-range", "nir=1..0"][..],
            "LOW < HIGH",
        ),
    ] {
        let o = base(features, extra, "bad");
        assert_eq!(o.status.code(), Some(2), "{features}: {}", stderr(&o));
        assert!(stderr(&o).contains(says), "{features}: {}", stderr(&o));
        assert!(!tmp.path().join("bad/stack.tif").exists());
    }
}

//! Georeferencing end to end: stored orientations, transforms that do not define cells,
//! projected CRSs whose units are not ground metres, user-defined CRSs and feet, poles.
//! Every test writes its own small GeoTIFFs.

mod util;

use std::fs;
use std::path::Path;

use ndarray::Array2;
use terrastack::grid::{metres_per_degree, Crs, CrsKind, Grid, FOOT_M, WGS84_A};
use terrastack::raster::geotiff::{write_geotiff, TiffSample, WriteOptions};
use terrastack::raster::orientation::Orientation;
use terrastack::raster::{self, SampleType};
use terrastack::stack::{self, BuildOptions, Progress, Recipe, RecipeFlags};
use terrastack::Window;
use util::*;

/// The four ways a file can store the same cells.
fn orientations() -> [Orientation; 4] {
    let o = |w, n| Orientation {
        columns_run_west: w,
        rows_run_north: n,
    };
    [
        o(false, false),
        o(false, true),
        o(true, false),
        o(true, true),
    ]
}

/// Write `bands` (north-up, on the north-up `grid`) stored in orientation `o`: the same
/// cells, the transform describing them exactly.
fn write_oriented<T: TiffSample>(
    path: &Path,
    grid: &Grid,
    o: Orientation,
    bands: &[Array2<T>],
    names: &[&str],
    sample_type: SampleType,
) {
    let (w, h) = (grid.width, grid.height);
    let mut t = grid.transform;
    if o.columns_run_west {
        t[0] += w as f64 * t[1];
        t[1] = -t[1];
    }
    if o.rows_run_north {
        t[3] += h as f64 * t[5];
        t[5] = -t[5];
    }
    let stored_grid = Grid::new(w, h, t, grid.crs.clone())
        .unwrap()
        .with_nodata(grid.nodata);
    let stored: Vec<Array2<T>> = bands
        .iter()
        .map(|b| {
            Array2::from_shape_fn((h, w), |(r, c)| {
                let nr = if o.rows_run_north { h - 1 - r } else { r };
                let nc = if o.columns_run_west { w - 1 - c } else { c };
                b[[nr, nc]]
            })
        })
        .collect();
    let views: Vec<_> = stored.iter().map(|b| b.view()).collect();
    let opts = WriteOptions {
        sample_type,
        ..WriteOptions::default()
    };
    write_geotiff(path, &stored_grid, &views, names, &opts).unwrap();
}

/// Every terrain feature word, at two scales, and every spectral layer.
fn all_features() -> Vec<String> {
    [
        "elevation",
        "slope",
        "slope:zt",
        "slope:quadratic",
        "aspect",
        "northness",
        "eastness",
        "curvature",
        "curvature:zt",
        "tpi",
        "dev",
        "roughness",
        "roughness_detrended",
        "vrm",
        "relative_elevation",
        "local_relief",
        "tri",
        "reflectance",
        "indices",
    ]
    .iter()
    .map(|s| s.to_string())
    .collect()
}

fn build_lib(
    dsm: &Path,
    ortho: Option<&Path>,
    features: Vec<String>,
    out: &Path,
) -> stack::BuildReport {
    let flags = RecipeFlags {
        dsm: Some(dsm.into()),
        ortho: ortho.map(|p| p.into()),
        bands: ortho.map(|_| "blue=1,green=2,red=3,rededge=4,nir=5".into()),
        reflectance_scale: ortho.map(|_| "1e-4".into()),
        features: Some(features),
        scales_m: Some(vec![1.0, 2.5]),
        ..Default::default()
    };
    let mut o = BuildOptions::new(out);
    o.progress = Progress::Quiet;
    stack::build(Recipe::resolve(None, &flags).unwrap(), &o).unwrap()
}

fn ortho_bands(grid: &Grid) -> Vec<Array2<u16>> {
    (0..5)
        .map(|b| {
            Array2::from_shape_fn((grid.height, grid.width), |(r, c)| {
                (1500.0
                    + 600.0 * b as f64
                    + 400.0 * ((r as f64 * 0.11 + b as f64).sin() + (c as f64 * 0.07).cos()))
                    as u16
            })
        })
        .collect()
}

#[test]
fn four_orientations_give_bit_identical_layers() {
    // The same terrain and orthomosaic stored north-up, south-up, east-to-west and both:
    // every layer of every feature must have the same bits once read on the north-up grid
    // (the four-orientation test), and so must the sample table drawn from it.
    let tmp = tempdir();
    let grid = utm_grid(64, 52, 0.25).with_nodata(Some(-9999.0));
    let mut dsm = surface(&grid);
    dsm[[10, 20]] = -9999.0; // a hole, so nodata handling is flipped too
    let ortho = ortho_bands(&grid).into_iter().collect::<Vec<_>>();
    let ortho_grid = grid.clone().with_nodata(Some(0.0));
    let samples = tmp.path().join("samples.csv");
    fs::write(
        &samples,
        "x,y,class,radius_m\n500003.1,4999997.2,meadow,0.6\n500012.4,4999989.9,reed,0.8\n500008.0,4999993.0,meadow,0.4\n",
    )
    .unwrap();
    let mut reference: Option<(Vec<Vec<u32>>, [f64; 6], String)> = None;
    for (i, o) in orientations().into_iter().enumerate() {
        let dsm_path = tmp.path().join(format!("dsm{i}.tif"));
        let ortho_path = tmp.path().join(format!("ortho{i}.tif"));
        write_oriented(
            &dsm_path,
            &grid,
            o,
            std::slice::from_ref(&dsm),
            &["elevation"],
            SampleType::F32,
        );
        let names = ["blue", "green", "red", "rededge", "nir"];
        write_oriented(&ortho_path, &ortho_grid, o, &ortho, &names, SampleType::U16);
        // The reader reports the north-up grid whatever the storage.
        let src = raster::open(&dsm_path).unwrap();
        assert_eq!(src.grid().transform, grid.transform, "{}", o.describe());
        let out = tmp.path().join(format!("stack{i}"));
        let report = build_lib(&dsm_path, Some(&ortho_path), all_features(), &out);
        assert!(
            report.metadata.bands.len() > 40,
            "{}",
            report.metadata.bands.len()
        );
        let layers = band_bits(&out.join("stack.tif"));
        let transform = raster::open(&out.join("stack.tif"))
            .unwrap()
            .grid()
            .transform;
        let table = out.join("train.csv");
        let s = run(&[
            "sample",
            "--stack",
            out.to_str().unwrap(),
            "--samples",
            samples.to_str().unwrap(),
            "--out",
            table.to_str().unwrap(),
        ]);
        assert!(s.status.success(), "{}", stderr(&s));
        let table = fs::read_to_string(&table).unwrap();
        match &reference {
            None => reference = Some((layers, transform, table)),
            Some((r, t, tab)) => {
                assert_eq!(&transform, t, "{}", o.describe());
                for (b, (x, y)) in layers.iter().zip(r.iter()).enumerate() {
                    assert!(
                        x == y,
                        "{}: band {} ({}) differs from the north-up stack",
                        o.describe(),
                        b + 1,
                        report.metadata.bands[b].name
                    );
                }
                assert_eq!(&table, tab, "{}: sample table differs", o.describe());
            }
        }
    }
}

#[test]
fn south_up_plane_has_its_true_aspect() {
    // The plane z = 0.3x + 0.4y (x east, y north, metres) stored south-up and east-to-west:
    // slope atan(0.5) = 26.5651°, aspect 216.8699°, northness cos(216.8699°) = −0.8,
    // eastness −0.6 (worked in docs/methods.md, "First derivatives"), not the mirrored 323.13°.
    let tmp = tempdir();
    let grid = utm_grid(20, 16, 0.5);
    let plane = Array2::from_shape_fn((16, 20), |(r, c)| {
        let (x, y) = grid.cell_centre(c as f64, r as f64);
        (0.3 * (x - 500_000.0) + 0.4 * (y - 5_000_000.0)) as f32 + 100.0
    });
    for o in orientations() {
        let path = tmp.path().join("dsm.tif");
        write_oriented(
            &path,
            &grid,
            o,
            std::slice::from_ref(&plane),
            &["elevation"],
            SampleType::F32,
        );
        let out = tmp.path().join("out");
        let _ = fs::remove_dir_all(&out);
        let features = ["slope", "aspect", "northness", "eastness"]
            .iter()
            .map(|s| s.to_string())
            .collect();
        build_lib(&path, None, features, &out);
        let src = raster::open(&out.join("stack.tif")).unwrap();
        let expect = [26.5651, 216.8699, -0.8, -0.6];
        for (b, e) in expect.iter().enumerate() {
            let v = src.read_window(b + 1, Window::new(8, 7, 1, 1)).unwrap()[[0, 0]] as f64;
            assert!(
                (v - e).abs() < 1e-3,
                "{} band {}: {v} vs {e}",
                o.describe(),
                b + 1
            );
        }
    }
}

/// A valid GeoTIFF DSM on `grid`, its bytes changed by `patch`.
fn patched_dsm(dir: &Path, grid: &Grid, patch: impl Fn(&mut Vec<u8>)) -> String {
    let path = dir.join("dsm.tif");
    write_dsm(&path, grid, &surface(grid));
    let mut bytes = fs::read(&path).unwrap();
    patch(&mut bytes);
    fs::write(&path, bytes).unwrap();
    path.to_string_lossy().into_owned()
}

/// Replace the first occurrence of `from` by `to` (same length).
fn replace(bytes: &mut [u8], from: &[u8], to: &[u8]) {
    let at = bytes
        .windows(from.len())
        .position(|w| w == from)
        .expect("pattern present in the file");
    bytes[at..at + to.len()].copy_from_slice(to);
}

/// Little-endian IFD entry start of `tag` with TIFF type DOUBLE (12).
fn entry(tag: u16) -> Vec<u8> {
    let mut v = tag.to_le_bytes().to_vec();
    v.extend_from_slice(&12u16.to_le_bytes());
    v
}

fn build_cli(dsm: &str, out: &str) -> std::process::Output {
    run(&[
        "build",
        "--dsm",
        dsm,
        "--features",
        "slope,tpi",
        "--scales",
        "1",
        "--out",
        out,
    ])
}

#[test]
fn tiepoint_without_pixel_scale_refused() {
    // ModelPixelScale (33550) renamed to an unknown private tag (33551): the file keeps
    // its CRS and tiepoint but no longer says how large a cell is.
    let tmp = tempdir();
    let grid = utm_grid(30, 20, 0.5);
    let dsm = patched_dsm(tmp.path(), &grid, |b| {
        replace(b, &entry(33550), &entry(33551))
    });
    let o = build_cli(&dsm, &p(tmp.path(), "out"));
    let e = stderr(&o);
    assert_eq!(o.status.code(), Some(1), "{e}");
    assert!(e.contains("no ModelPixelScale") && e.contains(&dsm), "{e}");
    assert!(!tmp.path().join("out/stack.tif").exists());
}

#[test]
fn crs_without_any_transform_refused() {
    // Both ModelPixelScale and ModelTiepoint (33922) hidden: GeoKeys alone.
    let tmp = tempdir();
    let grid = utm_grid(30, 20, 0.5);
    let dsm = patched_dsm(tmp.path(), &grid, |b| {
        replace(b, &entry(33550), &entry(33551));
        replace(b, &entry(33922), &entry(33923));
    });
    let o = build_cli(&dsm, &p(tmp.path(), "out"));
    let e = stderr(&o);
    assert_eq!(o.status.code(), Some(1), "{e}");
    assert!(e.contains("GeoKeys") && e.contains("not defined"), "{e}");
}

#[test]
fn zero_or_nan_pixel_scale_refused() {
    let tmp = tempdir();
    let grid = utm_grid(30, 20, 0.5);
    let scale: Vec<u8> = [0.5f64, 0.5, 0.0]
        .iter()
        .flat_map(|v| v.to_le_bytes())
        .collect();
    for (bad, word) in [
        ([0.5f64, 0.0, 0.0], "y cell size as 0"),
        ([f64::NAN, 0.5, 0.0], "x cell size as NaN"),
    ] {
        let to: Vec<u8> = bad.iter().flat_map(|v| v.to_le_bytes()).collect();
        let dsm = patched_dsm(tmp.path(), &grid, |b| replace(b, &scale, &to));
        let o = build_cli(&dsm, &p(tmp.path(), "out"));
        let e = stderr(&o);
        assert_eq!(o.status.code(), Some(1), "{e}");
        assert!(e.contains(word) && e.contains("ModelPixelScale"), "{e}");
    }
}

/// A DSM rising `rise` metres per cell eastwards on `grid`.
fn east_ramp(grid: &Grid, rise: f64) -> Array2<f32> {
    Array2::from_shape_fn((grid.height, grid.width), |(_, c)| {
        (100.0 + rise * c as f64) as f32
    })
}

/// Slope (degrees) at the centre of the stack built from `dsm`.
fn centre_slope(tmp: &Path, dsm: &Path) -> f64 {
    let out = tmp.join("slope_out");
    let _ = fs::remove_dir_all(&out);
    build_lib(dsm, None, vec!["slope".into()], &out);
    let src = raster::open(&out.join("stack.tif")).unwrap();
    let g = src.grid().clone();
    src.read_window(
        1,
        Window::new(g.width as i64 / 2, g.height as i64 / 2, 1, 1),
    )
    .unwrap()[[0, 0]] as f64
}

#[test]
fn web_mercator_slopes_use_ground_metres() {
    // A Web Mercator (EPSG:3857) DSM at the EPSG Guidance Note 7-2 example latitude,
    // 24°22'54.433" N (northing 2 800 000 m): a 1 m grid cell spans N(φ)·cos φ/a ground
    // metres east-west (the spherical formulas on WGS84 geodetic coordinates, Guidance
    // Note 7-2 §1.3.3.2), so a ramp of 0.5 m per cell has slope atan(0.5/that), not
    // atan(0.5) as if grid metres were ground metres.
    let tmp = tempdir();
    let grid = Grid::new(
        40,
        40,
        [-11_169_055.58, 1.0, 0.0, 2_800_020.0, 0.0, -1.0],
        Crs::from_epsg(3857),
    )
    .unwrap();
    let path = tmp.path().join("dsm.tif");
    write_dsm(&path, &grid, &east_ramp(&grid, 0.5));
    let lat = 24.0 + 22.0 / 60.0 + 54.433 / 3600.0;
    let (_, m_lon) = metres_per_degree(lat);
    let ground = m_lon / (WGS84_A * std::f64::consts::PI / 180.0);
    let expect = (0.5 / ground).atan().to_degrees();
    let got = centre_slope(tmp.path(), &path);
    assert!((got - expect).abs() < 2e-3, "{got} vs {expect}");
    assert!((got - 0.5f64.atan().to_degrees()).abs() > 1.0, "{got}");
}

#[test]
fn utm_far_outside_its_zone_refused() {
    // A UTM 33N grid 1000 km east of the central meridian: scale factor ≈ 1.0119.
    let tmp = tempdir();
    let grid = Grid::new(
        30,
        20,
        [1_500_000.0, 0.5, 0.0, 5e6, 0.0, -0.5],
        Crs::from_epsg(32633),
    )
    .unwrap();
    let path = tmp.path().join("dsm.tif");
    write_dsm(&path, &grid, &surface(&grid));
    let o = build_cli(path.to_str().unwrap(), &p(tmp.path(), "out"));
    let e = stderr(&o);
    assert_ne!(o.status.code(), Some(0), "{e}");
    assert!(
        e.contains("central meridian") && e.contains("reproject"),
        "{e}"
    );
}

/// A user-defined transverse Mercator CRS (no EPSG code) in `unit_m` metres per unit.
fn user_defined_crs(unit_m: f64) -> Crs {
    let mut crs = Crs::none();
    crs.kind = CrsKind::Projected;
    crs.linear_unit_m = Some(unit_m);
    crs.name = Some("river meadow site grid".into());
    // GeoKeys (OGC GeoTIFF 1.1 §7.4): base WGS 84, user-defined transverse Mercator
    // centred on 9° E with false easting 500 km and scale 0.9996.
    crs.definition = Some(
        "2048 s 4326\n3074 s 32767\n3075 s 1\n3080 d 9.0\n3082 d 500000.0\n3092 d 0.9996".into(),
    );
    crs
}

#[test]
fn user_defined_crs_in_metres_and_feet_builds() {
    // A ramp rising one ground metre per ground metre has slope 45° exactly, whether the
    // CRS is user-defined in metres, international feet or US survey feet, or EPSG:2227
    // (NAD83 / California zone 3, US survey feet): horizontal units are converted.
    let tmp = tempdir();
    let us_ft = 1200.0 / 3937.0;
    let mut epsg_feet = Crs::from_epsg(2227);
    epsg_feet.linear_unit_m = Some(us_ft);
    for (crs, unit) in [
        (user_defined_crs(1.0), 1.0),
        (user_defined_crs(FOOT_M), FOOT_M),
        (user_defined_crs(us_ft), us_ft),
        (epsg_feet, us_ft),
    ] {
        let grid = Grid::new(30, 24, [1000.0, 2.0, 0.0, 9000.0, 0.0, -2.0], crs).unwrap();
        let path = tmp.path().join("dsm.tif");
        write_dsm(&path, &grid, &east_ramp(&grid, 2.0 * unit));
        let got = centre_slope(tmp.path(), &path);
        assert!((got - 45.0).abs() < 1e-3, "{}: {got}", grid.crs.label());
        // The stack keeps the CRS's definition.
        let back = raster::open(&tmp.path().join("slope_out/stack.tif")).unwrap();
        assert!(back.grid().crs.same_as(&grid.crs), "{:?}", back.grid().crs);
    }
}

#[test]
fn invalid_unit_size_refused_with_its_own_message() {
    let tmp = tempdir();
    for u in [0.0, -0.3048] {
        let grid = Grid::new(
            30,
            24,
            [1000.0, 2.0, 0.0, 9000.0, 0.0, -2.0],
            user_defined_crs(u),
        )
        .unwrap();
        let path = tmp.path().join("dsm.tif");
        write_dsm(&path, &grid, &surface(&grid));
        let o = build_cli(path.to_str().unwrap(), &p(tmp.path(), "out"));
        let e = stderr(&o);
        assert_eq!(o.status.code(), Some(1), "{e}");
        assert!(
            e.contains("not a length") && !e.contains("target grid"),
            "{e}"
        );
    }
}

#[test]
fn geographic_grid_reaching_a_pole_refused() {
    // A 0.01° grid whose first row of cell centres lies at 90° N: the message is about the
    // grid, not the memory budget.
    let tmp = tempdir();
    let d = 0.01;
    let grid = Grid::new(
        30,
        20,
        [10.0, d, 0.0, 90.0 + d / 2.0, 0.0, -d],
        Crs::from_epsg(4326),
    )
    .unwrap();
    let path = tmp.path().join("dsm.tif");
    write_dsm(&path, &grid, &surface(&grid));
    let o = build_cli(path.to_str().unwrap(), &p(tmp.path(), "out"));
    let e = stderr(&o);
    assert_ne!(o.status.code(), Some(0), "{e}");
    assert!(e.contains("pole") && !e.contains("memory"), "{e}");
}

#[cfg(feature = "gdal")]
#[test]
fn gdal_source_reads_flipped_files_as_north_up() {
    // The GDAL backend normalises orientation as the GeoTIFF reader does: the same grid
    // and the same values for every stored orientation.
    use terrastack::raster::gdal::GdalSource;
    use terrastack::raster::RasterSource;
    let tmp = tempdir();
    let grid = utm_grid(23, 17, 0.5).with_nodata(Some(-9999.0));
    let data = surface(&grid);
    for o in orientations() {
        let path = tmp.path().join("dsm.tif");
        write_oriented(
            &path,
            &grid,
            o,
            std::slice::from_ref(&data),
            &["elevation"],
            SampleType::F32,
        );
        let g = GdalSource::open(&path).unwrap();
        assert_eq!(g.grid().transform, grid.transform, "{}", o.describe());
        let w = Window::new(-2, 3, 12, 20);
        let a = g.read_window(1, w).unwrap();
        let b = raster::geotiff::GeoTiffReader::open(&path)
            .unwrap()
            .read_window(1, w)
            .unwrap();
        assert_eq!(
            a.iter().map(|v| v.to_bits()).collect::<Vec<_>>(),
            b.iter().map(|v| v.to_bits()).collect::<Vec<_>>(),
            "{}",
            o.describe()
        );
    }
}

#[test]
fn web_mercator_sample_radius_is_in_ground_metres() {
    // A sample circle of 3 ground metres on a Web Mercator stack at 24.38° N covers the
    // cells whose centres lie within 3 m on the ground, the cells being N(φ)·cos φ/a ≈
    // 0.911 ground metres wide and M(φ)·cos φ/a high (Guidance Note 7-2 §1.3.3.2): more
    // cells than the 29 a 1 m reading of grid metres would give.
    let tmp = tempdir();
    let grid = Grid::new(
        40,
        40,
        [-11_169_055.5, 1.0, 0.0, 2_800_020.0, 0.0, -1.0],
        Crs::from_epsg(3857),
    )
    .unwrap();
    let dsm = tmp.path().join("dsm.tif");
    write_dsm(&dsm, &grid, &east_ramp(&grid, 0.1));
    let out = tmp.path().join("stack");
    build_lib(&dsm, None, vec!["elevation".into()], &out);
    let (x, y) = grid.cell_centre(20.0, 20.0);
    let samples = tmp.path().join("s.csv");
    fs::write(&samples, format!("x,y,class,radius_m\n{x},{y},meadow,3\n")).unwrap();
    let table = tmp.path().join("t.csv");
    let o = run(&[
        "sample",
        "--stack",
        out.to_str().unwrap(),
        "--samples",
        samples.to_str().unwrap(),
        "--out",
        table.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    let rows = fs::read_to_string(&table).unwrap().lines().count() - 1;
    let a_deg = WGS84_A * std::f64::consts::PI / 180.0;
    let phi = terrastack::grid::pseudo_mercator_latitude(y);
    let (m_lat, m_lon) = metres_per_degree(phi);
    let (hx, hy) = (m_lon / a_deg, m_lat * phi.to_radians().cos() / a_deg);
    let mut expect = 0;
    for dr in -5i32..=5 {
        for dc in -5i32..=5 {
            if (dc as f64 * hx).powi(2) + (dr as f64 * hy).powi(2) <= 9.0 {
                expect += 1;
            }
        }
    }
    assert!(expect > 29, "{expect}");
    assert_eq!(rows, expect);
}

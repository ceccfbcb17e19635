//! The generator of the invented demo site in `sample-dsm/`.
//!
//! Quillmere Bend is a river meadow that does not exist: a meandering channel with a
//! gravel bar, wet and dry meadow, two terraces, willow scrub and a farm track, flown
//! three times in 2026 at 0.1 m. Its coordinates lie in a real CRS (EPSG:32633, WGS 84 /
//! UTM zone 33N) so that every georeferencing path of terrastack is exercised; the site,
//! its landforms, vegetation and spectra are invented ([`terrain`], [`cover`],
//! [`spectra`]) and drawn from deterministic noise ([`noise`]).
//!
//! Each flight has a float32 DSM (terrain + seasonal vegetation + photogrammetric noise,
//! nodata holes over water) and a five-band uint16 orthomosaic on a slightly different
//! 0.12 m grid with a ragged nodata edge. Flights other than the reference carry a known
//! horizontal georeferencing error: their content is displaced by `shift_m` = (dx, dy)
//! metres against the nominal transform, so a feature truly at (x, y) appears at
//! (x + dx, y + dy) in that flight's files. Labelled sample circles are placed where each
//! class truly lies.
//!
//! The array functions ([`dsm`], [`ortho`], [`class_map`], [`sample_circles`]) are pure
//! and give the same bits on every run and thread count; [`generate`] writes them.

pub mod cover;
pub mod noise;
pub mod spectra;
pub mod terrain;

use std::fs;
use std::path::{Path, PathBuf};

use ndarray::{Array2, Array3, Axis};
use rayon::prelude::*;
use serde::Serialize;

pub use cover::{CoverClass, Season};

use crate::atomic_file;
use crate::error::{Error, Result};
use crate::grid::RasterSpace;
use crate::grid::{Crs, Grid};
use crate::raster::geotiff::{
    write_geotiff, BigTiff, Compression, Interleave, Layout, WriteOptions,
};
use crate::raster::SampleType;
use noise::{fbm, gaussian_at, SplitMix64};

/// The invented site's name.
pub const SITE_NAME: &str = "Quillmere Bend";
/// EPSG code of the CRS the site is placed in (WGS 84 / UTM zone 33N).
pub const EPSG: u32 = 32633;
/// Easting and northing of the DSM's south-west corner, metres (EPSG:32633).
pub const ORIGIN: (f64, f64) = (478_240.0, 5_362_120.0);
/// DSM cell size, metres.
pub const DSM_CELL: f64 = 0.1;
/// DSM size in cells (80 m x 60 m).
pub const DSM_SIZE: (usize, usize) = (800, 600);
/// Value stored in DSM cells where matching failed.
pub const DSM_NODATA: f32 = -9999.0;
/// Orthomosaic cell size, metres.
pub const ORTHO_CELL: f64 = 0.12;
/// Orthomosaic size in cells (79.2 m x 61.8 m).
pub const ORTHO_SIZE: (usize, usize) = (660, 515);
/// North-west corner of the orthomosaic grid, metres (EPSG:32633): 1.93 m east of and
/// 0.95 m south of the DSM's, so the two grids never share a cell edge.
pub const ORTHO_CORNER: (f64, f64) = (478_241.93, 5_362_179.05);
/// Orthomosaic stored value per unit reflectance.
pub const REFLECTANCE_SCALE: f64 = 10_000.0;
/// Standard deviation of the photogrammetric height noise on land, metres.
pub const DSM_NOISE_M: f64 = 0.015;

/// One flight of the site.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct FlightPlan {
    /// ISO 8601 date; also the flight's folder name.
    pub date: &'static str,
    pub season: Season,
    /// Displacement of the content against the nominal transform, metres (east, north).
    pub shift_m: (f64, f64),
    /// Seed of the flight's own noise (sensor, matching, footprint).
    pub seed: u64,
}

impl FlightPlan {
    /// True for the flight whose georeferencing is exact.
    pub fn is_reference(&self) -> bool {
        self.shift_m == (0.0, 0.0)
    }
}

/// The three flights: spring (the reference), summer and autumn.
pub fn flights() -> [FlightPlan; 3] {
    [
        FlightPlan {
            date: "2026-04-23",
            season: Season::Spring,
            shift_m: (0.0, 0.0),
            seed: 0x51_0423,
        },
        FlightPlan {
            date: "2026-07-08",
            season: Season::Summer,
            shift_m: (0.27, -0.16),
            seed: 0x51_0708,
        },
        FlightPlan {
            date: "2026-10-14",
            season: Season::Autumn,
            shift_m: (-0.19, 0.33),
            seed: 0x51_1014,
        },
    ]
}

/// The DSM grid shared by every flight (nodata [`DSM_NODATA`]).
pub fn dsm_grid() -> Grid {
    let (w, h) = DSM_SIZE;
    let top = ORIGIN.1 + h as f64 * DSM_CELL;
    Grid::new(
        w,
        h,
        [ORIGIN.0, DSM_CELL, 0.0, top, 0.0, -DSM_CELL],
        Crs::from_epsg(EPSG),
    )
    .expect("constant grid is valid")
    .with_nodata(Some(DSM_NODATA as f64))
}

/// The orthomosaic grid shared by every flight (nodata 0).
pub fn ortho_grid() -> Grid {
    let (w, h) = ORTHO_SIZE;
    let t = [
        ORTHO_CORNER.0,
        ORTHO_CELL,
        0.0,
        ORTHO_CORNER.1,
        0.0,
        -ORTHO_CELL,
    ];
    Grid::new(w, h, t, Crs::from_epsg(EPSG))
        .expect("constant grid is valid")
        .with_nodata(Some(0.0))
}

/// Local coordinates (u east, v north, metres from the DSM's south-west corner) of the
/// true ground position (x, y) in EPSG:32633.
pub fn to_local(x: f64, y: f64) -> (f64, f64) {
    (x - ORIGIN.0, y - ORIGIN.1)
}

/// The true cover class at (x, y) in EPSG:32633.
pub fn class_at(x: f64, y: f64) -> CoverClass {
    let (u, v) = to_local(x, y);
    cover::class_at(u, v)
}

/// Class codes ([`CoverClass::code`]) of `grid`'s cell centres as seen by a flight whose
/// content is displaced by `shift_m`: cell (col, row) at (x, y) shows the ground truly at
/// (x − dx, y − dy).
pub fn class_map(grid: &Grid, shift_m: (f64, f64)) -> Array2<u8> {
    let mut out = Array2::<u8>::zeros((grid.height, grid.width));
    out.axis_iter_mut(Axis(0))
        .into_par_iter()
        .enumerate()
        .for_each(|(r, mut row)| {
            for (c, cell) in row.iter_mut().enumerate() {
                let (x, y) = grid.cell_centre(c as f64, r as f64);
                *cell = class_at(x - shift_m.0, y - shift_m.1).code();
            }
        });
    out
}

/// Whether photogrammetric matching fails at file position (x, y) of `flight`, whose
/// content there is of class `class`: patches of the water surface only.
fn matching_fails(flight: &FlightPlan, x: f64, y: f64, class: CoverClass) -> bool {
    if class != CoverClass::OpenWater {
        return false;
    }
    let (u, v) = to_local(x, y);
    fbm(u, v, 2.5, 3, flight.seed ^ 0x4013) > 0.42
}

/// The DSM of `flight` as stored: elevation in metres (terrain + micro-relief +
/// vegetation of the season + Gaussian matching noise of [`DSM_NOISE_M`] on land, more
/// over water and willow crowns), [`DSM_NODATA`] where matching failed.
pub fn dsm(flight: &FlightPlan) -> Array2<f32> {
    let grid = dsm_grid();
    let mut out = Array2::<f32>::zeros((grid.height, grid.width));
    out.axis_iter_mut(Axis(0))
        .into_par_iter()
        .enumerate()
        .for_each(|(r, mut row)| {
            for (c, cell) in row.iter_mut().enumerate() {
                let (x, y) = grid.cell_centre(c as f64, r as f64);
                let (u, v) = to_local(x - flight.shift_m.0, y - flight.shift_m.1);
                let class = cover::class_at(u, v);
                if matching_fails(flight, x, y, class) {
                    *cell = DSM_NODATA;
                    continue;
                }
                let (z, zone) = terrain::ground(u, v);
                let relief = terrain::micro_relief(u, v, zone);
                let veg = cover::vegetation_height(u, v, class, flight.season);
                let sigma = match class {
                    CoverClass::OpenWater => 0.035,
                    CoverClass::WillowScrub => 0.04,
                    _ => DSM_NOISE_M,
                };
                let e = sigma * gaussian_at(c as i64, r as i64, flight.seed);
                *cell = (z + relief + veg + e) as f32;
            }
        });
    out
}

/// Margin (metres) between the orthomosaic grid's edge and the flight's valid footprint
/// along edge `edge` (0 west, 1 east, 2 south, 3 north) at position `t` along it: 0.4 to
/// 2.8 m, varying smoothly, so the footprint's outline is ragged.
fn footprint_margin(flight: &FlightPlan, edge: u64, t: f64) -> f64 {
    let n = fbm(t, edge as f64 * 37.0, 5.0, 3, flight.seed ^ 0xED6E);
    0.4 + 2.4 * (0.5 + 0.5 * n)
}

/// Whether point (x, y) (file coordinates, EPSG:32633) lies inside the valid footprint of
/// `flight`'s orthomosaic.
pub fn in_ortho_footprint(flight: &FlightPlan, x: f64, y: f64) -> bool {
    footprint_contains(flight, ortho_grid().bounds(), x, y)
}

/// [`in_ortho_footprint`] given the orthomosaic grid's bounds (xmin, ymin, xmax, ymax).
fn footprint_contains(flight: &FlightPlan, bounds: (f64, f64, f64, f64), x: f64, y: f64) -> bool {
    let (x0, y0, x1, y1) = bounds;
    x - x0 > footprint_margin(flight, 0, y)
        && x1 - x > footprint_margin(flight, 1, y)
        && y - y0 > footprint_margin(flight, 2, x)
        && y1 - y > footprint_margin(flight, 3, x)
}

/// The orthomosaic of `flight` as stored: shape (band, row, col), bands in
/// [`spectra::BAND_NAMES`] order, reflectance × [`REFLECTANCE_SCALE`], 0 outside the
/// footprint.
pub fn ortho(flight: &FlightPlan) -> Array3<u16> {
    let grid = ortho_grid();
    let bounds = grid.bounds();
    let mut pix = Array3::<u16>::zeros((grid.height, grid.width, 5));
    pix.axis_iter_mut(Axis(0))
        .into_par_iter()
        .enumerate()
        .for_each(|(r, mut row)| {
            for c in 0..grid.width {
                let (x, y) = grid.cell_centre(c as f64, r as f64);
                if !footprint_contains(flight, bounds, x, y) {
                    continue;
                }
                let (u, v) = to_local(x - flight.shift_m.0, y - flight.shift_m.1);
                let class = cover::class_at(u, v);
                let p = spectra::pixel_values(
                    class,
                    flight.season,
                    u,
                    v,
                    c as i64,
                    r as i64,
                    flight.seed,
                );
                for (b, value) in p.iter().enumerate() {
                    row[[c, b]] = *value;
                }
            }
        });
    pix.permuted_axes([2, 0, 1]).as_standard_layout().to_owned()
}

/// One labelled sample circle: centre in EPSG:32633 metres (rounded to the millimetre),
/// radius in metres (rounded to the centimetre) and its class.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SampleCircle {
    pub id: usize,
    pub x: f64,
    pub y: f64,
    pub radius_m: f64,
    pub class: CoverClass,
}

/// Number of circles placed per class.
pub const CIRCLES_PER_CLASS: usize = 20;
/// Smallest gap kept between two circles, metres.
const CIRCLE_GAP: f64 = 0.3;

/// Whether every DSM cell a circle touches (centre within r + half a cell diagonal)
/// shows `class` in `classes` (a class map of the DSM grid) and is valid in `valid`.
fn circle_fits(grid: &Grid, classes: &Array2<u8>, valid: &Array2<bool>, c: &SampleCircle) -> bool {
    let reach = c.radius_m + DSM_CELL * std::f64::consts::FRAC_1_SQRT_2 + 1e-9;
    let (fc, fr) = grid.to_cell(c.x, c.y);
    let k = (reach / DSM_CELL).ceil() as i64 + 1;
    let (c0, r0) = (fc.floor() as i64, fr.floor() as i64);
    for r in r0 - k..=r0 + k {
        for col in c0 - k..=c0 + k {
            let (x, y) = grid.cell_centre(col as f64, r as f64);
            if (x - c.x).hypot(y - c.y) > reach {
                continue;
            }
            if r < 0 || col < 0 || r as usize >= grid.height || col as usize >= grid.width {
                return false;
            }
            let (r, col) = (r as usize, col as usize);
            if classes[[r, col]] != c.class.code() || !valid[[r, col]] {
                return false;
            }
        }
    }
    true
}

/// The labelled sample circles: [`CIRCLES_PER_CLASS`] per class, radii 0.5–2 m, placed
/// by a seeded search where the whole circle lies in its class on the reference flight's
/// DSM grid, every touched DSM cell is valid in every flight (after that flight's shift),
/// the circle lies inside every flight's orthomosaic footprint (at its true and at its
/// shifted position), and no two circles come closer than 0.3 m. Ids count from 1.
pub fn sample_circles() -> Result<Vec<SampleCircle>> {
    let dsms: Vec<Array2<f32>> = flights().iter().map(dsm).collect();
    place_circles(&dsms)
}

/// [`sample_circles`] given the DSMs of [`flights`], in order.
fn place_circles(dsms: &[Array2<f32>]) -> Result<Vec<SampleCircle>> {
    let grid = dsm_grid();
    let plans = flights();
    let classes = class_map(&grid, (0.0, 0.0));
    // Valid in every flight: a cell at true position p is read at p + shift in a flight.
    let mut valid = Array2::from_elem((grid.height, grid.width), true);
    for (f, d) in plans.iter().zip(dsms) {
        let (sc, sr) = (f.shift_m.0 / DSM_CELL, -f.shift_m.1 / DSM_CELL);
        let dsm_valid = |col: i64, row: i64| {
            col >= 0
                && row >= 0
                && (col as usize) < grid.width
                && (row as usize) < grid.height
                && d[[row as usize, col as usize]] != DSM_NODATA
        };
        for ((r, c), ok) in valid.indexed_iter_mut() {
            // The flight's cells nearest the true cell's shifted centre, all four around it.
            let fc = c as f64 + sc;
            let fr = r as f64 + sr;
            let (c0, r0) = (fc.floor() as i64, fr.floor() as i64);
            *ok &= dsm_valid(c0, r0)
                && dsm_valid(c0 + 1, r0)
                && dsm_valid(c0, r0 + 1)
                && dsm_valid(c0 + 1, r0 + 1);
        }
    }
    let (bx0, by0, bx1, by1) = grid.bounds();
    let mut rng = SplitMix64::new(0x51_C1C1E5);
    let mut placed: Vec<SampleCircle> = Vec::new();
    for class in CoverClass::ALL {
        let mut count = 0;
        let mut attempts = 0;
        while count < CIRCLES_PER_CLASS {
            attempts += 1;
            if attempts > 400_000 {
                return Err(Error::usage(format!(
                    "the demo site generator placed only {count} sample circles of class {} \
                     (wanted {CIRCLES_PER_CLASS})",
                    class.name()
                )));
            }
            // Small radii are drawn more often (r = 0.5 + 1.5·w², w uniform), and only
            // small ones once a class has proved crowded.
            let w = rng.next_f64();
            let span = if attempts < 100_000 { 1.5 } else { 0.3 };
            let radius = ((0.5 + span * w * w) * 100.0).round() / 100.0;
            let x = (rng.range(bx0 + radius, bx1 - radius) * 1000.0).round() / 1000.0;
            let y = (rng.range(by0 + radius, by1 - radius) * 1000.0).round() / 1000.0;
            let cand = SampleCircle {
                id: 0,
                x,
                y,
                radius_m: radius,
                class,
            };
            if class_at(x, y) != class {
                continue;
            }
            if placed
                .iter()
                .any(|p| (p.x - x).hypot(p.y - y) < p.radius_m + radius + CIRCLE_GAP)
            {
                continue;
            }
            if !circle_fits(&grid, &classes, &valid, &cand) {
                continue;
            }
            let in_footprints = plans.iter().all(|f| {
                (0..32).all(|k| {
                    let a = k as f64 * std::f64::consts::TAU / 32.0;
                    let px = x + (radius + 0.2) * a.cos();
                    let py = y + (radius + 0.2) * a.sin();
                    in_ortho_footprint(f, px, py)
                        && in_ortho_footprint(f, px + f.shift_m.0, py + f.shift_m.1)
                })
            });
            if !in_footprints {
                continue;
            }
            placed.push(SampleCircle {
                id: placed.len() + 1,
                ..cand
            });
            count += 1;
        }
    }
    Ok(placed)
}

/// What [`generate`] wrote.
#[derive(Clone, Debug, PartialEq)]
pub struct SiteSummary {
    /// The site's (invented) name.
    pub name: String,
    /// Every file written, relative to the output folder, with its size in bytes.
    pub files: Vec<(PathBuf, u64)>,
    /// Sum of the file sizes, bytes.
    pub total_bytes: u64,
    /// Number of labelled sample circles.
    pub samples: usize,
}

#[derive(Serialize)]
struct SiteFile {
    format: &'static str,
    name: &'static str,
    invented: bool,
    note: &'static str,
    crs: SiteCrs,
    dsm: SiteRaster,
    ortho: SiteRaster,
    shift_convention: &'static str,
    flights: Vec<SiteFlight>,
    classes: Vec<SiteClass>,
    samples: SiteSamples,
}

#[derive(Serialize)]
struct SiteCrs {
    epsg: u32,
    name: String,
}

#[derive(Serialize)]
struct SiteRaster {
    width: usize,
    height: usize,
    cell_size_m: f64,
    transform: [f64; 6],
    sample_type: &'static str,
    nodata: f64,
    bands: Vec<&'static str>,
    units: &'static str,
}

#[derive(Serialize)]
struct SiteFlight {
    date: &'static str,
    season: Season,
    reference: bool,
    dsm: String,
    ortho: String,
    shift_m: [f64; 2],
}

#[derive(Serialize)]
struct SiteClass {
    name: &'static str,
    code: u8,
    description: &'static str,
}

#[derive(Serialize)]
struct SiteSamples {
    file: &'static str,
    columns: [&'static str; 5],
    count: usize,
}

/// The contents of `site.json`.
fn site_json(samples: usize) -> String {
    let d = dsm_grid();
    let o = ortho_grid();
    let site = SiteFile {
        format: "terrastack-demo-site/1",
        name: SITE_NAME,
        invented: true,
        note: "Invented data for the terrastack demo: the site, its landforms, vegetation, \
               spectra and labels do not describe any real place. The CRS is real.",
        crs: SiteCrs {
            epsg: EPSG,
            name: d.crs.name.clone().unwrap_or_default(),
        },
        dsm: SiteRaster {
            width: d.width,
            height: d.height,
            cell_size_m: DSM_CELL,
            transform: d.transform,
            sample_type: "float32",
            nodata: DSM_NODATA as f64,
            bands: vec!["elevation"],
            units: "metres above an invented datum",
        },
        ortho: SiteRaster {
            width: o.width,
            height: o.height,
            cell_size_m: ORTHO_CELL,
            transform: o.transform,
            sample_type: "uint16",
            nodata: 0.0,
            bands: spectra::BAND_NAMES.to_vec(),
            units: "reflectance x 10000",
        },
        shift_convention: "content displaced against the nominal geotransform: a feature truly \
                           at (x, y) appears at (x + dx, y + dy) in the flight's files; \
                           shift_m is [dx, dy] in metres, east and north",
        flights: flights()
            .iter()
            .map(|f| SiteFlight {
                date: f.date,
                season: f.season,
                reference: f.is_reference(),
                dsm: format!("{}/dsm.tif", f.date),
                ortho: format!("{}/ortho.tif", f.date),
                shift_m: [f.shift_m.0, f.shift_m.1],
            })
            .collect(),
        classes: CoverClass::ALL
            .iter()
            .map(|c| SiteClass {
                name: c.name(),
                code: c.code(),
                description: c.description(),
            })
            .collect(),
        samples: SiteSamples {
            file: "samples.csv",
            columns: ["id", "x", "y", "radius_m", "class"],
            count: samples,
        },
    };
    let mut text = serde_json::to_string_pretty(&site).expect("plain structs serialise");
    text.push('\n');
    text
}

/// The contents of `samples.csv`.
pub fn samples_csv(circles: &[SampleCircle]) -> String {
    let mut text = String::from("id,x,y,radius_m,class\n");
    for c in circles {
        text.push_str(&format!(
            "{},{:.3},{:.3},{:.2},{}\n",
            c.id,
            c.x,
            c.y,
            c.radius_m,
            c.class.name()
        ));
    }
    text
}

/// Write a GeoTIFF with one worker thread: the writer places blocks in the file in the
/// order they finish, so only a single thread gives the same bytes on every run.
fn write_geotiff_in_order<T: crate::raster::geotiff::TiffSample>(
    path: &Path,
    grid: &Grid,
    bands: &[ndarray::ArrayView2<T>],
    descriptions: &[&str],
    options: &WriteOptions,
) -> Result<()> {
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build()
        .map_err(|e| Error::usage(format!("cannot start a worker thread: {e}")).in_file(path))?;
    pool.install(|| write_geotiff(path, grid, bands, descriptions, options))
}

fn write_text(path: &Path, text: &str) -> Result<()> {
    atomic_file::write_with(path, |tmp| {
        fs::write(tmp, text).map_err(|e| Error::io(tmp, e))
    })
}

/// Write options of the demo DSMs: float32, 256 x 256 tiles, Deflate with the
/// floating-point predictor.
pub fn dsm_write_options() -> WriteOptions {
    WriteOptions {
        sample_type: SampleType::F32,
        compression: Compression::Deflate,
        predictor: Some(3),
        layout: Layout::Tiled { size: 256 },
        interleave: Interleave::Band,
        bigtiff: BigTiff::Never,
        raster_space: RasterSpace::Area,
        overviews: false,
    }
}

/// Write options of the demo orthomosaics: uint16, 256 x 256 tiles, pixel-interleaved,
/// Deflate with the horizontal-differencing predictor.
pub fn ortho_write_options() -> WriteOptions {
    WriteOptions {
        sample_type: SampleType::U16,
        compression: Compression::Deflate,
        predictor: Some(2),
        layout: Layout::Tiled { size: 256 },
        interleave: Interleave::Pixel,
        bigtiff: BigTiff::Never,
        raster_space: RasterSpace::Area,
        overviews: false,
    }
}

/// Write the whole demo site into `dir` (created if missing): `<date>/dsm.tif` and
/// `<date>/ortho.tif` for each flight, `samples.csv` and `site.json`. Each file is written under a temporary name and
/// renamed when complete; files of an earlier run are replaced. The output is the same
/// byte for byte on every run.
pub fn generate(dir: &Path) -> Result<SiteSummary> {
    fs::create_dir_all(dir).map_err(|e| Error::io(dir, e))?;
    let mut written: Vec<PathBuf> = Vec::new();
    let mut dsms = Vec::new();
    for f in flights() {
        let folder = dir.join(f.date);
        fs::create_dir_all(&folder).map_err(|e| Error::io(&folder, e))?;
        let d = dsm(&f);
        let path = folder.join("dsm.tif");
        atomic_file::write_with(&path, |tmp| {
            write_geotiff_in_order(
                tmp,
                &dsm_grid(),
                &[d.view()],
                &["elevation"],
                &dsm_write_options(),
            )
        })?;
        written.push(PathBuf::from(f.date).join("dsm.tif"));
        dsms.push(d);
        let o = ortho(&f);
        let bands: Vec<_> = o.outer_iter().collect();
        let path = folder.join("ortho.tif");
        atomic_file::write_with(&path, |tmp| {
            write_geotiff_in_order(
                tmp,
                &ortho_grid(),
                &bands,
                &spectra::BAND_NAMES,
                &ortho_write_options(),
            )
        })?;
        written.push(PathBuf::from(f.date).join("ortho.tif"));
    }
    let circles = place_circles(&dsms)?;
    write_text(&dir.join("samples.csv"), &samples_csv(&circles))?;
    written.push(PathBuf::from("samples.csv"));
    write_text(&dir.join("site.json"), &site_json(circles.len()))?;
    written.push(PathBuf::from("site.json"));
    let mut files = Vec::new();
    for rel in written {
        let path = dir.join(&rel);
        let size = fs::metadata(&path).map_err(|e| Error::io(&path, e))?.len();
        files.push((rel, size));
    }
    Ok(SiteSummary {
        name: SITE_NAME.to_string(),
        total_bytes: files.iter().map(|f| f.1).sum(),
        files,
        samples: circles.len(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn count(map: &Array2<u8>, class: CoverClass) -> usize {
        map.iter().filter(|&&c| c == class.code()).count()
    }

    #[test]
    fn every_class_present_on_the_dsm_grid() {
        let map = class_map(&dsm_grid(), (0.0, 0.0));
        let n = map.len() as f64;
        for class in CoverClass::ALL {
            let share = count(&map, class) as f64 / n;
            assert!(share > 0.005, "{}: {share}", class.name());
        }
        assert!(map.iter().all(|&c| CoverClass::from_code(c).is_some()));
    }

    #[test]
    fn shifted_flight_sees_reference_moved_by_its_shift() {
        // A flight displaced by (dx, dy) shows at (x, y) what the reference shows at
        // (x − dx, y − dy): its class map equals the reference map on a grid whose origin
        // is moved by (−dx, −dy). Cell centres differ by rounding only, so a handful of
        // cells exactly on a class boundary may differ.
        for f in flights() {
            let grid = dsm_grid();
            let mut moved = grid.clone();
            moved.transform[0] -= f.shift_m.0;
            moved.transform[3] -= f.shift_m.1;
            let a = class_map(&grid, f.shift_m);
            let b = class_map(&moved, (0.0, 0.0));
            let differ = a.iter().zip(b.iter()).filter(|(p, q)| p != q).count();
            assert!(differ <= 5, "{}: {differ} cells differ", f.date);
            if !f.is_reference() {
                // And the shift is visible: the unshifted map differs along boundaries.
                let r = class_map(&grid, (0.0, 0.0));
                let moved_cells = a.iter().zip(r.iter()).filter(|(p, q)| p != q).count();
                assert!(moved_cells > 1000, "{}: {moved_cells}", f.date);
            }
        }
    }

    #[test]
    fn dsm_noise_and_holes() {
        let grid = dsm_grid();
        let f = flights()[0];
        let d = dsm(&f);
        let map = class_map(&grid, f.shift_m);
        let mut resid = Vec::new();
        let (mut water, mut holes) = (0usize, 0usize);
        for ((r, c), &z) in d.indexed_iter() {
            let class = CoverClass::from_code(map[[r, c]]).unwrap();
            if class == CoverClass::OpenWater {
                water += 1;
                holes += (z == DSM_NODATA) as usize;
                continue;
            }
            assert_ne!(z, DSM_NODATA, "hole outside water at {c},{r}");
            if class == CoverClass::WillowScrub {
                continue;
            }
            let (x, y) = grid.cell_centre(c as f64, r as f64);
            let (u, v) = to_local(x, y);
            let (g, zone) = terrain::ground(u, v);
            let model = g
                + terrain::micro_relief(u, v, zone)
                + cover::vegetation_height(u, v, class, f.season);
            resid.push(z as f64 - model);
        }
        // The residual is the matching noise: zero mean, standard deviation DSM_NOISE_M
        // (float32 rounding at 200 m adds only 8 µm).
        let n = resid.len() as f64;
        let mean = resid.iter().sum::<f64>() / n;
        let sd = (resid.iter().map(|e| (e - mean).powi(2)).sum::<f64>() / n).sqrt();
        assert!(mean.abs() < 2e-4, "mean {mean}");
        assert!((sd / DSM_NOISE_M - 1.0).abs() < 0.02, "sd {sd}");
        // A few holes over the water, not most of it.
        let share = holes as f64 / water as f64;
        assert!((0.01..0.2).contains(&share), "hole share of water {share}");
    }

    #[test]
    fn willow_canopy_stands_two_to_four_metres_in_the_dsm() {
        let grid = dsm_grid();
        for f in flights() {
            let d = dsm(&f);
            for p in cover::willow_patches() {
                let (x, y) = (ORIGIN.0 + p.u + f.shift_m.0, ORIGIN.1 + p.v + f.shift_m.1);
                let (c, r) = grid.to_cell(x, y);
                let (c, r) = (c.floor() as usize, r.floor() as usize);
                if r >= grid.height {
                    continue;
                }
                let (g, _) = terrain::ground(p.u, p.v);
                let h = d[[r, c]] as f64 - g;
                assert!(
                    (1.9..=4.2).contains(&h),
                    "{} patch {},{}: {h}",
                    f.date,
                    p.u,
                    p.v
                );
            }
        }
    }

    #[test]
    fn ortho_footprint_ragged_and_mostly_valid() {
        for f in flights() {
            let o = ortho(&f);
            assert_eq!(o.dim(), (5, ORTHO_SIZE.1, ORTHO_SIZE.0));
            let nir = o.index_axis(Axis(0), 4);
            let valid = nir.iter().filter(|&&v| v > 0).count() as f64 / nir.len() as f64;
            assert!((0.85..0.97).contains(&valid), "{}: valid {valid}", f.date);
            // All five bands share one footprint.
            for b in 0..4 {
                let band = o.index_axis(Axis(0), b);
                assert!(band
                    .iter()
                    .zip(nir.iter())
                    .all(|(a, n)| (*a == 0) == (*n == 0)));
            }
            // Ragged: the valid run in the first rows starts at different columns.
            let starts: std::collections::BTreeSet<usize> = (100..400)
                .map(|r| nir.row(r).iter().position(|&v| v > 0).unwrap())
                .collect();
            assert!(starts.len() > 5, "{}: {starts:?}", f.date);
        }
    }

    #[test]
    fn ortho_ndvi_by_class() {
        // NDVI (Rouse et al. 1974) of summer pixels: vegetation high, water negative.
        let f = flights()[1];
        let o = ortho(&f);
        let map = class_map(&ortho_grid(), f.shift_m);
        let mut sums = std::collections::BTreeMap::new();
        for ((r, c), &code) in map.indexed_iter() {
            let (red, nir) = (o[[2, r, c]] as f64, o[[4, r, c]] as f64);
            if nir == 0.0 {
                continue;
            }
            let e = sums.entry(code).or_insert((0.0, 0usize));
            e.0 += (nir - red) / (nir + red);
            e.1 += 1;
        }
        let mean = |c: CoverClass| {
            let (s, n) = sums[&c.code()];
            s / n as f64
        };
        assert!(mean(CoverClass::WillowScrub) > 0.8);
        assert!(mean(CoverClass::WetMeadow) > 0.75);
        assert!(mean(CoverClass::OpenWater) < -0.2);
        assert!(mean(CoverClass::FarmTrack).abs() < 0.15);
    }

    #[test]
    fn arrays_identical_across_thread_counts() {
        let f = flights()[2];
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(1)
            .build()
            .unwrap();
        let (d1, o1) = pool.install(|| (dsm(&f), ortho(&f)));
        let (d2, o2) = (dsm(&f), ortho(&f));
        assert!(d1
            .iter()
            .zip(d2.iter())
            .all(|(a, b)| a.to_bits() == b.to_bits()));
        assert_eq!(o1, o2);
    }

    #[test]
    fn sample_circles_lie_wholly_in_their_class() {
        let circles = sample_circles().unwrap();
        assert_eq!(circles.len(), CIRCLES_PER_CLASS * CoverClass::ALL.len());
        let (x0, y0, x1, y1) = dsm_grid().bounds();
        for (i, c) in circles.iter().enumerate() {
            assert_eq!(c.id, i + 1);
            assert!((0.5..=2.0).contains(&c.radius_m));
            assert!(c.x - c.radius_m > x0 && c.x + c.radius_m < x1);
            assert!(c.y - c.radius_m > y0 && c.y + c.radius_m < y1);
            // Independent of the raster: the class function on a 5 cm polar grid.
            let rings = (c.radius_m / 0.05).ceil() as usize;
            for k in 0..=rings {
                let rho = c.radius_m * k as f64 / rings as f64;
                let m = (k * 8).max(1);
                for j in 0..m {
                    let a = j as f64 * std::f64::consts::TAU / m as f64;
                    let (x, y) = (c.x + rho * a.cos(), c.y + rho * a.sin());
                    assert_eq!(class_at(x, y), c.class, "circle {} at {x},{y}", c.id);
                }
            }
        }
        for class in CoverClass::ALL {
            assert_eq!(
                circles.iter().filter(|c| c.class == class).count(),
                CIRCLES_PER_CLASS
            );
        }
        let csv = samples_csv(&circles);
        assert_eq!(csv.lines().count(), circles.len() + 1);
        assert!(csv.starts_with("id,x,y,radius_m,class\n1,"));
    }
}

//! The multi-temporal stack: every flight's bands on one common grid, each band dated, plus
//! per-feature summaries across the dates.
//!
//! Inputs are the finished stacks of the flights (`stack.tif` + `stack.json`), all built on
//! the batch's common grid (a flight whose shift was applied was built on the common grid
//! moved by its shift, so its cell (r, c) shows the ground the reference shows at cell
//! (r, c); it is placed at cell (r, c) of the common grid).
//!
//! Output bands, in order:
//! 1. dated bands: for each flight in date order, each of its bands, named
//!    `NAME_YYYYMMDD` (an identifier, e.g. `ndvi_20260708`), with `date` set;
//! 2. summaries, for each band name present in every flight (in the earliest flight's
//!    order): `NAME_mean`, `NAME_min`, `NAME_max`, `NAME_amplitude` (max − min), `NAME_std`
//!    (population standard deviation, divisor n), and for spectral indices and band-math
//!    expressions `NAME_argmax_date`: the 0-based index, into the list of dates in
//!    ascending order (recorded on the band as `dates`), of the date with the largest
//!    value; the earliest such date on a tie.
//!
//! Summaries use the valid (non-NaN) dates of each cell only; a cell with no valid date is
//! NaN in every summary. Sums run in f64 in date order, so results do not depend on threads
//! or tiles; tiles are appended to the file in a fixed order, so two runs write the same
//! bytes.

use std::path::{Path, PathBuf};

use ndarray::{Array2, ArrayView2};

use crate::error::{Error, Result};
use crate::grid::{Grid, Window};
use crate::raster::geotiff::{GeoTiffWriter, OverviewResampling, WriteOptions};
use crate::raster::{self, RasterSource};
use crate::stack::output::OutputDir;
use crate::stack::preview::{Preview, RampKind, SheetHeading};
use crate::stack::sidecar::{
    BandMetadata, GridMetadata, SoftwareMetadata, SourceMetadata, StackMetadata, StatsAccumulator,
    STACK_FORMAT,
};
use crate::stack::tile_sink::OrderedTiles;

use super::ledger::sha256_file;

/// Features whose summaries include the date of the maximum.
pub const INDEX_FEATURES: &[&str] = &[
    "ndvi",
    "gndvi",
    "ndre",
    "savi",
    "osavi",
    "msavi2",
    "evi",
    "evi2",
    "ndwi",
    "cire",
    "cigreen",
    "exg",
    "vari",
    "expression",
];

/// One summary across dates.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Summary {
    Mean,
    Min,
    Max,
    Amplitude,
    Std,
    ArgmaxDate,
}

impl Summary {
    /// The summaries every feature gets.
    pub const ALWAYS: [Summary; 5] = [
        Summary::Mean,
        Summary::Min,
        Summary::Max,
        Summary::Amplitude,
        Summary::Std,
    ];

    /// Suffix of the band name and value of the band's `summary` field.
    pub fn name(self) -> &'static str {
        match self {
            Summary::Mean => "mean",
            Summary::Min => "min",
            Summary::Max => "max",
            Summary::Amplitude => "amplitude",
            Summary::Std => "std",
            Summary::ArgmaxDate => "argmax_date",
        }
    }

    /// The summaries of a band with feature key `feature`.
    pub fn for_feature(feature: &str) -> Vec<Summary> {
        let mut v = Summary::ALWAYS.to_vec();
        if INDEX_FEATURES.contains(&feature) {
            v.push(Summary::ArgmaxDate);
        }
        v
    }
}

/// Summaries of one band across dates, cell by cell (see the module doc). `dated` holds the
/// band on each date in ascending date order, all of one shape; the result holds one array
/// per entry of `which`, in that order.
pub fn summarise(dated: &[ArrayView2<f32>], which: &[Summary]) -> Vec<Array2<f32>> {
    let dim = dated.first().map(|a| a.dim()).unwrap_or((0, 0));
    let mut out: Vec<Array2<f32>> = which
        .iter()
        .map(|_| Array2::from_elem(dim, f32::NAN))
        .collect();
    let mut values: Vec<f64> = Vec::with_capacity(dated.len());
    for r in 0..dim.0 {
        for c in 0..dim.1 {
            values.clear();
            let mut argmax = 0usize;
            let mut max = f64::NEG_INFINITY;
            let mut min = f64::INFINITY;
            for (d, a) in dated.iter().enumerate() {
                let v = a[[r, c]];
                if v.is_nan() {
                    continue;
                }
                let v = v as f64;
                if v > max {
                    max = v;
                    argmax = d;
                }
                min = min.min(v);
                values.push(v);
            }
            if values.is_empty() {
                continue;
            }
            let n = values.len() as f64;
            let mean = values.iter().sum::<f64>() / n;
            for (o, s) in out.iter_mut().zip(which) {
                o[[r, c]] = match s {
                    Summary::Mean => mean,
                    Summary::Min => min,
                    Summary::Max => max,
                    Summary::Amplitude => max - min,
                    Summary::Std => {
                        (values.iter().map(|v| (v - mean) * (v - mean)).sum::<f64>() / n).sqrt()
                    }
                    Summary::ArgmaxDate => argmax as f64,
                } as f32;
            }
        }
    }
    out
}

/// How the overviews of a band of the multi-temporal stack are made: date indices keep
/// their values (nearest), aspect and its mean, minimum and maximum are directions
/// (circular mean), everything else (amplitude and spread of aspect included) is averaged.
fn overview_resampling(band: &BandMetadata) -> OverviewResampling {
    let summary = band.extra.get("summary").and_then(|s| s.as_str());
    match summary {
        Some(s) if s == Summary::ArgmaxDate.name() => OverviewResampling::Nearest,
        Some(s) if s == Summary::Amplitude.name() || s == Summary::Std.name() => {
            OverviewResampling::Average
        }
        _ if band.feature == "aspect" => OverviewResampling::Circular,
        _ => OverviewResampling::Average,
    }
}

/// One flight's finished stack, as input to the multi-temporal stack.
#[derive(Clone, Debug)]
pub struct DatedStack {
    pub id: String,
    /// ISO 8601 date.
    pub date: String,
    /// The flight's stack folder.
    pub dir: PathBuf,
    /// How `stack.json` of the multi-temporal stack names this flight's `stack.tif`
    /// (relative to the multi-temporal stack's folder, so that the output root can move).
    pub source_path: String,
}

/// A band of the multi-temporal stack and where its values come from.
#[derive(Clone, Debug)]
enum Origin {
    /// Band `band` (1-based) of flight `flight` (index into the date-sorted flights).
    Dated { flight: usize, band: usize },
    /// Summary `which` (index into the name's summary list) of common name `name`.
    Summary { name: usize, which: usize },
}

/// Write the multi-temporal stack of `flights` on `grid` into `out` (`stack.tif`,
/// `preview.png`, then `stack.json` last, each atomically). Returns its metadata.
pub fn write_temporal(
    flights: &[DatedStack],
    grid: &Grid,
    out: &Path,
    force: bool,
) -> Result<StackMetadata> {
    if flights.is_empty() {
        return Err(Error::usage(
            "the multi-temporal stack needs at least one finished flight",
        ));
    }
    let mut flights: Vec<DatedStack> = flights.to_vec();
    flights.sort_by(|a, b| a.date.cmp(&b.date).then(a.id.cmp(&b.id)));
    let mut metas = Vec::with_capacity(flights.len());
    let mut readers: Vec<Box<dyn RasterSource>> = Vec::with_capacity(flights.len());
    for f in &flights {
        let json = f.dir.join("stack.json");
        let text = std::fs::read_to_string(&json).map_err(|e| Error::io(&json, e))?;
        let meta: StackMetadata = serde_json::from_str(&text).map_err(|e| {
            Error::file(&json, format!("not a stack sidecar: {e}"))
                .with_fix("rebuild the flight (delete its folder and its ledger record, then rerun the batch)")
        })?;
        if meta.grid.width != grid.width || meta.grid.height != grid.height {
            return Err(Error::file(
                &json,
                format!(
                    "the stack is {} x {} cells but the common grid is {} x {}",
                    meta.grid.width, meta.grid.height, grid.width, grid.height
                ),
            )
            .with_fix("rerun the batch so that every flight is rebuilt on the common grid"));
        }
        let tif = f.dir.join("stack.tif");
        let reader = raster::open(&tif)?;
        if reader.band_count() != meta.bands.len() {
            return Err(Error::file(
                &tif,
                format!(
                    "holds {} bands but its stack.json describes {}",
                    reader.band_count(),
                    meta.bands.len()
                ),
            )
            .with_fix("rebuild the flight"));
        }
        readers.push(reader);
        metas.push(meta);
    }
    let dates: Vec<String> = flights.iter().map(|f| f.date.clone()).collect();

    // Band layout.
    let mut bands: Vec<BandMetadata> = Vec::new();
    let mut origins: Vec<Origin> = Vec::new();
    for (fi, (f, meta)) in flights.iter().zip(&metas).enumerate() {
        for b in &meta.bands {
            let mut band = b.clone();
            band.index = bands.len() + 1;
            band.name = format!("{}_{}", b.name, f.date.replace('-', ""));
            band.date = Some(f.date.clone());
            band.extra.insert("flight".into(), f.id.clone().into());
            origins.push(Origin::Dated {
                flight: fi,
                band: b.index,
            });
            bands.push(band);
        }
    }
    // Common names: in the earliest flight's order, present in every flight.
    let common: Vec<(String, Vec<usize>, Vec<Summary>)> = metas[0]
        .bands
        .iter()
        .filter_map(|b| {
            let idx: Option<Vec<usize>> = metas
                .iter()
                .map(|m| m.bands.iter().find(|x| x.name == b.name).map(|x| x.index))
                .collect();
            idx.map(|i| (b.name.clone(), i, Summary::for_feature(&b.feature)))
        })
        .collect();
    for (ni, (name, _, which)) in common.iter().enumerate() {
        let template = metas[0]
            .bands
            .iter()
            .find(|b| &b.name == name)
            .expect("common name");
        for (wi, s) in which.iter().enumerate() {
            let mut band = template.clone();
            band.index = bands.len() + 1;
            band.name = format!("{name}_{}", s.name());
            band.date = None;
            if *s == Summary::ArgmaxDate {
                band.units = "date index".into();
            }
            band.extra.insert("summary".into(), s.name().into());
            band.extra.insert("summarises".into(), name.clone().into());
            band.extra.insert(
                "dates".into(),
                serde_json::to_value(&dates).expect("dates serialise"),
            );
            origins.push(Origin::Summary {
                name: ni,
                which: wi,
            });
            bands.push(band);
        }
    }

    let preview = Preview::new(
        grid.width,
        grid.height,
        bands
            .iter()
            .map(|b| (b.name.clone(), b.units.clone(), RampKind::for_band(b)))
            .collect(),
    );
    let mut dir = OutputDir::prepare(out, force)?;
    let tif_path = dir.temp_path("stack.tif");
    // The stack's cells are NaN where no value exists: say so in the file (GDAL_NODATA).
    let file_grid = grid.clone().with_nodata(Some(f64::NAN));
    let mut writer =
        GeoTiffWriter::create(&tif_path, &file_grid, bands.len(), WriteOptions::default())?;
    for b in &bands {
        writer.set_band_description(b.index, &b.name);
        writer.set_band_units(b.index, &b.units);
        writer.set_band_overview(b.index, overview_resampling(b));
    }
    let tile = writer.block_size().0;
    let tiles: Vec<Window> = (0..grid.height.div_ceil(tile))
        .flat_map(|tr| {
            (0..grid.width.div_ceil(tile)).map(move |tc| {
                let (c0, r0) = (tc * tile, tr * tile);
                Window::new(
                    c0 as i64,
                    r0 as i64,
                    tile.min(grid.width - c0),
                    tile.min(grid.height - r0),
                )
            })
        })
        .collect();
    // Tiles are computed and compressed in parallel, a wave at a time, and appended in
    // tile order (`stack::tile_sink`), so the file's bytes do not depend on which thread
    // finishes first. A wave holds one tile per thread: a tile's arrays (every flight's
    // band of one name and its summaries) are a few MiB at most.
    let mut totals = vec![StatsAccumulator::default(); bands.len()];
    let mut sink = OrderedTiles::new(&writer, &tiles, rayon::current_num_threads());
    while let Some(results) = sink.next_wave(|w, encoded| {
        let mut stats = vec![StatsAccumulator::default(); bands.len()];
        // Dated bands, read one at a time.
        for (bi, o) in origins.iter().enumerate() {
            if let Origin::Dated { flight, band } = o {
                let data = readers[*flight].read_window(*band, w)?;
                stats[bi] = StatsAccumulator::from_array(&data);
                preview.record(bi, w, data.view());
                encoded.encode(bi + 1, data.view())?;
            }
        }
        // Summaries, one common name at a time.
        for (ni, (_, idx, which)) in common.iter().enumerate() {
            let dated: Vec<Array2<f32>> = readers
                .iter()
                .zip(idx)
                .map(|(r, &band)| r.read_window(band, w))
                .collect::<Result<_>>()?;
            let views: Vec<ArrayView2<f32>> = dated.iter().map(|a| a.view()).collect();
            let sums = summarise(&views, which);
            for (bi, o) in origins.iter().enumerate() {
                if let Origin::Summary { name, which: wi } = o {
                    if *name == ni {
                        stats[bi] = StatsAccumulator::from_array(&sums[*wi]);
                        preview.record(bi, w, sums[*wi].view());
                        encoded.encode(bi + 1, sums[*wi].view())?;
                    }
                }
            }
        }
        Ok(stats)
    })? {
        for stats in results {
            for (t, p) in totals.iter_mut().zip(stats.iter()) {
                t.merge(p);
            }
        }
    }
    writer.finish()?;
    let cells = (grid.width * grid.height) as u64;
    for (b, t) in bands.iter_mut().zip(&totals) {
        b.stats = t.finish(cells);
    }
    let sources = flights
        .iter()
        .map(|f| {
            let tif = f.dir.join("stack.tif");
            Ok(SourceMetadata {
                role: format!("stack:{}", f.id),
                path: f.source_path.clone(),
                sha256: sha256_file(&tif)?,
            })
        })
        .collect::<Result<Vec<_>>>()?;
    let parameters = serde_json::json!({
        "kind": "multi-temporal",
        "flights": flights.iter().map(|f| serde_json::json!({"id": f.id, "date": f.date})).collect::<Vec<_>>(),
        "dates": dates,
        "summaries": ["mean", "min", "max", "amplitude", "std", "argmax_date (indices and expressions; 0-based index into dates)"],
        "flight_parameters": metas.iter().map(|m| m.parameters.clone()).collect::<Vec<_>>(),
    });
    let metadata = StackMetadata {
        format: STACK_FORMAT.into(),
        grid: GridMetadata::from_grid(grid),
        nodata: "NaN".into(),
        bands,
        sources,
        parameters,
        software: SoftwareMetadata::default(),
    };
    let png_path = dir.temp_path("preview.png");
    preview.write_png(
        &png_path,
        grid,
        &SheetHeading::temporal(&dates),
        &metadata.bands,
    )?;
    metadata.write_to(&dir.temp_path("stack.json"))?;
    let span = dates
        .first()
        .map(String::as_str)
        .zip(dates.last().map(String::as_str));
    let (item, no_item) =
        crate::stack::stac::add_item(&mut dir, &metadata, grid, &tif_path, span, false)?;
    if let Some(w) = &no_item {
        eprintln!("warning: {w}");
    }
    let folder = dir.dir().to_path_buf();
    dir.commit()?;
    if !item {
        crate::stack::stac::remove_stale_item(&folder)?;
    }
    Ok(metadata)
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn summaries_of_hand_worked_cells() {
        // Three dates; cell values worked by hand (population std: divisor n).
        let d1 = array![[1.0f32, f32::NAN], [0.2, f32::NAN]];
        let d2 = array![[3.0f32, 5.0], [0.6, f32::NAN]];
        let d3 = array![[2.0f32, f32::NAN], [0.6, f32::NAN]];
        let which = Summary::for_feature("ndvi");
        assert_eq!(which.len(), 6);
        let s = summarise(&[d1.view(), d2.view(), d3.view()], &which);
        // Cell (0,0): 1, 3, 2 → mean 2, min 1, max 3, amplitude 2, std √(2/3), argmax 1.
        assert_eq!(s[0][[0, 0]], 2.0);
        assert_eq!(s[1][[0, 0]], 1.0);
        assert_eq!(s[2][[0, 0]], 3.0);
        assert_eq!(s[3][[0, 0]], 2.0);
        assert!((s[4][[0, 0]] as f64 - (2.0f64 / 3.0).sqrt()).abs() < 1e-7);
        assert_eq!(s[5][[0, 0]], 1.0);
        // Cell (0,1): one valid date → std 0, amplitude 0, argmax 1.
        assert_eq!(
            (s[0][[0, 1]], s[3][[0, 1]], s[4][[0, 1]], s[5][[0, 1]]),
            (5.0, 0.0, 0.0, 1.0)
        );
        // Cell (1,0): 0.2, 0.6, 0.6 → the tie goes to the earlier date (index 1).
        assert_eq!(s[5][[1, 0]], 1.0);
        // Cell (1,1): no valid date → NaN everywhere.
        assert!(s.iter().all(|a| a[[1, 1]].is_nan()));
    }

    #[test]
    fn summaries_match_a_naive_reference() {
        // Naive two-pass reference over many pseudo-random cells (textbook definitions).
        let n = 7;
        let dated: Vec<Array2<f32>> = (0..n)
            .map(|d| {
                Array2::from_shape_fn((9, 11), |(r, c)| {
                    let k = (r * 131 + c * 71 + d * 37) % 97;
                    if k % 13 == 0 {
                        f32::NAN
                    } else {
                        k as f32 * 0.013 - 0.4
                    }
                })
            })
            .collect();
        let views: Vec<_> = dated.iter().map(|a| a.view()).collect();
        let s = summarise(&views, &Summary::for_feature("evi"));
        for r in 0..9 {
            for c in 0..11 {
                let v: Vec<f64> = dated
                    .iter()
                    .map(|a| a[[r, c]] as f64)
                    .filter(|v| !v.is_nan())
                    .collect();
                if v.is_empty() {
                    assert!(s[0][[r, c]].is_nan());
                    continue;
                }
                let mean = v.iter().sum::<f64>() / v.len() as f64;
                let var = v.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / v.len() as f64;
                let max = v.iter().cloned().fold(f64::MIN, f64::max);
                let first_max = dated.iter().position(|a| a[[r, c]] as f64 == max).unwrap();
                assert!((s[0][[r, c]] as f64 - mean).abs() < 1e-6);
                assert!((s[4][[r, c]] as f64 - var.sqrt()).abs() < 1e-6);
                assert_eq!(s[5][[r, c]] as usize, first_max);
            }
        }
    }

    #[test]
    fn terrain_features_get_no_date_of_maximum() {
        assert_eq!(Summary::for_feature("slope"), Summary::ALWAYS.to_vec());
        assert!(Summary::for_feature("expression").contains(&Summary::ArgmaxDate));
    }
}

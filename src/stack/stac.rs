//! STAC records of stacks: an Item beside each stack (`stack.stac.json`) and a Collection
//! per batch (`collection.json` in the output root), STAC 1.1.0.
//!
//! The Item (STAC item-spec 1.1.0) holds: the footprint as a GeoJSON Polygon and bbox in
//! WGS84 longitude/latitude (the grid's outer edges densified to [`PER_SIDE`] segments a
//! side before the bbox is taken, [`crate::lonlat`]); the flight date as the day's
//! `start_datetime`/`end_datetime` (the stack knows the date, not the time, so `datetime`
//! is null as item-spec allows); the projection extension v2.0.0 fields `proj:code`,
//! `proj:projjson`, `proj:bbox`, `proj:shape` (rows, columns) and `proj:transform` (the
//! affine in rasterio order: GDAL's [c0, c1, c2, c3, c4, c5] as [c1, c2, c0, c4, c5, c3]);
//! one asset `stack` (stack.tif) with `bands` (STAC 1.1 common metadata: name, description,
//! unit in UCUM, nodata "nan", data_type float32, statistics), `file:size` and
//! `file:checksum` (file extension v2.1.0: a multihash, `1220` + hex SHA-256); the
//! processing extension v1.2.0's `processing:software`, `processing:lineage` and, on each
//! band-math band, `processing:expression`. `stack.json` stays the full record and is
//! linked as the `metadata` asset.
//!
//! Without GDAL a CRS that [`crate::lonlat`] cannot invert gets no Item: a warning names
//! the CRS and the `gdal` feature, and no footprint is guessed.

use std::io::Write as _;
use std::path::Path;

use serde_json::{json, Map, Value};

use crate::error::{Error, Result};
use crate::grid::Grid;

use super::sidecar::{BandMetadata, StackMetadata};

/// File name of a stack's Item.
pub const ITEM_FILE: &str = "stack.stac.json";
/// File name of a batch's Collection, in the output root.
pub const COLLECTION_FILE: &str = "collection.json";
/// STAC version written.
pub const STAC_VERSION: &str = "1.1.0";
/// Segments per side of the densified footprint.
pub const PER_SIDE: usize = 10;

const PROJECTION: &str = "https://stac-extensions.github.io/projection/v2.0.0/schema.json";
const FILE: &str = "https://stac-extensions.github.io/file/v2.1.0/schema.json";
const PROCESSING: &str = "https://stac-extensions.github.io/processing/v1.2.0/schema.json";

/// UCUM code of a stack unit; `None` for units UCUM has no code for (the stack's own
/// wording is in the band description then).
fn ucum(units: &str) -> Option<&'static str> {
    match units {
        "degrees" => Some("deg"),
        "metres" => Some("m"),
        "1/m" => Some("/m"),
        "1/m2" => Some("/m2"),
        "unitless" => Some(""),
        _ => None,
    }
}

/// One sentence describing a band from its record.
fn describe(b: &BandMetadata) -> String {
    let mut d = b.feature.replace('_', " ");
    if let Some(m) = &b.method {
        d.push_str(&format!(" ({m})"));
    }
    if let Some(r) = b.scale_m {
        d.push_str(&format!(", window radius {r} m"));
    }
    d.push_str(&format!(", from {}", b.source));
    if let Some(date) = &b.date {
        d.push_str(&format!(", {date}"));
    }
    d.push_str(&format!("; units: {}", b.units));
    d
}

fn band_object(b: &BandMetadata, cells: u64) -> Value {
    let mut o = Map::new();
    o.insert("name".into(), b.name.clone().into());
    o.insert("description".into(), describe(b).into());
    if let Some(u) = ucum(&b.units) {
        o.insert("unit".into(), u.into());
    }
    o.insert("nodata".into(), "nan".into());
    o.insert("data_type".into(), "float32".into());
    let mut s = Map::new();
    let s_in = &b.stats;
    for (k, v) in [
        ("minimum", s_in.min),
        ("maximum", s_in.max),
        ("mean", s_in.mean),
        ("stddev", s_in.std),
    ] {
        if let Some(v) = v {
            s.insert(k.into(), v.into());
        }
    }
    s.insert("count".into(), cells.into());
    s.insert("valid_percent".into(), (s_in.valid_fraction * 100.0).into());
    o.insert("statistics".into(), Value::Object(s));
    if let Some(expr) = b.extra.get("expression").and_then(|e| e.as_str()) {
        o.insert(
            "processing:expression".into(),
            json!({"format": "terrastack-band-math", "expression": expr}),
        );
    }
    Value::Object(o)
}

/// Hex SHA-256 as a multihash (code 0x12 sha2-256, length 0x20), as the file extension
/// asks.
fn multihash_sha256(hex: &str) -> String {
    format!("1220{hex}")
}

/// RFC 3339 start and end of a day given as YYYY-MM-DD (UTC).
fn day_span(first: &str, last: &str) -> (String, String) {
    (format!("{first}T00:00:00Z"), format!("{last}T23:59:59Z"))
}

/// The Item of a stack whose metadata is `metadata`, on `grid`, with id `id`, whose
/// `stack.tif` is (for now) at `tif`. `dates` is the first and last flight date
/// (YYYY-MM-DD); `preview` says whether the folder has a preview.png. Returns `Ok(Err(warning))` when no footprint can be computed in this
/// build (nothing is written then); I/O errors reading `tif` are errors.
pub fn item(
    metadata: &StackMetadata,
    grid: &Grid,
    id: &str,
    tif: &Path,
    dates: Option<(&str, &str)>,
    preview: bool,
) -> Result<std::result::Result<Value, String>> {
    let (ring, bbox) = match crate::lonlat::footprint(grid, PER_SIDE) {
        Ok(f) => f,
        Err(e) => {
            return Ok(Err(format!(
                "no STAC Item ({ITEM_FILE}) written: {e}; the footprint would be wrong. Build \
                 terrastack with `--features gdal` to describe stacks in {}",
                grid.crs.label()
            )))
        }
    };
    let Some((first, last)) = dates else {
        return Ok(Err(format!(
            "no STAC Item ({ITEM_FILE}) written: the flight date is unknown (give --date \
             YYYY-MM-DD)"
        )));
    };
    let size = std::fs::metadata(tif).map_err(|e| Error::io(tif, e))?.len();
    let sha = crate::checksum::sha256_file(tif)?;
    let cells = (grid.width * grid.height) as u64;
    let mut bands = metadata.bands.clone();
    bands.sort_by_key(|b| b.index);
    let bands: Vec<Value> = bands.iter().map(|b| band_object(b, cells)).collect();
    let t = grid.transform;
    let (x0, y0, x1, y1) = grid.bounds();
    let (start, end) = day_span(first, last);
    let projjson = crate::projjson::of(&grid.crs);
    let lineage = format!(
        "Predictor layers computed by {} {} from {}; every band's method, window and \
         source are in stack.json.",
        metadata.software.name,
        metadata.software.version,
        metadata
            .sources
            .iter()
            .map(|s| format!("{} ({})", s.role, s.path))
            .collect::<Vec<_>>()
            .join(", ")
    );
    let mut software = Map::new();
    software.insert(
        metadata.software.name.clone(),
        metadata.software.version.clone().into(),
    );
    let coords: Vec<[f64; 2]> = ring.iter().map(|&(x, y)| [x, y]).collect();
    let mut v = json!({
        "type": "Feature",
        "stac_version": STAC_VERSION,
        "stac_extensions": [PROJECTION, FILE, PROCESSING],
        "id": id,
        "geometry": {"type": "Polygon", "coordinates": [coords]},
        "bbox": bbox,
        "properties": {
            "datetime": null,
            "start_datetime": start,
            "end_datetime": end,
            "proj:code": grid.crs.epsg.map(|c| format!("EPSG:{c}")),
            "proj:projjson": projjson,
            "proj:bbox": [x0, y0, x1, y1],
            "proj:shape": [grid.height, grid.width],
            "proj:transform": [t[1], t[2], t[0], t[4], t[5], t[3]],
            "processing:software": software,
            "processing:lineage": lineage,
        },
        "links": [],
        "assets": {
            "stack": {
                "href": "./stack.tif",
                "type": "image/tiff; application=geotiff",
                "title": "Predictor stack",
                "roles": ["data"],
                "bands": bands,
                "file:size": size,
                "file:checksum": multihash_sha256(&sha),
            },
            "metadata": {
                "href": "./stack.json",
                "type": "application/json",
                "title": "Full stack record (terrastack-stack/1)",
                "roles": ["metadata"],
            },
        },
    });
    if preview {
        v["assets"]["preview"] = json!({
            "href": "./preview.png",
            "type": "image/png",
            "title": "Preview sheet",
            "roles": ["overview"],
        });
    }
    Ok(Ok(v))
}

/// Write the Item of a stack being built into `out` (a temporary file committed with the
/// stack). `tif` is the temporary path of its stack.tif. Returns whether an Item was
/// written, and a warning when one is missing for a reason other than an unknown date (an
/// undated stack has no Item, as `--help` says, without a warning).
pub fn add_item(
    out: &mut super::output::OutputDir,
    metadata: &StackMetadata,
    grid: &Grid,
    tif: &Path,
    dates: Option<(&str, &str)>,
    preview: bool,
) -> Result<(bool, Option<String>)> {
    if dates.is_none() {
        return Ok((false, None));
    }
    let id = out
        .dir()
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "stack".into());
    match item(metadata, grid, &id, tif, dates, preview)? {
        Ok(v) => {
            let path = out.temp_path(ITEM_FILE);
            let text = serde_json::to_string_pretty(&v).expect("item serialises") + "\n";
            std::fs::write(&path, text).map_err(|e| Error::io(&path, e))?;
            Ok((true, None))
        }
        Err(warning) => Ok((false, Some(warning))),
    }
}

/// Remove an Item left from an earlier stack in `dir` when this build wrote none (so
/// that no Item describes another stack).
pub fn remove_stale_item(dir: &Path) -> Result<()> {
    let p = dir.join(ITEM_FILE);
    match std::fs::remove_file(&p) {
        Err(e) if e.kind() != std::io::ErrorKind::NotFound => Err(Error::io(&p, e)),
        _ => Ok(()),
    }
}

/// The Collection of a batch in `root`: it links (relative hrefs) every Item found at
/// `items` (paths relative to `root`), its extent the union of their bboxes and date
/// spans. Items that are missing are left out; `None` when there is none.
pub fn collection(root: &Path, id: &str, items: &[String]) -> Result<Option<Value>> {
    let mut bbox = [
        f64::INFINITY,
        f64::INFINITY,
        f64::NEG_INFINITY,
        f64::NEG_INFINITY,
    ];
    let (mut start, mut end): (Option<String>, Option<String>) = (None, None);
    let mut links = vec![
        json!({"rel": "root", "href": format!("./{COLLECTION_FILE}"), "type": "application/json"}),
    ];
    for rel in items {
        let path = root.join(rel);
        let Ok(text) = std::fs::read_to_string(&path) else {
            continue;
        };
        let v: Value = serde_json::from_str(&text).map_err(|e| {
            Error::file(&path, format!("not a STAC Item: {e}"))
                .with_fix("rebuild the stack (the batch rewrites it)")
        })?;
        if let Some(b) = v["bbox"].as_array() {
            let b: Vec<f64> = b.iter().filter_map(Value::as_f64).collect();
            if b.len() == 4 {
                bbox = [
                    bbox[0].min(b[0]),
                    bbox[1].min(b[1]),
                    bbox[2].max(b[2]),
                    bbox[3].max(b[3]),
                ];
            }
        }
        let p = &v["properties"];
        if let Some(s) = p["start_datetime"].as_str() {
            if start.as_deref().is_none_or(|x| s < x) {
                start = Some(s.to_string());
            }
        }
        if let Some(e) = p["end_datetime"].as_str() {
            if end.as_deref().is_none_or(|x| e > x) {
                end = Some(e.to_string());
            }
        }
        links.push(json!({
            "rel": "item",
            "href": format!("./{rel}"),
            "type": "application/geo+json",
            "title": v["id"],
        }));
    }
    if links.len() == 1 {
        return Ok(None);
    }
    Ok(Some(json!({
        "type": "Collection",
        "stac_version": STAC_VERSION,
        "stac_extensions": [],
        "id": id,
        "title": format!("terrastack batch {id}"),
        "description": "Predictor stacks of the flights of one batch and their multi-temporal stack, made by terrastack.",
        "license": "other",
        "extent": {
            "spatial": {"bbox": [bbox]},
            "temporal": {"interval": [[start, end]]},
        },
        "links": links,
    })))
}

/// Write the batch Collection `root/collection.json` (atomically) linking `items`, or
/// remove an old one when no Item exists.
pub fn write_collection(root: &Path, id: &str, items: &[String]) -> Result<()> {
    let path = root.join(COLLECTION_FILE);
    match collection(root, id, items)? {
        Some(v) => {
            let text = serde_json::to_string_pretty(&v).expect("collection serialises") + "\n";
            crate::atomic_file::write_streamed(&path, |w| w.write_all(text.as_bytes()))
        }
        None => remove_stale_item_at(&path),
    }
}

fn remove_stale_item_at(path: &Path) -> Result<()> {
    match std::fs::remove_file(path) {
        Err(e) if e.kind() != std::io::ErrorKind::NotFound => Err(Error::io(path, e)),
        _ => Ok(()),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::grid::Crs;
    use crate::stack::sidecar::{BandStats, GridMetadata, SoftwareMetadata, SourceMetadata};

    fn metadata(grid: &Grid) -> StackMetadata {
        let band = |index: usize, name: &str, units: &str| BandMetadata {
            index,
            name: name.into(),
            feature: "slope".into(),
            method: Some("horn".into()),
            scale_m: None,
            window_px: Some(3),
            units: units.into(),
            source: "dsm".into(),
            date: Some("2026-07-08".into()),
            stats: BandStats {
                min: Some(0.0),
                max: Some(40.0),
                mean: Some(12.5),
                std: Some(3.0),
                valid_fraction: 0.5,
            },
            extra: Default::default(),
        };
        let mut wet = band(2, "wet", "unitless");
        wet.feature = "expression".into();
        wet.extra
            .insert("expression".into(), "(green - nir) / (green + nir)".into());
        StackMetadata {
            format: "terrastack-stack/1".into(),
            grid: GridMetadata::from_grid(grid),
            nodata: "NaN".into(),
            bands: vec![wet, band(1, "slope_horn", "degrees")],
            sources: vec![SourceMetadata {
                role: "dsm".into(),
                path: "dsm.tif".into(),
                sha256: "00".into(),
            }],
            parameters: Value::Null,
            software: SoftwareMetadata::default(),
        }
    }

    #[test]
    fn item_fields() {
        let dir = tempfile::tempdir().unwrap();
        let tif = dir.path().join("stack.tif");
        std::fs::write(&tif, b"abc").unwrap();
        let grid = Grid::new(
            20,
            10,
            [500_000.0, 2.0, 0.0, 5_300_000.0, 0.0, -2.0],
            Crs::from_epsg(32633),
        )
        .unwrap();
        let m = metadata(&grid);
        let v = item(
            &m,
            &grid,
            "may",
            &tif,
            Some(("2026-07-08", "2026-07-08")),
            true,
        )
        .unwrap()
        .unwrap();
        assert_eq!(v["stac_version"], "1.1.0");
        assert_eq!(v["properties"]["proj:code"], "EPSG:32633");
        assert_eq!(v["properties"]["proj:shape"], json!([10, 20]));
        assert_eq!(
            v["properties"]["proj:transform"],
            json!([2.0, 0.0, 500_000.0, 0.0, -2.0, 5_300_000.0])
        );
        assert_eq!(v["properties"]["start_datetime"], "2026-07-08T00:00:00Z");
        let bands = v["assets"]["stack"]["bands"].as_array().unwrap();
        assert_eq!(bands[0]["name"], "slope_horn");
        assert_eq!(bands[0]["unit"], "deg");
        assert_eq!(bands[0]["statistics"]["valid_percent"], 50.0);
        assert_eq!(
            bands[1]["processing:expression"]["expression"],
            "(green - nir) / (green + nir)"
        );
        // SHA-256 of "abc" (FIPS 180-2, appendix B.1) as a multihash.
        assert_eq!(
            v["assets"]["stack"]["file:checksum"],
            "1220ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
        assert_eq!(v["assets"]["stack"]["file:size"], 3);
        // Zone 33 is centred on 15° E; a 40 m wide site at its false easting.
        let bbox: Vec<f64> = v["bbox"]
            .as_array()
            .unwrap()
            .iter()
            .map(|x| x.as_f64().unwrap())
            .collect();
        assert!(
            bbox[0] >= 15.0 && bbox[0] < 15.001 && bbox[2] > 15.0,
            "{bbox:?}"
        );
        assert!(bbox[1] > 47.0 && bbox[3] < 48.0, "{bbox:?}");
        assert_eq!(
            v["geometry"]["coordinates"][0].as_array().unwrap().len(),
            4 * PER_SIDE + 1
        );
    }

    #[test]
    fn no_item_without_date_or_invertible_crs() {
        let dir = tempfile::tempdir().unwrap();
        let tif = dir.path().join("stack.tif");
        std::fs::write(&tif, b"abc").unwrap();
        let grid = Grid::new(2, 2, [0.0, 1.0, 0.0, 0.0, 0.0, -1.0], Crs::from_epsg(4326)).unwrap();
        let w = item(&metadata(&grid), &grid, "x", &tif, None, true)
            .unwrap()
            .unwrap_err();
        assert!(w.contains("--date"), "{w}");
        #[cfg(not(feature = "gdal"))]
        {
            let grid = Grid::new(
                2,
                2,
                [2_600_000.0, 1.0, 0.0, 1_200_000.0, 0.0, -1.0],
                Crs::from_epsg(2056),
            )
            .unwrap();
            let w = item(
                &metadata(&grid),
                &grid,
                "x",
                &tif,
                Some(("2026-07-08", "2026-07-08")),
                true,
            )
            .unwrap()
            .unwrap_err();
            assert!(
                w.contains("EPSG:2056") && w.contains("--features gdal"),
                "{w}"
            );
        }
    }
}

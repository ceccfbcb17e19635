//! Reading labelled samples: CSV tables of points and circles, GeoJSON points, polygons
//! and multipolygons.
//!
//! Every sample comes out with an id, a class and a [`Shape`] in the coordinates of the
//! file. Nothing here knows about the stack; moving lon/lat into the stack's CRS happens in
//! the caller ([`super::to_stack_crs`]).
//!
//! CSV header names are matched case-insensitively, surrounding spaces ignored:
//!
//! | column | accepted names |
//! | --- | --- |
//! | x (required) | `x`, `easting`, `lon`, `longitude` |
//! | y (required) | `y`, `northing`, `lat`, `latitude` |
//! | class (required) | `class`, `label`, or the name given with the class-field option |
//! | radius in metres (optional) | `radius_m`, `radius` |
//! | id (optional) | `id`, `sample_id` |
//!
//! Fields are separated by commas; a field may be quoted with `"` (a doubled `""` inside
//! is one quote). Without an id column, a sample's id is its data-row number (1-based).
//! In GeoJSON the id is the feature's `id`, else its `id` property, else its 1-based
//! position in the file; the radius is the `radius_m` or `radius` property of a point.
//! With the `gdal` feature, other vector formats (GeoPackage, Shapefile, …) are read
//! through OGR with the same attribute names, and their layer's CRS is kept so that the
//! samples can be transformed into the stack's.

use std::path::{Path, PathBuf};

use serde_json::Value;

use crate::error::{Error, Result};

/// Where a sample is, in the coordinates of its file.
#[derive(Clone, Debug, PartialEq)]
pub enum Shape {
    /// A point; with a radius (metres, > 0) a circle around it.
    Point {
        x: f64,
        y: f64,
        radius_m: Option<f64>,
    },
    /// One or more polygons; each is a list of rings (outer first, then holes), each ring
    /// a list of vertices. Cells inside follow the even-odd rule within a polygon and the
    /// union across polygons.
    Polygons(Vec<Vec<Vec<[f64; 2]>>>),
}

impl Shape {
    /// Apply `f` to every coordinate pair (the point, or every polygon vertex), e.g. to
    /// move the sample into another CRS.
    pub fn for_each_position(&mut self, mut f: impl FnMut(&mut f64, &mut f64)) {
        match self {
            Shape::Point { x, y, .. } => f(x, y),
            Shape::Polygons(polys) => {
                for [x, y] in polys.iter_mut().flatten().flatten() {
                    f(x, y);
                }
            }
        }
    }

    /// The sample's anchor: the point itself, or the area-weighted centroid of the
    /// polygons' outer rings (shoelace formula; holes ignored; the mean vertex when the
    /// area is zero). Used for the block of a sample and for aggregated rows.
    pub fn anchor(&self) -> (f64, f64) {
        match self {
            Shape::Point { x, y, .. } => (*x, *y),
            Shape::Polygons(polys) => {
                let (mut a_sum, mut cx, mut cy) = (0.0, 0.0, 0.0);
                let (mut vx, mut vy, mut vn) = (0.0, 0.0, 0.0);
                for ring in polys.iter().filter_map(|p| p.first()) {
                    let n = ring.len();
                    for i in 0..n {
                        let [x0, y0] = ring[i];
                        let [x1, y1] = ring[(i + 1) % n];
                        let cross = x0 * y1 - x1 * y0;
                        a_sum += cross;
                        cx += (x0 + x1) * cross;
                        cy += (y0 + y1) * cross;
                        vx += x0;
                        vy += y0;
                        vn += 1.0;
                    }
                }
                if a_sum.abs() > 0.0 {
                    (cx / (3.0 * a_sum), cy / (3.0 * a_sum))
                } else if vn > 0.0 {
                    (vx / vn, vy / vn)
                } else {
                    (f64::NAN, f64::NAN)
                }
            }
        }
    }
}

/// One labelled sample.
#[derive(Clone, Debug, PartialEq)]
pub struct Sample {
    pub id: String,
    pub class: String,
    pub shape: Shape,
}

/// Samples read from one file.
#[derive(Clone, Debug, PartialEq)]
pub struct SampleFile {
    pub path: PathBuf,
    pub samples: Vec<Sample>,
    /// EPSG code the file declares for its coordinates (GeoJSON's `crs` member), if any;
    /// 4326 for OGC CRS84.
    pub declared_epsg: Option<u32>,
    /// The CRS of the file's layer, for formats read through GDAL/OGR (`gdal` feature);
    /// samples are transformed from it into the stack's CRS.
    pub layer_crs: Option<crate::grid::Crs>,
}

/// Read samples from `path`: `.csv` as CSV, `.geojson`/`.json` as GeoJSON (both pure
/// Rust); with the `gdal` feature any other vector format GDAL reads (GeoPackage,
/// Shapefile, …), taking the class, id and radius from attributes named as in GeoJSON.
/// Without the feature other extensions are refused with a fix. `class_field` names the
/// CSV column or property holding the class (default: `class`, and in CSV also `label`).
pub fn read_samples(path: &Path, class_field: Option<&str>) -> Result<SampleFile> {
    let ext = path
        .extension()
        .and_then(|e| e.to_str())
        .map(|e| e.to_ascii_lowercase())
        .unwrap_or_default();
    if !matches!(ext.as_str(), "csv" | "txt" | "geojson" | "json") {
        return read_other(path, &ext, class_field);
    }
    let text = std::fs::read(path).map_err(|e| Error::io(path, e))?;
    let text = String::from_utf8(text).map_err(|_| {
        Error::file(path, "the file is not UTF-8 text")
            .with_fix("save the samples as UTF-8 CSV or GeoJSON")
    })?;
    let text = text.strip_prefix('\u{feff}').unwrap_or(&text);
    let (samples, declared_epsg) = if ext == "csv" || ext == "txt" {
        (
            parse_csv(text, class_field).map_err(|e| e.in_file(path))?,
            None,
        )
    } else {
        parse_geojson(text, class_field.unwrap_or("class")).map_err(|e| e.in_file(path))?
    };
    Ok(SampleFile {
        path: path.to_path_buf(),
        samples,
        declared_epsg,
        layer_crs: None,
    })
}

/// A vector file of another format: refused without GDAL.
#[cfg(not(feature = "gdal"))]
fn read_other(path: &Path, ext: &str, _class_field: Option<&str>) -> Result<SampleFile> {
    Err(Error::file(
        path,
        format!(
            "this build reads samples from CSV (.csv) and GeoJSON (.geojson, .json), not '.{ext}'"
        ),
    )
    .with_fix(
        "export the samples as CSV with x, y, class columns or as GeoJSON, or build terrastack \
         with `--features gdal` to read every vector format GDAL reads",
    ))
}

/// A vector file of another format, through GDAL/OGR.
#[cfg(feature = "gdal")]
fn read_other(path: &Path, _ext: &str, class_field: Option<&str>) -> Result<SampleFile> {
    use crate::raster::gdal::{read_vector, Geometry};
    let class_field = class_field.unwrap_or("class");
    let features = read_vector(path)?;
    let mut layer_crs = None;
    let mut samples = Vec::with_capacity(features.len());
    let open = |ring: &Vec<(f64, f64)>| {
        let mut r: Vec<[f64; 2]> = ring.iter().map(|&(x, y)| [x, y]).collect();
        if r.len() > 1 && r.first() == r.last() {
            r.pop();
        }
        r
    };
    for (n, f) in features.iter().enumerate() {
        if layer_crs.is_none() {
            layer_crs.clone_from(&f.crs);
        }
        let attr = |name: &str| {
            f.attributes
                .iter()
                .find(|(k, _)| k == name)
                .or_else(|| {
                    f.attributes
                        .iter()
                        .find(|(k, _)| k.eq_ignore_ascii_case(name))
                })
                .map(|(_, v)| v.trim().to_string())
                .filter(|v| !v.is_empty())
        };
        let id = attr("id").unwrap_or_else(|| (n + 1).to_string());
        let what = format!("feature {} (id {id})", n + 1);
        let class = attr(class_field).ok_or_else(|| {
            Error::file(path, format!("{what}: no '{class_field}' attribute"))
                .with_fix(format!(
                    "give every feature a '{class_field}' attribute, or name the class attribute with --class-field"
                ))
        })?;
        let shape = match &f.geometry {
            Geometry::Point(x, y) => {
                let radius_m =
                    match attr("radius_m").or_else(|| attr("radius")) {
                        None => None,
                        Some(t) => match t.parse::<f64>() {
                            Ok(r) if r > 0.0 && r.is_finite() => Some(r),
                            _ => return Err(Error::file(
                                path,
                                format!("{what}: radius '{t}' is not a positive number"),
                            )
                            .with_fix(
                                "give radius_m as a number of metres above 0, or leave it empty",
                            )),
                        },
                    };
                Shape::Point {
                    x: *x,
                    y: *y,
                    radius_m,
                }
            }
            Geometry::Polygon(rings) => Shape::Polygons(vec![rings.iter().map(open).collect()]),
            Geometry::MultiPolygon(polys) => Shape::Polygons(
                polys
                    .iter()
                    .map(|rings| rings.iter().map(open).collect())
                    .collect(),
            ),
        };
        samples.push(Sample { id, class, shape });
    }
    Ok(SampleFile {
        path: path.to_path_buf(),
        samples,
        declared_epsg: None,
        layer_crs,
    })
}

/// Split CSV text into records of fields (RFC 4180 quoting, read by the `csv` crate),
/// with the 1-based line number each record starts on. Blank lines are skipped. A quoted
/// field left open runs to the end of the text; it is refused (an odd number of quote
/// characters in the text is taken as that sign).
fn csv_records(text: &str) -> Result<Vec<(usize, Vec<String>)>> {
    let mut reader = csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(true)
        .from_reader(text.as_bytes());
    let mut records = Vec::new();
    for record in reader.records() {
        let record = record.map_err(|e| {
            let line = e.position().map_or(0, |p| p.line());
            Error::usage(format!("line {line}: not readable as CSV: {e}"))
                .with_fix("save the samples as comma-separated UTF-8 text")
        })?;
        let line = record.position().map_or(0, |p| p.line()) as usize;
        let fields: Vec<String> = record.iter().map(str::to_string).collect();
        let blank = fields.len() == 1 && fields[0].trim().is_empty();
        if !blank {
            records.push((line, fields));
        }
    }
    if text.matches('"').count() % 2 == 1 {
        let line = records.last().map_or(1, |r| r.0);
        return Err(
            Error::usage(format!("line {line}: a quoted field is not closed"))
                .with_fix("close the quote, or double a quote that is part of the text (\"\")"),
        );
    }
    Ok(records)
}

/// Index of the first header matching one of `names` (case-insensitive, trimmed).
fn find_column(header: &[String], names: &[&str]) -> Option<usize> {
    header.iter().position(|h| {
        let h = h.trim().to_ascii_lowercase();
        names.iter().any(|n| h == n.to_ascii_lowercase())
    })
}

fn parse_number(text: &str, what: &str, line: usize) -> Result<f64> {
    let t = text.trim();
    match t.parse::<f64>() {
        Ok(v) if v.is_finite() => Ok(v),
        _ => Err(
            Error::usage(format!("line {line}: {what} '{t}' is not a finite number")).with_fix(
                "write numbers with a decimal point, e.g. 512034.25 (no thousands separators)",
            ),
        ),
    }
}

/// Parse CSV sample text (see the module docs for the accepted column names).
pub fn parse_csv(text: &str, class_field: Option<&str>) -> Result<Vec<Sample>> {
    let records = csv_records(text)?;
    let Some(((_, header), rows)) = records.split_first() else {
        return Err(Error::usage("the CSV file is empty")
            .with_fix("give a header line (x,y,class[,radius_m][,id]) and one line per sample"));
    };
    let col_x = find_column(header, &["x", "easting", "lon", "longitude"]);
    let col_y = find_column(header, &["y", "northing", "lat", "latitude"]);
    let col_class = match class_field {
        Some(name) => find_column(header, &[name]),
        None => find_column(header, &["class", "label"]),
    };
    let (Some(col_x), Some(col_y), Some(col_class)) = (col_x, col_y, col_class) else {
        let hint = if header.len() == 1 && header[0].contains(';') {
            "the header looks semicolon-separated; save the file with commas as separators"
                .to_string()
        } else {
            format!(
                "name the columns x (or easting, lon, longitude), y (or northing, lat, \
                 latitude) and {} ; optional: radius_m (or radius), id (or sample_id)",
                class_field.unwrap_or("class (or label)")
            )
        };
        return Err(Error::usage(format!(
            "line 1: the header ({}) lacks a required column (x, y and class are required)",
            header.join(",")
        ))
        .with_fix(hint));
    };
    let col_radius = find_column(header, &["radius_m", "radius"]);
    let col_id = find_column(header, &["id", "sample_id"]);
    let mut samples = Vec::with_capacity(rows.len());
    for (n, (line, fields)) in rows.iter().enumerate() {
        let line = *line;
        let get = |col: usize| fields.get(col).map(|s| s.as_str()).unwrap_or("");
        if fields.len() != header.len() {
            return Err(Error::usage(format!(
                "line {line}: {} field(s), but the header has {}",
                fields.len(),
                header.len()
            ))
            .with_fix(
                "give every line as many fields as the header; quote fields containing commas",
            ));
        }
        let x = parse_number(get(col_x), "x", line)?;
        let y = parse_number(get(col_y), "y", line)?;
        let class = get(col_class).trim().to_string();
        if class.is_empty() {
            return Err(Error::usage(format!("line {line}: the class is empty"))
                .with_fix("give every sample a class"));
        }
        let radius_m = match col_radius.map(get).map(str::trim) {
            None | Some("") => None,
            Some(t) => {
                let r = parse_number(t, "radius", line)?;
                if r <= 0.0 {
                    return Err(Error::usage(format!(
                        "line {line}: radius {r} is not positive"
                    ))
                    .with_fix("give a radius in metres above 0, or leave the field empty for the one cell under the point"));
                }
                Some(r)
            }
        };
        let id = match col_id.map(get).map(str::trim) {
            Some(t) if !t.is_empty() => t.to_string(),
            _ => (n + 1).to_string(),
        };
        samples.push(Sample {
            id,
            class,
            shape: Shape::Point { x, y, radius_m },
        });
    }
    Ok(samples)
}

/// An EPSG code from a legacy GeoJSON `crs` member ("EPSG:32633",
/// "urn:ogc:def:crs:EPSG::32633", OGC CRS84 → 4326).
fn declared_epsg(root: &Value) -> Option<u32> {
    let name = root.get("crs")?.get("properties")?.get("name")?.as_str()?;
    let upper = name.to_ascii_uppercase();
    if upper.ends_with("CRS84") {
        return Some(4326);
    }
    upper
        .rsplit(':')
        .next()
        .and_then(|code| code.parse::<u32>().ok())
}

fn value_text(v: &Value) -> Option<String> {
    match v {
        Value::String(s) => Some(s.trim().to_string()),
        Value::Number(n) => Some(n.to_string()),
        Value::Bool(b) => Some(b.to_string()),
        _ => None,
    }
}

fn position(v: &Value, what: &str) -> Result<[f64; 2]> {
    let arr = v.as_array().filter(|a| a.len() >= 2);
    let xy = arr.and_then(|a| Some([a[0].as_f64()?, a[1].as_f64()?]));
    match xy {
        Some([x, y]) if x.is_finite() && y.is_finite() => Ok([x, y]),
        _ => Err(
            Error::usage(format!("{what}: a position is not a pair of numbers"))
                .with_fix("write positions as [x, y] arrays of numbers (RFC 7946)"),
        ),
    }
}

fn rings(v: &Value, what: &str) -> Result<Vec<Vec<[f64; 2]>>> {
    let bad = || {
        Error::usage(format!(
            "{what}: polygon coordinates are not a list of rings"
        ))
        .with_fix("write a Polygon as [[[x, y], …]] with at least 4 positions per ring (RFC 7946)")
    };
    let list = v.as_array().ok_or_else(bad)?;
    if list.is_empty() {
        return Err(bad());
    }
    list.iter()
        .map(|ring| {
            let pts = ring.as_array().ok_or_else(bad)?;
            let mut out = pts
                .iter()
                .map(|p| position(p, what))
                .collect::<Result<Vec<_>>>()?;
            if out.len() > 1 && out.first() == out.last() {
                out.pop();
            }
            if out.len() < 3 {
                return Err(bad());
            }
            Ok(out)
        })
        .collect()
}

/// Parse GeoJSON sample text: a FeatureCollection or a single Feature whose geometries are
/// Point, Polygon or MultiPolygon. Returns the samples and the declared EPSG code, if any.
pub fn parse_geojson(text: &str, class_field: &str) -> Result<(Vec<Sample>, Option<u32>)> {
    let root: Value = serde_json::from_str(text).map_err(|e| {
        Error::usage(format!("not valid JSON: {e}"))
            .with_fix("check the file is GeoJSON (a FeatureCollection of features)")
    })?;
    let features: Vec<&Value> = match root.get("type").and_then(Value::as_str) {
        Some("FeatureCollection") => root
            .get("features")
            .and_then(Value::as_array)
            .map(|a| a.iter().collect())
            .ok_or_else(|| {
                Error::usage("the FeatureCollection has no \"features\" list")
                    .with_fix("add the features as a list under \"features\"")
            })?,
        Some("Feature") => vec![&root],
        other => {
            return Err(Error::usage(format!(
                "the GeoJSON root is {}, not a FeatureCollection or Feature",
                other.map_or("untyped".to_string(), |t| format!("a {t}"))
            ))
            .with_fix("wrap the geometries in features carrying the class property"))
        }
    };
    let mut samples = Vec::with_capacity(features.len());
    for (n, f) in features.iter().enumerate() {
        let what = format!("feature {}", n + 1);
        let props = f.get("properties").filter(|p| p.is_object());
        let prop = |name: &str| props.and_then(|p| p.get(name)).filter(|v| !v.is_null());
        let id = f
            .get("id")
            .and_then(value_text)
            .or_else(|| prop("id").and_then(value_text))
            .filter(|s| !s.is_empty())
            .unwrap_or_else(|| (n + 1).to_string());
        let what = format!("{what} (id {id})");
        let class = prop(class_field)
            .and_then(value_text)
            .filter(|s| !s.is_empty())
            .ok_or_else(|| {
                Error::usage(format!("{what}: no '{class_field}' property"))
                    .with_fix(format!(
                        "give every feature a '{class_field}' property, or name the class property with --class-field"
                    ))
            })?;
        let geom = f.get("geometry").filter(|g| !g.is_null()).ok_or_else(|| {
            Error::usage(format!("{what}: the feature has no geometry"))
                .with_fix("give every feature a Point, Polygon or MultiPolygon geometry")
        })?;
        let coords = geom.get("coordinates").unwrap_or(&Value::Null);
        let shape = match geom.get("type").and_then(Value::as_str) {
            Some("Point") => {
                let [x, y] = position(coords, &what)?;
                let radius_m = match prop("radius_m").or_else(|| prop("radius")) {
                    None => None,
                    Some(v) => match v.as_f64() {
                        Some(r) if r > 0.0 && r.is_finite() => Some(r),
                        _ => {
                            return Err(Error::usage(format!(
                                "{what}: the radius property is not a positive number"
                            ))
                            .with_fix("give radius_m as a number of metres above 0, or leave it out"))
                        }
                    },
                };
                Shape::Point { x, y, radius_m }
            }
            Some("Polygon") => Shape::Polygons(vec![rings(coords, &what)?]),
            Some("MultiPolygon") => {
                let polys = coords.as_array().filter(|a| !a.is_empty()).ok_or_else(|| {
                    Error::usage(format!("{what}: MultiPolygon coordinates are not a list of polygons"))
                        .with_fix("write a MultiPolygon as [[[[x, y], …]], …] (RFC 7946)")
                })?;
                Shape::Polygons(
                    polys
                        .iter()
                        .map(|p| rings(p, &what))
                        .collect::<Result<Vec<_>>>()?,
                )
            }
            other => {
                return Err(Error::usage(format!(
                    "{what}: geometry type {} is not supported",
                    other.unwrap_or("(none)")
                ))
                .with_fix("use Point (optionally with a radius_m property), Polygon or MultiPolygon; split multi-points into single points"))
            }
        };
        samples.push(Sample { id, class, shape });
    }
    Ok((samples, declared_epsg(&root)))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn csv_header_names_any_case_and_quotes() {
        let text = "Easting, NORTHING ,Label,Radius_M,ID\r\n\
                    10.5,20.25,\"wet, meadow\",2,a1\r\n\
                    \r\n\
                    11,21,\"reed \"\"tall\"\"\",,a2\r\n";
        let s = parse_csv(text, None).unwrap();
        assert_eq!(s.len(), 2);
        assert_eq!(s[0].id, "a1");
        assert_eq!(s[0].class, "wet, meadow");
        assert_eq!(
            s[0].shape,
            Shape::Point {
                x: 10.5,
                y: 20.25,
                radius_m: Some(2.0)
            }
        );
        assert_eq!(s[1].class, "reed \"tall\"");
        assert_eq!(
            s[1].shape,
            Shape::Point {
                x: 11.0,
                y: 21.0,
                radius_m: None
            }
        );
    }

    #[test]
    fn csv_without_id_numbers_rows_and_custom_class() {
        let s = parse_csv("x,y,habitat\n1,2,fen\n3,4,bog\n", Some("Habitat")).unwrap();
        assert_eq!(s[0].id, "1");
        assert_eq!(s[1].id, "2");
        assert_eq!(s[1].class, "bog");
    }

    #[test]
    fn csv_errors_name_line_and_fix() {
        let e = parse_csv("x,y,class\n1,2,a\n1,zz,b\n", None).unwrap_err();
        let m = e.to_string();
        assert!(
            m.contains("line 3") && m.contains("'zz'") && m.contains("fix:"),
            "{m}"
        );
        let e = parse_csv("x;y;class\n1;2;a\n", None).unwrap_err();
        assert!(e.to_string().contains("semicolon"), "{e}");
        let e = parse_csv("x,y,class,radius\n1,2,a,-1\n", None).unwrap_err();
        assert!(e.to_string().contains("not positive"), "{e}");
        let e = parse_csv("x,y,class\n1,2\n", None).unwrap_err();
        assert!(e.to_string().contains("2 field(s)"), "{e}");
        assert!(parse_csv("", None).is_err());
        assert!(parse_csv("x,y,class\n1,2,\"open\n", None).is_err());
    }

    #[test]
    fn geojson_points_polygons_multipolygons() {
        let text = r#"{"type":"FeatureCollection",
          "crs":{"type":"name","properties":{"name":"urn:ogc:def:crs:EPSG::32633"}},
          "features":[
           {"type":"Feature","id":7,"properties":{"cover":"fen","radius_m":1.5},
            "geometry":{"type":"Point","coordinates":[5.0,6.0]}},
           {"type":"Feature","properties":{"cover":3,"id":"p"},
            "geometry":{"type":"Polygon","coordinates":[[[0,0],[4,0],[4,2],[0,2],[0,0]]]}},
           {"type":"Feature","properties":{"cover":"bog"},
            "geometry":{"type":"MultiPolygon","coordinates":[[[[0,0],[1,0],[1,1],[0,0]]],[[[5,5],[6,5],[6,6],[5,5]]]]}}
          ]}"#;
        let (s, epsg) = parse_geojson(text, "cover").unwrap();
        assert_eq!(epsg, Some(32633));
        assert_eq!(s[0].id, "7");
        assert_eq!(
            s[0].shape,
            Shape::Point {
                x: 5.0,
                y: 6.0,
                radius_m: Some(1.5)
            }
        );
        assert_eq!(s[1].id, "p");
        assert_eq!(s[1].class, "3");
        // Rectangle 0..4 x 0..2: centroid (2, 1) (closed form).
        assert_eq!(s[1].shape.anchor(), (2.0, 1.0));
        assert_eq!(s[2].id, "3");
        match &s[2].shape {
            Shape::Polygons(p) => {
                assert_eq!(p.len(), 2);
                assert_eq!(p[0][0].len(), 3); // closing vertex dropped
            }
            other => panic!("expected polygons, got {other:?}"),
        }
    }

    #[cfg(not(feature = "gdal"))]
    #[test]
    fn other_formats_need_gdal() {
        let e = read_samples(Path::new("plots.gpkg"), None)
            .unwrap_err()
            .to_string();
        assert!(
            e.starts_with("plots.gpkg: this build reads samples from CSV"),
            "{e}"
        );
        assert!(e.contains("--features gdal"), "{e}");
    }

    #[test]
    fn geojson_errors_name_feature() {
        let no_class =
            r#"{"type":"Feature","properties":{},"geometry":{"type":"Point","coordinates":[1,2]}}"#;
        let e = parse_geojson(no_class, "class").unwrap_err().to_string();
        assert!(e.contains("feature 1") && e.contains("'class'"), "{e}");
        let line = r#"{"type":"Feature","properties":{"class":"a"},"geometry":{"type":"LineString","coordinates":[[1,2],[3,4]]}}"#;
        let e = parse_geojson(line, "class").unwrap_err().to_string();
        assert!(e.contains("LineString"), "{e}");
        assert!(parse_geojson("{nope", "class").is_err());
        let crs84 = r#"{"type":"FeatureCollection","crs":{"type":"name","properties":{"name":"urn:ogc:def:crs:OGC:1.3:CRS84"}},"features":[]}"#;
        assert_eq!(parse_geojson(crs84, "class").unwrap().1, Some(4326));
    }
}

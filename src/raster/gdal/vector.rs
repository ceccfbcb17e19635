//! Vector input through OGR (every vector format GDAL reads): labelled points and
//! polygons with their attributes, for drawing training and validation samples.

use std::path::Path;

use gdal::vector::{geometry_type_flatten, LayerAccess, OGRwkbGeometryType};
use gdal::{Dataset, DatasetOptions, GdalOpenFlags};

use super::{crs_from_srs, gdal_message};
use crate::error::{Error, Result};
use crate::grid::Crs;

/// A ring or line of (x, y) vertices in the layer's CRS, x = easting or longitude.
pub type Ring = Vec<(f64, f64)>;

/// The shape of one vector feature, in the traditional GIS axis order of its layer's CRS
/// (x = easting or longitude). Z and M values are dropped.
#[derive(Clone, Debug, PartialEq)]
pub enum Geometry {
    /// One point.
    Point(f64, f64),
    /// A polygon: the outer ring first, then its holes. Rings are closed as OGR stores
    /// them (first vertex repeated at the end).
    Polygon(Vec<Ring>),
    /// Several polygons, each as in [`Geometry::Polygon`].
    MultiPolygon(Vec<Vec<Ring>>),
}

/// One feature of a vector file.
#[derive(Clone, Debug, PartialEq)]
pub struct VectorFeature {
    pub geometry: Geometry,
    /// Every attribute field as (name, value as text); null fields are empty strings.
    pub attributes: Vec<(String, String)>,
    /// CRS of the feature's layer, when the file states one.
    pub crs: Option<Crs>,
}

/// Every feature with a point, polygon or multipolygon geometry from every layer of the
/// vector file at `path`, in file order. Features without geometry are skipped; other
/// geometry types (lines, collections, curves) are refused with an error naming the
/// layer and feature.
pub fn read_vector(path: &Path) -> Result<Vec<VectorFeature>> {
    if !path.exists() {
        return Err(Error::io(
            path,
            std::io::Error::from(std::io::ErrorKind::NotFound),
        ));
    }
    super::quiet_gdal_failures();
    let ds = Dataset::open_ex(
        path,
        DatasetOptions {
            open_flags: GdalOpenFlags::GDAL_OF_READONLY | GdalOpenFlags::GDAL_OF_VECTOR,
            ..Default::default()
        },
    )
    .map_err(|e| {
        Error::file(
            path,
            format!("GDAL cannot open it as a vector file: {}", gdal_message(&e)),
        )
        .with_fix("give points or polygons in a vector format GDAL reads (GeoPackage, GeoJSON, Shapefile, CSV with geometry)")
    })?;
    let mut out = Vec::new();
    for mut layer in ds.layers() {
        let layer_name = layer.name();
        let crs = match layer.spatial_ref() {
            Some(srs) => Some(crs_from_srs(&srs).map_err(|e| e.in_file(path))?),
            None => None,
        };
        for feature in layer.features() {
            let Some(geom) = feature.geometry() else {
                continue;
            };
            let fid = feature.fid().map_or_else(|| "?".into(), |f| f.to_string());
            let geometry = convert(geom).ok_or_else(|| {
                Error::file(
                    path,
                    format!(
                        "feature {fid} of layer \"{layer_name}\" is a {}, but samples must be points, polygons or multipolygons",
                        geom.geometry_name()
                    ),
                )
                .with_fix("keep only point or polygon features in the sample file")
            })?;
            let mut attributes = Vec::with_capacity(feature.field_count());
            for (i, (name, _)) in feature.fields().enumerate() {
                let value = feature
                    .field_as_string(i)
                    .map_err(|e| {
                        Error::file(
                            path,
                            format!(
                                "field \"{name}\" of feature {fid} in layer \"{layer_name}\" cannot be read: {}",
                                gdal_message(&e)
                            ),
                        )
                        .with_fix("check the file's attribute table")
                    })?
                    .unwrap_or_default();
                attributes.push((name, value));
            }
            out.push(VectorFeature {
                geometry,
                attributes,
                crs: crs.clone(),
            });
        }
    }
    Ok(out)
}

/// Our geometry for an OGR geometry, or None for an unsupported type.
fn convert(g: &gdal::vector::Geometry) -> Option<Geometry> {
    match geometry_type_flatten(g.geometry_type()) {
        OGRwkbGeometryType::wkbPoint => {
            let (x, y, _) = g.get_point(0);
            Some(Geometry::Point(x, y))
        }
        OGRwkbGeometryType::wkbPolygon => Some(Geometry::Polygon(rings(g))),
        OGRwkbGeometryType::wkbMultiPolygon => Some(Geometry::MultiPolygon(
            (0..g.geometry_count())
                .map(|i| rings(&g.get_geometry(i)))
                .collect(),
        )),
        _ => None,
    }
}

/// The rings of an OGR polygon, outer first.
fn rings(poly: &gdal::vector::Geometry) -> Vec<Ring> {
    (0..poly.geometry_count())
        .map(|i| {
            let ring = poly.get_geometry(i);
            let mut pts = Vec::new();
            ring.get_points(&mut pts);
            pts.into_iter().map(|(x, y, _)| (x, y)).collect()
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn geojson_points_and_polygons() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("samples.geojson");
        std::fs::write(
            &path,
            r#"{"type":"FeatureCollection",
"crs":{"type":"name","properties":{"name":"urn:ogc:def:crs:EPSG::32633"}},
"features":[
{"type":"Feature","properties":{"class":"reed","plot":3},
 "geometry":{"type":"Point","coordinates":[500010.5,5200020.25]}},
{"type":"Feature","properties":{"class":"willow","plot":4},
 "geometry":{"type":"Polygon","coordinates":[[[0,0],[10,0],[10,10],[0,0]],[[1,1],[2,1],[2,2],[1,1]]]}},
{"type":"Feature","properties":{"class":"sedge","plot":null},
 "geometry":{"type":"MultiPolygon","coordinates":[[[[0,0],[1,0],[1,1],[0,0]]],[[[5,5],[6,5],[6,6],[5,5]]]]}}
]}"#,
        )
        .unwrap();
        let f = read_vector(&path).unwrap();
        assert_eq!(f.len(), 3);
        assert_eq!(f[0].geometry, Geometry::Point(500010.5, 5200020.25));
        assert_eq!(
            f[0].attributes,
            vec![("class".into(), "reed".into()), ("plot".into(), "3".into())]
        );
        assert_eq!(f[0].crs.as_ref().unwrap().epsg, Some(32633));
        match &f[1].geometry {
            Geometry::Polygon(r) => {
                assert_eq!(r.len(), 2);
                assert_eq!(r[0][1], (10.0, 0.0));
                assert_eq!(r[1].len(), 4);
            }
            other => panic!("expected a polygon, got {other:?}"),
        }
        match &f[2].geometry {
            Geometry::MultiPolygon(p) => {
                assert_eq!(p.len(), 2);
                assert_eq!(p[1][0][0], (5.0, 5.0));
            }
            other => panic!("expected a multipolygon, got {other:?}"),
        }
        assert_eq!(f[2].attributes[1], ("plot".into(), String::new()));
    }

    #[test]
    fn lines_refused() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("track.geojson");
        std::fs::write(
            &path,
            r#"{"type":"FeatureCollection","features":[{"type":"Feature","properties":{},
"geometry":{"type":"LineString","coordinates":[[0,0],[1,1]]}}]}"#,
        )
        .unwrap();
        let e = read_vector(&path).unwrap_err().to_string();
        assert!(
            e.contains("track.geojson") && e.contains("LINESTRING"),
            "{e}"
        );
        let e = read_vector(&dir.path().join("none.gpkg")).unwrap_err();
        assert_eq!(e.exit_code(), 1);
    }
}

//! PROJJSON descriptions of coordinate reference systems, for GeoParquet's `crs` and
//! STAC's `proj:projjson`.
//!
//! PROJJSON is PROJ's JSON encoding of ISO 19111 / WKT2 CRSs (schema v0.7,
//! <https://proj.org/schemas/v0.7/projjson.schema.json>). Without GDAL, terrastack writes
//! the CRSs it can describe exactly from their EPSG definitions: WGS 84 geographic
//! (EPSG:4326), WGS 84 / UTM zones north and south (EPSG:326xx, 327xx) and WGS 84 /
//! Pseudo-Mercator (EPSG:3857), with the EPSG parameter values of the Transverse Mercator
//! (method 9807) and Popular Visualisation Pseudo Mercator (method 1024) conversions. The
//! CI cross-check (`scripts/ci/catalog.sh`) reads each back with pyproj and compares it
//! with pyproj's own EPSG definition. With the `gdal` feature any other CRS is exported
//! by GDAL (`OSRExportToPROJJSON`).

use serde_json::{json, Value};

use crate::grid::Crs;

const SCHEMA: &str = "https://proj.org/schemas/v0.7/projjson.schema.json";

fn epsg_id(code: u32) -> Value {
    json!({"authority": "EPSG", "code": code})
}

/// The WGS 84 geographic CRS body (datum, ellipsoid, latitude-longitude axes).
fn wgs84_body() -> Value {
    json!({
        "name": "WGS 84",
        "datum": {
            "type": "GeodeticReferenceFrame",
            "name": "World Geodetic System 1984",
            "ellipsoid": {"name": "WGS 84", "semi_major_axis": 6378137, "inverse_flattening": 298.257223563}
        },
        "coordinate_system": {
            "subtype": "ellipsoidal",
            "axis": [
                {"name": "Geodetic latitude", "abbreviation": "Lat", "direction": "north", "unit": "degree"},
                {"name": "Geodetic longitude", "abbreviation": "Lon", "direction": "east", "unit": "degree"}
            ]
        },
        "id": epsg_id(4326)
    })
}

fn parameter(name: &str, value: f64, unit: &str, code: u32) -> Value {
    json!({"name": name, "value": value, "unit": unit, "id": epsg_id(code)})
}

fn easting_northing() -> Value {
    json!({
        "subtype": "Cartesian",
        "axis": [
            {"name": "Easting", "abbreviation": "E", "direction": "east", "unit": "metre"},
            {"name": "Northing", "abbreviation": "N", "direction": "north", "unit": "metre"}
        ]
    })
}

fn projected(name: &str, conversion: Value, code: u32) -> Value {
    json!({
        "$schema": SCHEMA,
        "type": "ProjectedCRS",
        "name": name,
        "base_crs": wgs84_body(),
        "conversion": conversion,
        "coordinate_system": easting_northing(),
        "id": epsg_id(code)
    })
}

/// PROJJSON of the CRS with EPSG code `code`, for the codes listed in the module docs.
pub fn from_epsg(code: u32) -> Option<Value> {
    match code {
        4326 => {
            let mut v = wgs84_body();
            let obj = v.as_object_mut().expect("object");
            obj.insert("$schema".into(), SCHEMA.into());
            obj.insert("type".into(), "GeographicCRS".into());
            Some(v)
        }
        32601..=32660 | 32701..=32760 => {
            let south = code > 32700;
            let zone = code % 100;
            let hemi = if south { 'S' } else { 'N' };
            let conversion = json!({
                "name": format!("UTM zone {zone}{hemi}"),
                "method": {"name": "Transverse Mercator", "id": epsg_id(9807)},
                "parameters": [
                    parameter("Latitude of natural origin", 0.0, "degree", 8801),
                    parameter("Longitude of natural origin", zone as f64 * 6.0 - 183.0, "degree", 8802),
                    parameter("Scale factor at natural origin", 0.9996, "unity", 8805),
                    parameter("False easting", 500000.0, "metre", 8806),
                    parameter("False northing", if south { 10000000.0 } else { 0.0 }, "metre", 8807),
                ]
            });
            Some(projected(
                &format!("WGS 84 / UTM zone {zone}{hemi}"),
                conversion,
                code,
            ))
        }
        3857 => {
            let conversion = json!({
                "name": "Popular Visualisation Pseudo-Mercator",
                "method": {"name": "Popular Visualisation Pseudo Mercator", "id": epsg_id(1024)},
                "parameters": [
                    parameter("Latitude of natural origin", 0.0, "degree", 8801),
                    parameter("Longitude of natural origin", 0.0, "degree", 8802),
                    parameter("False easting", 0.0, "metre", 8806),
                    parameter("False northing", 0.0, "metre", 8807),
                ]
            });
            Some(projected("WGS 84 / Pseudo-Mercator", conversion, 3857))
        }
        _ => None,
    }
}

/// PROJJSON of `crs`: from its EPSG code for the CRSs of [`from_epsg`]; otherwise, with
/// the `gdal` feature, exported by GDAL from its WKT or EPSG code. `None` when the CRS
/// cannot be described (the caller warns and writes "unknown").
pub fn of(crs: &Crs) -> Option<Value> {
    crs.epsg.and_then(from_epsg).or_else(|| exported(crs))
}

/// PROJJSON of `crs` as GDAL exports it (`OSRExportToPROJJSON`), from its WKT or EPSG code.
#[cfg(feature = "gdal")]
fn exported(crs: &Crs) -> Option<Value> {
    use gdal::spatial_ref::SpatialRef;
    let srs = match (&crs.wkt, crs.epsg) {
        (Some(wkt), _) => SpatialRef::from_wkt(wkt).ok(),
        (None, Some(code)) => SpatialRef::from_epsg(code).ok(),
        _ => None,
    }?;
    serde_json::from_str(&srs.to_projjson().ok()?).ok()
}

/// Without GDAL no other CRS is described.
#[cfg(not(feature = "gdal"))]
fn exported(_crs: &Crs) -> Option<Value> {
    None
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn utm_parameters_follow_the_zone() {
        // EPSG:32633: central meridian 15° E; EPSG:32701: 177° W, false northing 10 000 km
        // (EPSG dataset definitions of the UTM zones).
        let v = from_epsg(32633).unwrap();
        assert_eq!(v["name"], "WGS 84 / UTM zone 33N");
        assert_eq!(v["conversion"]["parameters"][1]["value"], 15.0);
        assert_eq!(v["conversion"]["parameters"][4]["value"], 0.0);
        assert_eq!(v["id"]["code"], 32633);
        let v = from_epsg(32701).unwrap();
        assert_eq!(v["conversion"]["parameters"][1]["value"], -177.0);
        assert_eq!(v["conversion"]["parameters"][4]["value"], 10000000.0);
        assert_eq!(from_epsg(4326).unwrap()["type"], "GeographicCRS");
        assert_eq!(from_epsg(3857).unwrap()["type"], "ProjectedCRS");
        assert!(from_epsg(2056).is_none());
        #[cfg(not(feature = "gdal"))]
        assert!(of(&Crs::from_epsg(25832)).is_none());
    }
}

//! GeoKeys: the GeoKeyDirectory and its double/ASCII parameter tags (OGC GeoTIFF 1.1,
//! OGC 19-008r4, §7.1 and the key tables of §7.4), turned into a [`Crs`] and a raster
//! space, and built back from them.
//!
//! Only what terrastack needs is interpreted: model type, raster type (pixel-is-area or
//! pixel-is-point), the projected, geodetic and vertical CRS codes, the projected linear
//! unit and the citations. A user-defined CRS (code 32767) is kept as projected or
//! geographic with no EPSG code and its linear unit from ProjLinearUnitsGeoKey.

use crate::grid::{Crs, CrsKind, RasterSpace, FOOT_M, US_SURVEY_FOOT_M};

use super::tags::Problem;

// Key identifiers, OGC GeoTIFF 1.1 §7.4 (names as in GeoTIFF 1.0 where they differ).
pub const GT_MODEL_TYPE: u16 = 1024;
pub const GT_RASTER_TYPE: u16 = 1025;
pub const GT_CITATION: u16 = 1026;
pub const GEOGRAPHIC_TYPE: u16 = 2048;
pub const GEOG_CITATION: u16 = 2049;
pub const GEOG_ANGULAR_UNITS: u16 = 2054;
pub const PROJECTED_CS_TYPE: u16 = 3072;
pub const PT_CITATION: u16 = 3073;
pub const PROJ_LINEAR_UNITS: u16 = 3076;
pub const PROJ_LINEAR_UNIT_SIZE: u16 = 3077;
pub const VERTICAL_CS_TYPE: u16 = 4096;

/// "User-defined" code (OGC GeoTIFF 1.1 §7.4).
pub const USER_DEFINED: u16 = 32767;

/// The value of one key.
#[derive(Clone, Debug, PartialEq)]
pub enum KeyValue {
    Short(u16),
    Doubles(Vec<f64>),
    Ascii(String),
}

/// A parsed key directory.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct GeoKeys {
    pub keys: Vec<(u16, KeyValue)>,
}

impl GeoKeys {
    /// Parse the directory (tag 34735) with its double (34736) and ASCII (34737) params.
    pub fn parse(dir: &[u64], doubles: &[f64], ascii: &str) -> Result<GeoKeys, Problem> {
        if dir.len() < 4 {
            return Err("the GeoKeyDirectory tag is shorter than its 4-value header".into());
        }
        let n = dir[3].min(u16::MAX as u64) as usize;
        if dir.len() < 4 + 4 * n {
            return Err(format!(
                "the GeoKeyDirectory announces {n} keys but holds only {}",
                (dir.len() - 4) / 4
            ));
        }
        let mut keys = Vec::with_capacity(n);
        for k in dir[4..4 + 4 * n].chunks_exact(4) {
            let (id, location, count, value) = (k[0] as u16, k[1], k[2] as usize, k[3] as usize);
            let v = match location {
                0 => KeyValue::Short(value as u16),
                34736 => {
                    let end = value.checked_add(count).filter(|e| *e <= doubles.len());
                    match end {
                        Some(end) => KeyValue::Doubles(doubles[value..end].to_vec()),
                        None => {
                            return Err(format!(
                                "GeoKey {id} points past the end of GeoDoubleParams"
                            ))
                        }
                    }
                }
                34737 => {
                    let bytes = ascii.as_bytes();
                    let end = value.checked_add(count).filter(|e| *e <= bytes.len());
                    match end {
                        Some(end) => {
                            let s = String::from_utf8_lossy(&bytes[value..end]);
                            KeyValue::Ascii(s.trim_end_matches(['|', '\0']).to_string())
                        }
                        None => {
                            return Err(format!(
                                "GeoKey {id} points past the end of GeoAsciiParams"
                            ))
                        }
                    }
                }
                // Keys stored in other tags are not needed by terrastack.
                _ => continue,
            };
            keys.push((id, v));
        }
        Ok(GeoKeys { keys })
    }

    fn short(&self, id: u16) -> Option<u16> {
        self.keys.iter().find_map(|(k, v)| match v {
            KeyValue::Short(s) if *k == id => Some(*s),
            _ => None,
        })
    }

    fn double(&self, id: u16) -> Option<f64> {
        self.keys.iter().find_map(|(k, v)| match v {
            KeyValue::Doubles(d) if *k == id => d.first().copied(),
            _ => None,
        })
    }

    fn ascii(&self, id: u16) -> Option<String> {
        self.keys.iter().find_map(|(k, v)| match v {
            KeyValue::Ascii(s) if *k == id && !s.is_empty() => Some(s.clone()),
            _ => None,
        })
    }

    /// Pixel-is-point when GTRasterTypeGeoKey is 2, otherwise pixel-is-area (the default).
    pub fn raster_space(&self) -> RasterSpace {
        if self.short(GT_RASTER_TYPE) == Some(2) {
            RasterSpace::Point
        } else {
            RasterSpace::Area
        }
    }

    /// The CRS the keys describe.
    pub fn crs(&self) -> Crs {
        let model = self.short(GT_MODEL_TYPE);
        let projected = self.short(PROJECTED_CS_TYPE);
        let geographic = self.short(GEOGRAPHIC_TYPE);
        let mut crs = match (model, projected, geographic) {
            (Some(1), _, _) | (None, Some(_), _) => {
                let mut c = match projected {
                    Some(code) if code != USER_DEFINED && code != 0 => Crs::from_epsg(code as u32),
                    _ => {
                        let mut c = Crs::none();
                        c.kind = CrsKind::Projected;
                        c
                    }
                };
                if let Some(u) = self.linear_unit_m() {
                    c.linear_unit_m = Some(u);
                }
                if c.name.is_none() {
                    c.name = self.ascii(PT_CITATION).or_else(|| self.ascii(GT_CITATION));
                }
                c
            }
            (Some(2), _, _) | (None, None, Some(_)) => match geographic {
                Some(code) if code != USER_DEFINED && code != 0 => {
                    let mut c = Crs::from_epsg(code as u32);
                    c.kind = CrsKind::Geographic;
                    c
                }
                _ => {
                    let mut c = Crs::none();
                    c.kind = CrsKind::Geographic;
                    c.name = self
                        .ascii(GEOG_CITATION)
                        .or_else(|| self.ascii(GT_CITATION));
                    c
                }
            },
            _ => {
                let mut c = Crs::none();
                c.name = self.ascii(GT_CITATION);
                c
            }
        };
        if let Some(v) = self.short(VERTICAL_CS_TYPE) {
            if v != USER_DEFINED && v != 0 {
                crs.vertical_epsg = Some(v as u32);
            }
        }
        if crs.epsg.is_none() && crs.kind != CrsKind::Unknown {
            crs.definition = Some(self.definition(crs.kind)).filter(|d| !d.is_empty());
        }
        crs
    }

    /// The keys defining a user-defined CRS of `kind` beyond those [`build`] writes from
    /// the [`Crs`] itself, one per line: `ID s VALUE`, `ID d V1,V2,…` or `ID a TEXT`.
    fn definition(&self, kind: CrsKind) -> String {
        let mut lines = Vec::new();
        for (id, v) in &self.keys {
            if written_from_crs(*id, kind) {
                continue;
            }
            lines.push(match v {
                KeyValue::Short(x) => format!("{id} s {x}"),
                KeyValue::Doubles(d) => {
                    let d: Vec<String> = d.iter().map(|x| format!("{x:?}")).collect();
                    format!("{id} d {}", d.join(","))
                }
                KeyValue::Ascii(t) => format!("{id} a {}", t.replace(['\n', '\r'], " ")),
            });
        }
        lines.sort();
        lines.join("\n")
    }

    /// Metres per projected unit from ProjLinearUnitsGeoKey or ProjLinearUnitSizeGeoKey
    /// for user units. EPSG unit codes and sizes (EPSG registry, exact by definition):
    /// 9001 metre, 9002 international foot 0.3048 m, 9003 US survey foot 1200/3937 m,
    /// 9030 international nautical mile 1852 m, 9036 kilometre, 9093 statute mile
    /// 1609.344 m, 9096 yard 0.9144 m, 9097 chain 20.1168 m, 9098 link 0.201168 m.
    fn linear_unit_m(&self) -> Option<f64> {
        match self.short(PROJ_LINEAR_UNITS)? {
            9001 => Some(1.0),
            9002 => Some(FOOT_M),
            9003 => Some(US_SURVEY_FOOT_M),
            9030 => Some(1852.0),
            9036 => Some(1000.0),
            9093 => Some(1609.344),
            9096 => Some(0.9144),
            9097 => Some(20.1168),
            9098 => Some(0.201168),
            USER_DEFINED => self.double(PROJ_LINEAR_UNIT_SIZE),
            _ => None,
        }
    }

    /// Why the keys' units make cell sizes in metres impossible, if they do: a
    /// user-defined unit size that is not a positive finite length, a user-defined unit
    /// without its size, a unit code terrastack does not know on a CRS without an EPSG
    /// code (an EPSG-coded CRS is completed from its code), or a geographic CRS whose
    /// angles are not degrees (EPSG 9102; 9122 is the same degree).
    pub fn unit_problem(&self) -> Option<String> {
        let crs = self.crs();
        if crs.kind == CrsKind::Projected {
            match self.short(PROJ_LINEAR_UNITS) {
                Some(USER_DEFINED) => match self.double(PROJ_LINEAR_UNIT_SIZE) {
                    Some(u) if u.is_finite() && u > 0.0 => {}
                    Some(u) => {
                        return Some(format!(
                            "its CRS's user-defined linear unit is {u} m long (ProjLinearUnitSizeGeoKey), which is not a length: a unit must be a positive number of metres"
                        ))
                    }
                    None => {
                        return Some(
                            "its CRS has a user-defined linear unit but no ProjLinearUnitSizeGeoKey giving its length in metres".into(),
                        )
                    }
                },
                Some(code) if crs.epsg.is_none() && self.linear_unit_m().is_none() => {
                    return Some(format!(
                        "its user-defined projected CRS is in linear unit EPSG:{code}, which terrastack does not know (it knows metres, kilometres, international and US survey feet, yards, chains, links, statute and nautical miles)"
                    ))
                }
                None if crs.epsg.is_none() => {
                    return Some(
                        "its user-defined projected CRS states no linear unit (ProjLinearUnitsGeoKey), so its cell size in metres is unknown".into(),
                    )
                }
                _ => {}
            }
        }
        if crs.kind == CrsKind::Geographic {
            if let Some(code) = self.short(GEOG_ANGULAR_UNITS) {
                if code != 9102 && code != 9122 {
                    return Some(format!(
                        "its geographic CRS measures angles in unit code {code}, not in degrees (EPSG 9102)"
                    ));
                }
            }
        }
        None
    }
}

/// True for the keys [`build`] writes from a [`Crs`] of `kind` (so a definition leaves
/// them out).
fn written_from_crs(id: u16, kind: CrsKind) -> bool {
    match id {
        GT_MODEL_TYPE | GT_RASTER_TYPE | GT_CITATION | VERTICAL_CS_TYPE => true,
        PROJECTED_CS_TYPE | PROJ_LINEAR_UNITS | PROJ_LINEAR_UNIT_SIZE => kind == CrsKind::Projected,
        GEOGRAPHIC_TYPE | GEOG_ANGULAR_UNITS => kind == CrsKind::Geographic,
        _ => false,
    }
}

/// The keys of a [`Crs::definition`] text; lines that do not parse are skipped.
fn parse_definition(text: &str) -> Vec<(u16, KeyValue)> {
    text.lines()
        .filter_map(|line| {
            let mut parts = line.splitn(3, ' ');
            let id: u16 = parts.next()?.parse().ok()?;
            let kind = parts.next()?;
            let value = parts.next().unwrap_or("");
            let v = match kind {
                "s" => KeyValue::Short(value.parse().ok()?),
                "d" => KeyValue::Doubles(
                    value
                        .split(',')
                        .map(|x| x.parse::<f64>())
                        .collect::<Result<_, _>>()
                        .ok()?,
                ),
                "a" => KeyValue::Ascii(value.to_string()),
                _ => return None,
            };
            Some((id, v))
        })
        .collect()
}

/// Key directory, double params and ASCII params describing `crs` and `space` (with the
/// defining keys of a user-defined CRS, [`Crs::definition`]).
pub fn build(crs: &Crs, space: RasterSpace) -> (Vec<u16>, Vec<f64>, String) {
    let mut shorts: Vec<(u16, u16)> = Vec::new();
    let mut doubles_keys: Vec<(u16, Vec<f64>)> = Vec::new();
    let mut ascii_keys: Vec<(u16, String)> = Vec::new();
    match crs.kind {
        CrsKind::Projected => shorts.push((GT_MODEL_TYPE, 1)),
        CrsKind::Geographic => shorts.push((GT_MODEL_TYPE, 2)),
        CrsKind::Unknown => {}
    }
    shorts.push((
        GT_RASTER_TYPE,
        match space {
            RasterSpace::Area => 1,
            RasterSpace::Point => 2,
        },
    ));
    if let Some(name) = &crs.name {
        ascii_keys.push((GT_CITATION, name.clone()));
    }
    match crs.kind {
        CrsKind::Projected => {
            let code = crs
                .epsg
                .filter(|c| *c < USER_DEFINED as u32)
                .map(|c| c as u16)
                .unwrap_or(USER_DEFINED);
            shorts.push((PROJECTED_CS_TYPE, code));
            if let Some(u) = crs.linear_unit_m {
                let unit = if u == 1.0 {
                    9001
                } else if u == FOOT_M {
                    9002
                } else if u == US_SURVEY_FOOT_M {
                    9003
                } else {
                    doubles_keys.push((PROJ_LINEAR_UNIT_SIZE, vec![u]));
                    USER_DEFINED
                };
                shorts.push((PROJ_LINEAR_UNITS, unit));
            }
        }
        CrsKind::Geographic => {
            let code = crs
                .epsg
                .filter(|c| *c < USER_DEFINED as u32)
                .map(|c| c as u16)
                .unwrap_or(USER_DEFINED);
            shorts.push((GEOGRAPHIC_TYPE, code));
            shorts.push((GEOG_ANGULAR_UNITS, 9102)); // EPSG 9102: degree
        }
        CrsKind::Unknown => {}
    }
    if let Some(v) = crs.vertical_epsg.filter(|c| *c < USER_DEFINED as u32) {
        shorts.push((VERTICAL_CS_TYPE, v as u16));
    }

    if let Some(def) = &crs.definition {
        for (id, v) in parse_definition(def) {
            if written_from_crs(id, crs.kind) {
                continue;
            }
            match v {
                KeyValue::Short(x) => shorts.push((id, x)),
                KeyValue::Doubles(d) => doubles_keys.push((id, d)),
                KeyValue::Ascii(t) => ascii_keys.push((id, t)),
            }
        }
    }

    let mut entries: Vec<[u16; 4]> = Vec::new();
    for (id, v) in shorts {
        entries.push([id, 0, 1, v]);
    }
    let mut doubles = Vec::new();
    for (id, v) in doubles_keys {
        entries.push([id, 34736, v.len() as u16, doubles.len() as u16]);
        doubles.extend(v);
    }
    let mut ascii = String::new();
    for (id, s) in ascii_keys {
        let clean: String = s.chars().map(|c| if c == '|' { '/' } else { c }).collect();
        let start = ascii.len();
        ascii.push_str(&clean);
        ascii.push('|');
        entries.push([id, 34737, (ascii.len() - start) as u16, start as u16]);
    }
    entries.sort_by_key(|e| e[0]);
    // Header: KeyDirectoryVersion 1, KeyRevision 1, MinorRevision 0 (GeoTIFF 1.0 key
    // names, which GDAL and every GeoTIFF 1.1 reader accept), number of keys.
    let mut dir = vec![1u16, 1, 0, entries.len() as u16];
    for e in entries {
        dir.extend_from_slice(&e);
    }
    (dir, doubles, ascii)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn round(crs: &Crs, space: RasterSpace) -> GeoKeys {
        let (dir, doubles, ascii) = build(crs, space);
        let dir: Vec<u64> = dir.into_iter().map(u64::from).collect();
        GeoKeys::parse(&dir, &doubles, &ascii).unwrap()
    }

    #[test]
    fn utm_round_trip() {
        let crs = Crs::from_epsg(32633);
        let k = round(&crs, RasterSpace::Area);
        assert_eq!(k.crs(), crs);
        assert_eq!(k.raster_space(), RasterSpace::Area);
    }

    #[test]
    fn us_feet_and_point_space() {
        // EPSG:2227 (NAD83 / California zone 3 (ftUS)) with EPSG 9003, the US survey foot
        // of 1200/3937 m (EPSG registry).
        let mut crs = Crs::from_epsg(2227);
        crs.linear_unit_m = Some(US_SURVEY_FOOT_M);
        let k = round(&crs, RasterSpace::Point);
        let back = k.crs();
        assert_eq!(back.epsg, Some(2227));
        assert_eq!(back.linear_unit_m, Some(1200.0 / 3937.0));
        assert_eq!(k.raster_space(), RasterSpace::Point);
    }

    #[test]
    fn geographic_with_vertical() {
        let mut crs = Crs::from_epsg(4326);
        crs.vertical_epsg = Some(5773); // EGM96 height (EPSG registry)
        let back = round(&crs, RasterSpace::Area).crs();
        assert_eq!(back.kind, CrsKind::Geographic);
        assert_eq!(back.epsg, Some(4326));
        assert_eq!(back.vertical_epsg, Some(5773));
    }

    #[test]
    fn user_defined_unit_size() {
        let mut crs = Crs::none();
        crs.kind = CrsKind::Projected;
        crs.linear_unit_m = Some(0.201168); // a chain-based unit, value from memory
        crs.name = Some("local grid".into());
        let back = round(&crs, RasterSpace::Area).crs();
        assert_eq!(back.epsg, None);
        assert_eq!(back.linear_unit_m, Some(0.201168));
        assert_eq!(back.name.as_deref(), Some("local grid"));
    }

    /// The key directory of a user-defined transverse Mercator CRS on WGS84 (OGC GeoTIFF
    /// 1.1 §7.4 key codes: 3074 ProjectionGeoKey, 3075 ProjCoordTransGeoKey = 1
    /// transverse Mercator, 3080 natural origin longitude, 3082 false easting, 3092 scale
    /// at natural origin), in `unit` (ProjLinearUnitsGeoKey), central meridian `lon0`.
    fn user_tm_keys(unit: u16, lon0: f64) -> GeoKeys {
        let dir: Vec<u64> = vec![
            1,
            1,
            0,
            8, //
            1024,
            0,
            1,
            1, // projected
            1026,
            34737,
            9,
            0, // citation
            2048,
            0,
            1,
            4326, // WGS 84 base
            3072,
            0,
            1,
            32767, // user-defined projected CRS
            3074,
            0,
            1,
            32767, // user-defined projection
            3075,
            0,
            1,
            1, // transverse Mercator
            3076,
            0,
            1,
            unit as u64, //
            3080,
            34736,
            3,
            0, // lon0, false easting, scale (one block of doubles)
        ];
        let doubles = [lon0, 500_000.0, 0.9996];
        GeoKeys::parse(&dir, &doubles, "site grid|").unwrap()
    }

    #[test]
    fn user_defined_crs_in_metres_and_feet_builds_and_round_trips() {
        // A user-defined CRS has no EPSG code: it equals itself (so a DSM in it can be
        // built on its own grid), not one with another parameter, and writing it back
        // keeps its definition.
        for (unit, metres) in [(9001u16, 1.0), (9002, FOOT_M), (9003, US_SURVEY_FOOT_M)] {
            let keys = user_tm_keys(unit, 9.0);
            assert_eq!(keys.unit_problem(), None);
            let crs = keys.crs();
            assert_eq!((crs.kind, crs.epsg), (CrsKind::Projected, None));
            assert_eq!(crs.linear_unit_m, Some(metres));
            assert!(crs.same_as_without_gdal(&crs.clone()));
            let other = user_tm_keys(unit, 15.0).crs();
            assert!(!crs.same_as_without_gdal(&other));
            let back = round(&crs, RasterSpace::Area).crs();
            assert_eq!(back, crs);
            assert!(back
                .definition
                .as_deref()
                .unwrap()
                .contains("3080 d 9.0,500000.0,0.9996"));
        }
    }

    #[test]
    fn invalid_unit_sizes_have_their_own_message() {
        for size in [0.0, -0.3048, f64::NAN] {
            let dir: Vec<u64> = vec![
                1, 1, 0, 4, 1024, 0, 1, 1, 3072, 0, 1, 32767, 3076, 0, 1, 32767, 3077, 34736, 1, 0,
            ];
            let keys = GeoKeys::parse(&dir, &[size], "").unwrap();
            let p = keys.unit_problem().unwrap();
            assert!(
                p.contains("not a length") && p.contains("ProjLinearUnitSizeGeoKey"),
                "{p}"
            );
        }
        // A user-defined CRS with no unit, and one in a unit code terrastack does not know.
        let dir: Vec<u64> = vec![1, 1, 0, 2, 1024, 0, 1, 1, 3072, 0, 1, 32767];
        let p = GeoKeys::parse(&dir, &[], "")
            .unwrap()
            .unit_problem()
            .unwrap();
        assert!(p.contains("states no linear unit"), "{p}");
        let p = user_tm_keys(9005, 9.0).unit_problem().unwrap();
        assert!(p.contains("EPSG:9005"), "{p}");
        // Geographic in grads (EPSG 9105) is refused; degrees are fine.
        let dir: Vec<u64> = vec![
            1, 1, 0, 3, 1024, 0, 1, 2, 2048, 0, 1, 4326, 2054, 0, 1, 9105,
        ];
        let p = GeoKeys::parse(&dir, &[], "")
            .unwrap()
            .unit_problem()
            .unwrap();
        assert!(p.contains("not in degrees"), "{p}");
    }

    #[test]
    fn short_directory_is_a_problem() {
        assert!(GeoKeys::parse(&[1, 1, 0], &[], "").is_err());
        assert!(GeoKeys::parse(&[1, 1, 0, 3, 1024, 0, 1, 1], &[], "").is_err());
        assert!(GeoKeys::parse(&[1, 1, 0, 1, 3077, 34736, 1, 5], &[1.0], "").is_err());
    }
}

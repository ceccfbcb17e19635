//! Coordinate reference systems through GDAL's spatial-reference API (OSR, which reaches
//! PROJ): reading a CRS into terrastack's [`Crs`], parsing what the user types, comparing
//! two CRSs and transforming points between them.

use std::ffi::CStr;
use std::ptr;

use gdal::spatial_ref::{AxisMappingStrategy, CoordTransform, SpatialRef};

use super::gdal_message;
use crate::error::{Error, Result};
use crate::grid::{Crs, CrsKind};

/// CRS of a GDAL [`SpatialRef`] as a terrastack [`Crs`].
///
/// - `epsg`: the EPSG code of the horizontal CRS (the projected or geographic component
///   of a compound CRS), when the definition carries it or OSR can identify it
///   (`AutoIdentifyEPSG`, then an exact-confidence `FindMatches`).
/// - `wkt`: OGC WKT2 (2019 revision).
/// - `kind`: projected or geographic; anything else (geocentric, engineering, vertical
///   only) is [`CrsKind::Unknown`].
/// - `linear_unit_m`: metres per horizontal unit of a projected CRS (1 for metres,
///   0.3048 for the international foot, 1200/3937 for the US survey foot).
/// - `vertical_epsg`: EPSG code of the vertical component of a compound CRS.
/// - `name`: the CRS's name as OSR gives it.
pub fn crs_from_srs(srs: &SpatialRef) -> Result<Crs> {
    super::quiet_gdal_failures();
    let wkt = export_wkt2(srs)?;
    let kind = if srs.is_projected() {
        CrsKind::Projected
    } else if srs.is_geographic() {
        CrsKind::Geographic
    } else {
        CrsKind::Unknown
    };
    let linear_unit_m = match kind {
        CrsKind::Projected => {
            // SAFETY: the handle is valid for the lifetime of `srs`; a null key asks for
            // the linear unit of the horizontal component.
            let u = unsafe {
                gdal_sys::OSRGetTargetLinearUnits(srs.to_c_hsrs(), ptr::null(), ptr::null_mut())
            };
            (u.is_finite() && u > 0.0).then_some(u)
        }
        _ => None,
    };
    let compound = srs.is_compound();
    let vertical_epsg = if compound {
        epsg_at(srs, Some(c"VERT_CS"))
    } else {
        None
    };
    Ok(Crs {
        epsg: horizontal_epsg(srs, kind, compound),
        wkt: Some(wkt),
        kind,
        linear_unit_m,
        vertical_epsg,
        name: srs.name().filter(|n| !n.is_empty()),
        definition: None,
    })
}

/// Parse a CRS the user typed: "EPSG:32633", an OGC WKT string, a PROJ string
/// ("+proj=utm +zone=33 +datum=WGS84"), or anything else OSR's `SetFromUserInput` reads.
pub fn crs_from_user(text: &str) -> Result<Crs> {
    super::quiet_gdal_failures();
    let trimmed = text.trim();
    if trimmed.is_empty() {
        return Err(Error::usage("the CRS is empty")
            .with_fix("give an EPSG code such as EPSG:32633, a WKT string or a PROJ string"));
    }
    let srs = SpatialRef::from_definition(trimmed).map_err(|e| {
        Error::usage(format!(
            "GDAL cannot read the CRS \"{}\": {}",
            shorten(trimmed),
            gdal_message(&e)
        ))
        .with_fix("give an EPSG code such as EPSG:32633, a WKT string or a PROJ string")
    })?;
    crs_from_srs(&srs)
}

/// Complete a [`Crs`] read without GDAL: WKT, kind, name and linear unit from the EPSG
/// code (or from the WKT when there is no code). A vertical EPSG code the input carried
/// is kept. A CRS with neither code nor WKT is returned unchanged.
pub fn complete_crs(crs: &Crs) -> Result<Crs> {
    if crs.epsg.is_none() && crs.wkt.is_none() {
        return Ok(crs.clone());
    }
    let srs = srs_of(crs)?;
    let mut full = crs_from_srs(&srs)?;
    if full.epsg.is_none() {
        full.epsg = crs.epsg;
    }
    if full.vertical_epsg.is_none() {
        full.vertical_epsg = crs.vertical_epsg;
    }
    Ok(full)
}

/// Whether two CRSs are the same, through OSR's `IsSame` (criterion "equivalent except
/// the axis order of geographic CRSs", data-axis mapping ignored). When either CRS
/// cannot be built by OSR, falls back to [`Crs::same_as_without_gdal`].
pub fn same_crs(a: &Crs, b: &Crs) -> bool {
    if a.kind == CrsKind::Unknown && a.epsg.is_none() && a.wkt.is_none() {
        return a.same_as_without_gdal(b);
    }
    match (srs_of(a), srs_of(b)) {
        (Ok(sa), Ok(sb)) => {
            let opts = [
                c"IGNORE_DATA_AXIS_TO_SRS_AXIS_MAPPING=YES".as_ptr(),
                ptr::null(),
            ];
            // SAFETY: both handles are valid; the option list is NULL-terminated and
            // outlives the call.
            unsafe { gdal_sys::OSRIsSameEx(sa.to_c_hsrs(), sb.to_c_hsrs(), opts.as_ptr()) == 1 }
        }
        _ => a.same_as_without_gdal(b),
    }
}

/// Transform `points` in place from CRS `from` to CRS `to`, in the traditional GIS axis
/// order whatever the CRS definitions say: x is easting or longitude (degrees), y is
/// northing or latitude. Uses the best coordinate operation PROJ offers through OSR.
/// Errors when any point cannot be transformed (out of the projection's domain).
pub fn transform_points(from: &Crs, to: &Crs, points: &mut [(f64, f64)]) -> Result<()> {
    if points.is_empty() {
        return Ok(());
    }
    let mut src = srs_of(from)?;
    let mut dst = srs_of(to)?;
    src.set_axis_mapping_strategy(AxisMappingStrategy::TraditionalGisOrder);
    dst.set_axis_mapping_strategy(AxisMappingStrategy::TraditionalGisOrder);
    let ct = CoordTransform::new(&src, &dst).map_err(|e| {
        Error::usage(format!(
            "GDAL finds no transformation from {} to {}: {}",
            from.label(),
            to.label(),
            gdal_message(&e)
        ))
        .with_fix("check both CRS definitions; PROJ's database must know a path between them")
    })?;
    let mut xs: Vec<f64> = points.iter().map(|p| p.0).collect();
    let mut ys: Vec<f64> = points.iter().map(|p| p.1).collect();
    ct.transform_coords(&mut xs, &mut ys, &mut [])
        .map_err(|e| {
            Error::usage(format!(
                "points could not be transformed from {} to {}: {}",
                from.label(),
                to.label(),
                gdal_message(&e)
            ))
            .with_fix("check that the points lie inside the area where both CRSs are defined")
        })?;
    if let Some(i) = xs
        .iter()
        .zip(ys.iter())
        .position(|(x, y)| !x.is_finite() || !y.is_finite())
    {
        return Err(Error::usage(format!(
            "point {} ({}, {}) has no position in {} after transforming from {}",
            i + 1,
            points[i].0,
            points[i].1,
            to.label(),
            from.label()
        ))
        .with_fix("check that the points lie inside the area where both CRSs are defined"));
    }
    for (p, (x, y)) in points.iter_mut().zip(xs.into_iter().zip(ys)) {
        *p = (x, y);
    }
    Ok(())
}

/// An OSR spatial reference for `crs`: from its WKT when it has one, else from its EPSG
/// code.
pub(crate) fn srs_of(crs: &Crs) -> Result<SpatialRef> {
    super::quiet_gdal_failures();
    if let Some(wkt) = &crs.wkt {
        let srs = SpatialRef::from_wkt(wkt).map_err(|e| {
            Error::usage(format!(
                "GDAL cannot read the WKT of {}: {}",
                crs.label(),
                gdal_message(&e)
            ))
            .with_fix("give the CRS as an EPSG code instead")
        })?;
        return Ok(srs);
    }
    if let Some(code) = crs.epsg {
        return SpatialRef::from_epsg(code).map_err(|e| {
            Error::usage(format!(
                "GDAL does not know EPSG:{code}: {}",
                gdal_message(&e)
            ))
            .with_fix("check the EPSG code; GDAL's PROJ database must contain it")
        });
    }
    Err(Error::usage(format!(
        "{} has neither an EPSG code nor a WKT definition",
        crs.label()
    ))
    .with_fix("assign the CRS the data was produced in"))
}

/// OGC WKT2 (2019) text of `srs`.
fn export_wkt2(srs: &SpatialRef) -> Result<String> {
    let opts = [c"FORMAT=WKT2_2019".as_ptr(), ptr::null()];
    let mut out: *mut std::ffi::c_char = ptr::null_mut();
    // SAFETY: valid handle, NULL-terminated options; the result is owned by us and
    // freed with VSIFree (CPLFree) below.
    let rv = unsafe { gdal_sys::OSRExportToWktEx(srs.to_c_hsrs(), &mut out, opts.as_ptr()) };
    let text = if out.is_null() {
        None
    } else {
        // SAFETY: OSR returned a NUL-terminated string.
        let s = unsafe { CStr::from_ptr(out) }
            .to_string_lossy()
            .into_owned();
        unsafe { gdal_sys::VSIFree(out.cast()) };
        Some(s)
    };
    match text {
        Some(t) if rv == gdal_sys::OGRErr::OGRERR_NONE && !t.is_empty() => Ok(t),
        _ => Err(Error::usage(format!(
            "GDAL cannot write the CRS \"{}\" as WKT2",
            srs.name().unwrap_or_default()
        ))
        .with_fix("give the CRS as an EPSG code")),
    }
}

/// EPSG code of the node `key` (None: the root), when its authority is EPSG.
fn epsg_at(srs: &SpatialRef, key: Option<&CStr>) -> Option<u32> {
    let kp = key.map_or(ptr::null(), |k| k.as_ptr());
    // SAFETY: valid handle; the returned strings belong to the SRS and are copied at once.
    unsafe {
        let name = gdal_sys::OSRGetAuthorityName(srs.to_c_hsrs(), kp);
        if name.is_null()
            || !CStr::from_ptr(name)
                .to_bytes()
                .eq_ignore_ascii_case(b"EPSG")
        {
            return None;
        }
        let code = gdal_sys::OSRGetAuthorityCode(srs.to_c_hsrs(), kp);
        if code.is_null() {
            return None;
        }
        CStr::from_ptr(code).to_str().ok()?.trim().parse().ok()
    }
}

/// EPSG code of the horizontal CRS: stated, auto-identified, or the one exact match
/// OSR finds in PROJ's database.
fn horizontal_epsg(srs: &SpatialRef, kind: CrsKind, compound: bool) -> Option<u32> {
    let key = match (compound, kind) {
        (false, _) => None,
        (true, CrsKind::Projected) => Some(c"PROJCS"),
        (true, CrsKind::Geographic) => Some(c"GEOGCS"),
        (true, CrsKind::Unknown) => return None,
    };
    if let Some(code) = epsg_at(srs, key) {
        return Some(code);
    }
    if compound {
        return None;
    }
    let mut probe = srs.clone();
    if probe.auto_identify_epsg().is_ok() {
        if let Some(code) = epsg_at(&probe, None) {
            return Some(code);
        }
    }
    find_exact_match(srs)
}

/// The EPSG CRS that OSR's `FindMatches` rates at 100 % confidence, if exactly one is.
fn find_exact_match(srs: &SpatialRef) -> Option<u32> {
    let mut n: std::ffi::c_int = 0;
    let mut conf: *mut std::ffi::c_int = ptr::null_mut();
    // SAFETY: valid handle; the returned array and confidences are freed below.
    unsafe {
        let matches = gdal_sys::OSRFindMatches(srs.to_c_hsrs(), ptr::null_mut(), &mut n, &mut conf);
        if matches.is_null() {
            return None;
        }
        let mut found = Vec::new();
        for i in 0..n.max(0) as usize {
            if *conf.add(i) >= 100 {
                let m = SpatialRef::from_c_obj(*matches.add(i)).ok();
                if let Some(code) = m.as_ref().and_then(|m| epsg_at(m, None)) {
                    found.push(code);
                }
            }
        }
        gdal_sys::OSRFreeSRSArray(matches);
        gdal_sys::VSIFree(conf.cast());
        (found.len() == 1).then(|| found[0])
    }
}

/// The first 80 characters of a long definition, for messages.
fn shorten(text: &str) -> String {
    let mut s: String = text.chars().take(80).collect();
    if s.len() < text.len() {
        s.push('…');
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    #[test]
    fn epsg_utm_read_through_osr() {
        let c = crs_from_user("EPSG:32633").unwrap();
        assert_eq!(c.epsg, Some(32633));
        assert_eq!(c.kind, CrsKind::Projected);
        assert_eq!(c.linear_unit_m, Some(1.0));
        assert_eq!(c.name.as_deref(), Some("WGS 84 / UTM zone 33N"));
        assert!(
            c.wkt.as_deref().unwrap().starts_with("PROJCRS["),
            "WKT2 expected"
        );
    }

    #[test]
    fn us_survey_feet_unit() {
        // EPSG:2227 (NAD83 / California zone 3 (ftUS)) is in US survey feet, defined as
        // 1200/3937 m (EPSG:9003).
        let c = crs_from_user("EPSG:2227").unwrap();
        assert_eq!(c.kind, CrsKind::Projected);
        assert_relative_eq!(c.linear_unit_m.unwrap(), 1200.0 / 3937.0, epsilon = 1e-12);
    }

    #[test]
    fn proj_string_identified() {
        // A PROJ string for UTM 33N on WGS84 is EPSG:32633 (the EPSG definition's
        // parameters: lon_0 15°, k 0.9996, x_0 500000 m).
        let c = crs_from_user("+proj=utm +zone=33 +datum=WGS84 +units=m +no_defs").unwrap();
        assert_eq!(c.kind, CrsKind::Projected);
        assert!(same_crs(&c, &Crs::from_epsg(32633)));
    }

    #[test]
    fn compound_crs_splits_codes() {
        // EPSG:32633 + EPSG:5773 (EGM96 height) as a compound CRS.
        let c = crs_from_user("EPSG:32633+5773").unwrap();
        assert_eq!(c.epsg, Some(32633));
        assert_eq!(c.vertical_epsg, Some(5773));
        assert_eq!(c.kind, CrsKind::Projected);
        assert_eq!(c.linear_unit_m, Some(1.0));
    }

    #[test]
    fn garbage_refused_with_fix() {
        let e = crs_from_user("EPSG:not-a-code").unwrap_err().to_string();
        assert!(e.contains("cannot read the CRS"), "{e}");
        assert!(e.contains("fix:"), "{e}");
        assert!(crs_from_user("  ").is_err());
    }

    #[test]
    fn complete_fills_from_code() {
        let c = complete_crs(&Crs::from_epsg(2227)).unwrap();
        assert!(c.wkt.is_some());
        assert_relative_eq!(c.linear_unit_m.unwrap(), 1200.0 / 3937.0, epsilon = 1e-12);
        assert_eq!(complete_crs(&Crs::none()).unwrap(), Crs::none());
    }

    #[test]
    fn wkt_without_code_identified() {
        // WKT1 of UTM 33N with its authority nodes stripped: OSR identifies it again.
        let srs = SpatialRef::from_epsg(32633).unwrap();
        let wkt = srs.to_wkt().unwrap();
        let stripped: String = strip_authority(&wkt);
        assert!(!stripped.contains("AUTHORITY"));
        let c = crs_from_user(&stripped).unwrap();
        assert_eq!(c.epsg, Some(32633));
    }

    fn strip_authority(wkt: &str) -> String {
        let mut out = String::new();
        let mut rest = wkt;
        while let Some(i) = rest.find(",AUTHORITY[") {
            out.push_str(&rest[..i]);
            let after = &rest[i + 1..];
            let end = after.find(']').unwrap();
            rest = &after[end + 1..];
        }
        out.push_str(rest);
        out
    }
}

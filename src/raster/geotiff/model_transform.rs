//! The raster-to-model transform of a GeoTIFF: ModelPixelScale (tag 33550) with one
//! ModelTiepoint (33922), or ModelTransformation (34264) (OGC GeoTIFF 1.1, OGC 19-008r4,
//! §7.3), turned into a GDAL-order geotransform in the file's own raster space.
//!
//! A file whose tags do not define both where the cells lie and how large they are is
//! refused with what is missing: a tiepoint without a pixel scale, a pixel scale without a
//! tiepoint, zero or non-finite scales, a short or non-affine matrix, GeoKeys without any
//! transform. Nothing is ever filled in (no invented 1 m grid at (0, 0)).

/// Why the tags give no usable transform, and the fix.
#[derive(Clone, Debug, PartialEq)]
pub struct TransformProblem {
    pub problem: String,
    pub fix: &'static str,
}

const FIX_GEOREFERENCE: &str = "export the raster again with its georeferencing from the photogrammetry software, or set it with GDAL (`gdal_translate -a_ullr XMIN YMAX XMAX YMIN -a_srs EPSG:XXXX IN OUT.tif`)";
const FIX_WARP: &str = "warp it to a north-up grid first, e.g. `gdalwarp IN OUT.tif`";

fn problem(text: String, fix: &'static str) -> TransformProblem {
    TransformProblem { problem: text, fix }
}

/// The geotransform `[x0, Δx, row term, y0, column term, Δy]` the tags describe, with
/// (x0, y0) where the tags put raster position (0, 0): the corner of cell (0, 0) for
/// pixel-is-area, its centre for pixel-is-point (the caller shifts). `Ok(None)` when the
/// file has no georeferencing at all (no transform tag and no GeoKeys: a plain TIFF).
///
/// - Pixel scale + one tiepoint (I, J, K, X, Y, Z): Δx = Sx, Δy = −Sy and the origin is
///   the tiepoint moved back by I and J cells (GDAL's GTiff driver arithmetic). A
///   negative Sx or Sy describes columns running west or rows running north, which
///   terrastack reads through an index flip; 0 or non-finite scales are refused.
/// - ModelTransformation, row-major 4x4: x = m0·I + m1·J + m3, y = m4·I + m5·J + m7; its
///   last row must be (0, 0, 0, 1) (affine).
/// - More than one tiepoint without a matrix: ground control points, refused.
pub fn from_tags(
    matrix: Option<&[f64]>,
    tiepoints: Option<&[f64]>,
    scale: Option<&[f64]>,
    has_geokeys: bool,
) -> Result<Option<[f64; 6]>, TransformProblem> {
    if let Some(m) = matrix {
        if m.len() < 16 {
            return Err(problem(
                format!(
                    "its ModelTransformation tag holds {} values where a 4x4 matrix needs 16",
                    m.len()
                ),
                FIX_GEOREFERENCE,
            ));
        }
        if m[12] != 0.0 || m[13] != 0.0 || m[14] != 0.0 || m[15] != 1.0 {
            return Err(problem(
                format!(
                    "its ModelTransformation is not affine (last row {}, {}, {}, {} instead of 0, 0, 0, 1)",
                    m[12], m[13], m[14], m[15]
                ),
                FIX_WARP,
            ));
        }
        return Ok(Some([m[3], m[0], m[1], m[7], m[4], m[5]]));
    }
    match (tiepoints, scale) {
        (Some(tp), _) if tp.len() > 6 => Err(problem(
            "it is georeferenced by ground control points, not by a transform".into(),
            FIX_WARP,
        )),
        (Some(tp), _) if tp.len() < 6 => Err(problem(
            format!(
                "its ModelTiepoint tag holds {} values where a tiepoint needs 6 (I, J, K, X, Y, Z)",
                tp.len()
            ),
            FIX_GEOREFERENCE,
        )),
        (Some(_), None) => Err(problem(
            "it has a ModelTiepoint but no ModelPixelScale (and no ModelTransformation), so its cell size is not defined".into(),
            FIX_GEOREFERENCE,
        )),
        (None, Some(_)) => Err(problem(
            "it has a ModelPixelScale but no ModelTiepoint (and no ModelTransformation), so where its cells lie is not defined".into(),
            FIX_GEOREFERENCE,
        )),
        (Some(tp), Some(s)) => {
            if s.len() < 2 {
                return Err(problem(
                    format!(
                        "its ModelPixelScale tag holds {} value(s) where the x and y cell sizes need 2",
                        s.len()
                    ),
                    FIX_GEOREFERENCE,
                ));
            }
            for (axis, v) in [("x", s[0]), ("y", s[1])] {
                if !v.is_finite() || v == 0.0 {
                    return Err(problem(
                        format!(
                            "its ModelPixelScale gives the {axis} cell size as {v}, which is not a usable cell size"
                        ),
                        FIX_GEOREFERENCE,
                    ));
                }
            }
            if tp[3..5].iter().any(|v| !v.is_finite()) || tp[..2].iter().any(|v| !v.is_finite()) {
                return Err(problem(
                    "its ModelTiepoint holds a non-finite coordinate".into(),
                    FIX_GEOREFERENCE,
                ));
            }
            let t1 = s[0];
            let t5 = -s[1];
            Ok(Some([tp[3] - tp[0] * t1, t1, 0.0, tp[4] - tp[1] * t5, 0.0, t5]))
        }
        (None, None) if has_geokeys => Err(problem(
            "it has GeoKeys (a CRS) but no ModelTiepoint + ModelPixelScale or ModelTransformation, so where its cells lie and how large they are is not defined".into(),
            FIX_GEOREFERENCE,
        )),
        (None, None) => Ok(None),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn scale_and_tiepoint_give_the_gdal_transform() {
        // OGC GeoTIFF 1.1 §7.3: tiepoint (I, J) = (2, 3) at (1000, 500) with 0.5 m cells:
        // the corner of cell (0, 0) is (1000 − 2·0.5, 500 + 3·0.5) (closed form).
        let t = from_tags(
            None,
            Some(&[2.0, 3.0, 0.0, 1000.0, 500.0, 0.0]),
            Some(&[0.5, 0.5, 0.0]),
            true,
        );
        assert_eq!(t, Ok(Some([999.0, 0.5, 0.0, 501.5, 0.0, -0.5])));
        // A negative y scale is a south-up file (kept, read through a flip).
        let t = from_tags(None, Some(&[0.0; 6]), Some(&[1.0, -2.0, 0.0]), true);
        assert_eq!(t, Ok(Some([0.0, 1.0, 0.0, 0.0, 0.0, 2.0])));
    }

    #[test]
    fn tiepoint_without_pixel_scale_refused() {
        let e = from_tags(None, Some(&[0.0, 0.0, 0.0, 5.0, 6.0, 0.0]), None, true).unwrap_err();
        assert!(e.problem.contains("no ModelPixelScale"), "{}", e.problem);
        assert!(
            e.problem.contains("cell size is not defined"),
            "{}",
            e.problem
        );
    }

    #[test]
    fn pixel_scale_without_tiepoint_refused() {
        let e = from_tags(None, None, Some(&[1.0, 1.0, 0.0]), true).unwrap_err();
        assert!(e.problem.contains("no ModelTiepoint"), "{}", e.problem);
    }

    #[test]
    fn geokeys_without_transform_refused_plain_tiff_kept() {
        let e = from_tags(None, None, None, true).unwrap_err();
        assert!(e.problem.contains("GeoKeys"), "{}", e.problem);
        assert_eq!(from_tags(None, None, None, false), Ok(None));
    }

    #[test]
    fn zero_or_nan_pixel_scale_refused() {
        let tp = [0.0, 0.0, 0.0, 5.0, 6.0, 0.0];
        for (s, axis) in [
            ([0.0, 1.0, 0.0], "x cell size as 0"),
            ([1.0, f64::NAN, 0.0], "y cell size as NaN"),
            ([f64::INFINITY, 1.0, 0.0], "x cell size as inf"),
        ] {
            let e = from_tags(None, Some(&tp), Some(&s), true).unwrap_err();
            assert!(e.problem.contains(axis), "{}", e.problem);
        }
        let e = from_tags(None, Some(&tp), Some(&[1.0]), true).unwrap_err();
        assert!(e.problem.contains("need 2"), "{}", e.problem);
    }

    #[test]
    fn short_or_projective_matrix_refused() {
        let e = from_tags(Some(&[1.0; 6]), None, None, true).unwrap_err();
        assert!(e.problem.contains("needs 16"), "{}", e.problem);
        let mut m = [0.0; 16];
        m[0] = 1.0;
        m[5] = -1.0;
        m[14] = 0.5;
        m[15] = 1.0;
        let e = from_tags(Some(&m), None, None, true).unwrap_err();
        assert!(e.problem.contains("not affine"), "{}", e.problem);
    }

    #[test]
    fn several_tiepoints_are_ground_control_points() {
        let e = from_tags(None, Some(&[0.0; 12]), None, false).unwrap_err();
        assert!(e.problem.contains("ground control points"), "{}", e.problem);
    }
}

//! The catalogue of terrain features: word, units, method, formula and reference, for the
//! `features` command and the stack's documentation.
//!
//! Citations are short forms of the references in docs/methods.md, which gives each in full
//! with its DOI (checked against the published records).

use serde::Serialize;

/// One documented terrain feature.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct FeatureDoc {
    /// The feature word accepted by `--features` (with its method suffix, if any).
    pub word: &'static str,
    /// The docs/design.md `feature` value.
    pub feature: &'static str,
    pub units: &'static str,
    pub method: &'static str,
    pub formula: &'static str,
    pub reference: &'static str,
    /// What the value is where the raster's edge or a nodata hole cuts the window off.
    pub edges: &'static str,
}

fn doc(
    word: &'static str,
    feature: &'static str,
    units: &'static str,
    method: &'static str,
    formula: &'static str,
    reference: &'static str,
) -> FeatureDoc {
    FeatureDoc {
        word,
        feature,
        units,
        method,
        formula,
        reference,
        edges: edge_rule(feature, method),
    }
}

const HORN: &str = "Horn 1981, Proc. IEEE 69(1), 14–47, doi:10.1109/PROC.1981.11918";
const ZT: &str =
    "Zevenbergen & Thorne 1987, Earth Surf. Process. Landforms 12(1), 47–56, doi:10.1002/esp.3290120107";
const EY: &str = "Evans 1980; Young 1978; as presented by Florinsky 2016";
const WOOD: &str = "Wood 1996, PhD thesis, University of Leicester";
const CURV: &str = "Florinsky 2016, Digital Terrain Analysis in Soil Science and Geology, 2nd ed.; Minár et al. 2020, Earth-Science Reviews 211, 103414, doi:10.1016/j.earscirev.2020.103414";

/// Edge rule of the 3x3 estimators and TRI.
pub const EDGES_3X3: &str =
    "all nine cells of the 3x3 window must be valid, else NaN (no cut windows)";
/// Edge rule of the multi-scale quadratic fit.
pub const EDGES_FIT: &str = "every cell of the fit window must be valid, else NaN (no cut windows)";
/// Edge rule of TPI.
pub const EDGES_TPI: &str = "z minus the centre value of the least-squares plane through the window's valid cells: equal to z − mean on a full window, 0 on any plane where the raster's edge or nodata cuts the window; NaN below the valid fraction or if the valid cells are collinear";
/// Edge rule of DEV.
pub const EDGES_DEV: &str = "numerator as tpi (plane through the valid cells, 0 on any plane, cut or not), divided by the std of the valid cells; NaN below the valid fraction";
/// Edge rule of plain roughness.
pub const EDGES_STD: &str = "std of the valid cells only: on a slope a window cut by the edge or nodata reads lower than a full one (not corrected); NaN below the valid fraction";
/// Edge rule of detrended roughness.
pub const EDGES_DETRENDED: &str = "residuals from the plane through the valid cells: 0 on any plane, cut or not; NaN below the valid fraction";
/// Edge rule of VRM.
pub const EDGES_VRM: &str = "normals of the valid cells (each needs its full 3x3 window): 0 on any plane, cut or not; NaN below the valid fraction";
/// Edge rule of relative elevation and local relief.
pub const EDGES_EXTREMA: &str = "minimum and maximum of the valid cells only: on a slope a window cut by the edge or nodata reads lower than a full one (not corrected); NaN below the valid fraction";

/// The edge rule of a feature key and method (see [`FeatureDoc::edges`]).
pub fn edge_rule(feature: &str, method: &str) -> &'static str {
    match (feature, method) {
        ("elevation", _) => "pointwise: no window",
        (_, "quadratic") => EDGES_FIT,
        ("tpi", _) => EDGES_TPI,
        ("dev", _) => EDGES_DEV,
        ("roughness", m) if m.starts_with("detrended") => EDGES_DETRENDED,
        ("roughness", _) => EDGES_STD,
        ("vrm", _) => EDGES_VRM,
        ("relative_elevation" | "local_relief", _) => EDGES_EXTREMA,
        _ => EDGES_3X3,
    }
}

/// Every terrain feature terrastack computes, one entry per word and method.
pub fn catalogue() -> Vec<FeatureDoc> {
    let mut v = vec![
        doc("elevation", "elevation", "metres", "none", "z × z_factor", "common practice"),
        doc("slope", "slope", "degrees", "horn", "atan(√(p² + q²)); p = ((z3+2z6+z9) − (z1+2z4+z7))/(8hx), q = ((z1+2z2+z3) − (z7+2z8+z9))/(8hy)", HORN),
        doc("slope:zt", "slope", "degrees", "zevenbergen_thorne", "atan(√(p² + q²)); p = (z6 − z4)/(2hx), q = (z2 − z8)/(2hy)", ZT),
        doc("slope:ey", "slope", "degrees", "evans_young", "atan(√(p² + q²)); p = (z3+z6+z9−z1−z4−z7)/(6hx), q = (z1+z2+z3−z7−z8−z9)/(6hy)", EY),
        doc("slope:quadratic", "slope", "degrees", "quadratic", "atan(√(p² + q²)) from the least-squares quadratic over (2k+1)² cells, k = ⌊r/h⌋", WOOD),
        doc("aspect", "aspect", "degrees", "horn", "atan2(−p, −q) mod 360, clockwise from north, downslope; NaN where flat", HORN),
        doc("northness", "northness", "unitless", "horn", "cos(aspect) = −q/√(p² + q²); 0 where flat", HORN),
        doc("eastness", "eastness", "unitless", "horn", "sin(aspect) = −p/√(p² + q²); 0 where flat", HORN),
        doc("profile_curvature", "profile_curvature", "1/m", "evans_young", "kn = −(p²r + 2pqs + q²t)/(g·w^1.5), g = p² + q², w = 1 + g; nodata where √g ≤ 2σp (the gradient within two standard errors of zero; σp from the residual of the local least-squares quadratic, e.g. Evans–Young σp = σ̂/(√6·h), σ̂² = RSS/3); convex positive", CURV),
        doc("plan_curvature", "plan_curvature", "1/m", "evans_young", "kc = −(q²r − 2pqs + p²t)/g^1.5; nodata where √g ≤ 2σp (the gradient within two standard errors of zero; σp from the residual of the local least-squares quadratic, e.g. Evans–Young σp = σ̂/(√6·h), σ̂² = RSS/3); convex positive", CURV),
        doc("tangential_curvature", "tangential_curvature", "1/m", "evans_young", "kt = −(q²r − 2pqs + p²t)/(g·w^0.5); nodata where √g ≤ 2σp (the gradient within two standard errors of zero; σp from the residual of the local least-squares quadratic, e.g. Evans–Young σp = σ̂/(√6·h), σ̂² = RSS/3); convex positive", CURV),
        doc("mean_curvature", "mean_curvature", "1/m", "evans_young", "H = −((1 + q²)r − 2pqs + (1 + p²)t)/(2w^1.5); convex positive", CURV),
        doc("gaussian_curvature", "gaussian_curvature", "1/m2", "evans_young", "K = (rt − s²)/w²", CURV),
        doc("tpi", "tpi", "metres", "square", "z − mean(window)", "Weiss 2001; Guisan et al. 1999, Plant Ecology 143, 107–122, doi:10.1023/A:1009841519580"),
        doc("dev", "dev", "unitless", "square", "(z − mean)/std over the window; 0 where the window is flat", "Wilson & Gallant 2000; De Reu et al. 2013, Geomorphology 186, 39–49, doi:10.1016/j.geomorph.2012.12.015"),
        doc("roughness", "roughness", "metres", "square", "population std of z over the window", "common practice"),
        doc("roughness_detrended", "roughness", "metres", "detrended_square", "population std of residuals from the least-squares plane over the window", "common practice"),
        doc("tri", "tri", "metres", "riley", "√(Σ over 8 neighbours (zᵢ − z5)²)", "Riley, DeGloria & Elliot 1999, Intermountain Journal of Sciences 5(1–4), 23–27"),
        doc("vrm", "vrm", "unitless", "square", "1 − |Σ n|/N, n = (−p, −q, 1)/√(1 + p² + q²) (Horn p, q)", "Sappington, Longshore & Thompson 2007, J. Wildlife Management 71(5), 1419–1426, doi:10.2193/2005-723"),
        doc("relative_elevation", "relative_elevation", "metres", "square", "z − min(window)", "common practice; running extrema after van Herk 1992, Gil & Werman 1993"),
        doc("local_relief", "local_relief", "metres", "square", "max(window) − min(window)", "common practice; running extrema after van Herk 1992, Gil & Werman 1993"),
    ];
    v.push(doc("curvature:zt", "profile_curvature", "1/m", "zevenbergen_thorne", "all five curvatures with r = (z4 − 2z5 + z6)/hx², t = (z2 − 2z5 + z8)/hy², s = (z3 + z7 − z1 − z9)/(4hx·hy)", ZT));
    v.push(doc("curvature:quadratic", "profile_curvature", "1/m", "quadratic", "all five curvatures from the least-squares quadratic over (2k+1)² cells: r = 2a, t = 2b, s = c", WOOD));
    v
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::terrain::{expand, FEATURE_WORDS};

    #[test]
    fn every_catalogue_word_parses_and_every_word_is_documented() {
        for d in catalogue() {
            let f = expand(&[d.word.to_string()], &[1.0]).unwrap();
            assert_eq!(f[0].feature_key(), d.feature, "{}", d.word);
            assert_eq!(f[0].units(), d.units, "{}", d.word);
        }
        let cat = catalogue();
        for (w, _) in FEATURE_WORDS {
            if *w == "curvature" {
                continue;
            }
            assert!(cat.iter().any(|d| d.word == *w), "{w} undocumented");
        }
    }
}

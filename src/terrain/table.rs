//! The feature table: one row per terrain quantity, the one place that says what a feature
//! is called, what it measures and what computes it.
//!
//! Parsing (`--features` words, [`super::words`]), band names and metadata
//! ([`super::feature::TerrainFeature`]), the `features` command ([`super::catalogue`]), the
//! sidecar's edge rule and `terrastack verify` all read this table; the scheduler
//! ([`super::schedule`]) reads each row's [`Kernel`]. A new quantity is one [`Quantity`]
//! variant, one row of [`QUANTITIES`] (in the variant's position) and its kernel.
//!
//! Citations are short forms of the references in docs/methods.md, which gives each in full
//! with its DOI (checked against the published records).

use super::derivatives::{PointJob, Pointwise};
use super::position;
use super::relief_position::relief_position;
use super::roughness;
use super::running_extrema::Extrema;
use super::window_sums::{CellSums, SumOptions};

/// A terrain quantity: what a band measures, before its method and scale are chosen.
/// The discriminant is the row's index in [`QUANTITIES`].
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Quantity {
    Elevation,
    Slope,
    Aspect,
    Northness,
    Eastness,
    ProfileCurvature,
    PlanCurvature,
    TangentialCurvature,
    MeanCurvature,
    GaussianCurvature,
    Tpi,
    Dev,
    Roughness,
    RoughnessDetrended,
    Tri,
    Vrm,
    RelativeElevation,
    LocalRelief,
    ReliefPosition,
}

/// How a quantity is asked for and scaled: the grammar of its word and its window.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Family {
    /// The elevation itself, pointwise: no method, no radius.
    Elevation,
    /// A pointwise function of the partial derivatives: a `:method` suffix picks the
    /// estimator; a radius only with `:quadratic` (the fit window).
    Derivative,
    /// A function of the 3x3 neighbourhood: no method, no radius.
    Index3x3,
    /// A statistic over a window of radius r metres (`WORD@METRES` or `--scales`).
    Window,
}

impl Family {
    /// Lower-case name, as the catalogue shows it.
    pub fn name(self) -> &'static str {
        match self {
            Family::Elevation => "elevation",
            Family::Derivative => "derivative",
            Family::Index3x3 => "3x3 index",
            Family::Window => "window statistic",
        }
    }
}

/// A statistic of a cell's exact window sums ([`super::window_sums`]): the centre cell's
/// quantised elevation (`None` when nodata), the window's cell count, its sums and the
/// minimum valid fraction. Returns the value in the row's units, NaN when undefined.
pub type MomentStat = fn(Option<i64>, u64, &CellSums, f64) -> f64;

/// A statistic of a cell's window extrema: the centre elevation (metres, NaN when
/// nodata), the block's extrema, the output cell (row, column), the window's cell count,
/// its valid cells and the minimum valid fraction.
pub type ExtremaStat = fn(f64, &Extrema, usize, usize, u64, i64, f64) -> f64;

/// What computes a quantity. The scheduler runs one pass per kind, sharing the kind's
/// intermediates between the features that need them (one set of derivatives per
/// estimator and scale, one set of window sums or extrema per radius).
#[derive(Clone, Copy, Debug)]
pub enum Kernel {
    /// z × z_factor.
    Elevation,
    /// A pointwise function of p, q, r, s, t from the feature's estimator.
    Derivative(Pointwise),
    /// A job of the fused 3x3 pass that is not a derivative ([`PointJob::Tri`]).
    Index3x3(PointJob),
    /// A statistic of exact window sums; `sums` says which moments it needs.
    Moments { sums: SumOptions, stat: MomentStat },
    /// A statistic of the window's exact minimum and maximum.
    Extrema(ExtremaStat),
    /// The vector ruggedness measure ([`super::vrm`]).
    Vrm,
}

/// One documented word and method of a quantity (a line of `terrastack features`).
#[derive(Clone, Copy, Debug)]
pub struct MethodDoc {
    /// The word as typed, with its method suffix ("slope:zt").
    pub word: &'static str,
    /// The method label of the band's metadata ("zevenbergen_thorne", "disc", "none").
    pub method: &'static str,
    pub formula: &'static str,
    pub reference: &'static str,
}

/// One row of the feature table.
#[derive(Clone, Copy, Debug)]
pub struct QuantityRow {
    pub quantity: Quantity,
    /// The word of `--features` and recipes.
    pub word: &'static str,
    /// The docs/design.md `feature` value (the sidecar's `feature`, the preview's ramp).
    pub key: &'static str,
    /// The band name before its method and radius ("roughness_detrended" in
    /// "roughness_detrended_r2m").
    pub stem: &'static str,
    /// "degrees", "metres", "1/m", "1/m2" or "unitless".
    pub units: &'static str,
    pub family: Family,
    pub kernel: Kernel,
    /// For a 3x3 index, its method label ("riley"); for a window statistic, a prefix to
    /// the window shape ("detrended_" gives "detrended_disc"); unused otherwise.
    pub method_label: &'static str,
    /// Cells of context needed beyond the window (VRM: each window cell's own 3x3).
    pub halo_beyond_window: usize,
    /// One line for the list of valid words.
    pub summary: &'static str,
    /// What the value is where the raster's edge or a hole cuts the window (the quadratic
    /// fit has its own rule, [`EDGES_FIT`]).
    pub edges: &'static str,
    /// Its lines in `terrastack features`.
    pub docs: &'static [MethodDoc],
}

/// A word that asks for several quantities at once ("curvature").
#[derive(Clone, Copy, Debug)]
pub struct WordGroup {
    pub word: &'static str,
    /// The quantities, in band order; all of one family.
    pub members: &'static [Quantity],
    pub summary: &'static str,
    /// Lines of `terrastack features` for the group's own methods (feature and units of
    /// the first member).
    pub docs: &'static [MethodDoc],
}

const HORN: &str = "Horn 1981, Proc. IEEE 69(1), 14–47, doi:10.1109/PROC.1981.11918";
const ZT: &str =
    "Zevenbergen & Thorne 1987, Earth Surf. Process. Landforms 12(1), 47–56, doi:10.1002/esp.3290120107";
const EY: &str = "Evans 1980; Young 1978; as presented by Florinsky 2016";
const WOOD: &str = "Wood 1996, PhD thesis, University of Leicester";
const CURV: &str = "Florinsky 2016, Digital Terrain Analysis in Soil Science and Geology, 2nd ed.; Minár et al. 2020, Earth-Science Reviews 211, 103414, doi:10.1016/j.earscirev.2020.103414";
const EXTREMA: &str = "common practice; running extrema after van Herk 1992, Gil & Werman 1993";

/// Edge rule of elevation.
pub const EDGES_POINTWISE: &str = "pointwise: no window";
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

/// Edge rule of relief position.
pub const EDGES_RELIEF_POSITION: &str = "minimum and maximum of the valid cells only, as relative_elevation; NaN where the window is flat (maximum = minimum) or below the valid fraction";

/// The undefined rule of kn, kc, kt, shared by their formulas.
macro_rules! gated {
    ($f:literal) => {
        concat!($f, "; nodata where √g ≤ 2σp (the gradient within two standard errors of zero; σp from the residual of the local least-squares quadratic, e.g. Evans–Young σp = σ̂/(√6·h), σ̂² = RSS/3); convex positive")
    };
}

const fn doc(
    word: &'static str,
    method: &'static str,
    formula: &'static str,
    reference: &'static str,
) -> MethodDoc {
    MethodDoc {
        word,
        method,
        formula,
        reference,
    }
}

/// A derivative quantity's row (key = stem = word).
const fn derivative(
    quantity: Quantity,
    word: &'static str,
    units: &'static str,
    f: Pointwise,
    summary: &'static str,
    docs: &'static [MethodDoc],
) -> QuantityRow {
    QuantityRow {
        quantity,
        word,
        key: word,
        stem: word,
        units,
        family: Family::Derivative,
        kernel: Kernel::Derivative(f),
        method_label: "",
        halo_beyond_window: 0,
        summary,
        edges: EDGES_3X3,
        docs,
    }
}

/// A window statistic's row (key = stem = word, method = the window shape).
const fn window(
    quantity: Quantity,
    word: &'static str,
    units: &'static str,
    kernel: Kernel,
    summary: &'static str,
    edges: &'static str,
    docs: &'static [MethodDoc],
) -> QuantityRow {
    QuantityRow {
        quantity,
        word,
        key: word,
        stem: word,
        units,
        family: Family::Window,
        kernel,
        method_label: "",
        halo_beyond_window: 0,
        summary,
        edges,
        docs,
    }
}

/// Which window sums a moment statistic needs.
const fn sums(squares: bool, plane: bool) -> SumOptions {
    SumOptions { squares, plane }
}

/// Every terrain quantity, in [`Quantity`] order (checked at compile time).
pub const QUANTITIES: &[QuantityRow] = &[
    QuantityRow {
        quantity: Quantity::Elevation,
        word: "elevation",
        key: "elevation",
        stem: "elevation",
        units: "metres",
        family: Family::Elevation,
        kernel: Kernel::Elevation,
        method_label: "",
        halo_beyond_window: 0,
        summary: "elevation × z factor",
        edges: EDGES_POINTWISE,
        docs: &[doc("elevation", "none", "z × z_factor", "common practice")],
    },
    derivative(
        Quantity::Slope,
        "slope",
        "degrees",
        Pointwise::Slope,
        "slope, Horn; slope:zt, slope:ey, slope:quadratic (over the scales)",
        &[
            doc("slope", "horn", "atan(√(p² + q²)); p = ((z3+2z6+z9) − (z1+2z4+z7))/(8hx), q = ((z1+2z2+z3) − (z7+2z8+z9))/(8hy)", HORN),
            doc("slope:zt", "zevenbergen_thorne", "atan(√(p² + q²)); p = (z6 − z4)/(2hx), q = (z2 − z8)/(2hy)", ZT),
            doc("slope:ey", "evans_young", "atan(√(p² + q²)); p = (z3+z6+z9−z1−z4−z7)/(6hx), q = (z1+z2+z3−z7−z8−z9)/(6hy)", EY),
            doc("slope:quadratic", "quadratic", "atan(√(p² + q²)) from the least-squares quadratic over (2k+1)² cells, k = ⌊r/h⌋", WOOD),
        ],
    ),
    derivative(
        Quantity::Aspect,
        "aspect",
        "degrees",
        Pointwise::Aspect,
        "aspect (same method suffixes as slope)",
        &[doc("aspect", "horn", "atan2(−p, −q) mod 360, clockwise from north, downslope; NaN where flat", HORN)],
    ),
    derivative(
        Quantity::Northness,
        "northness",
        "unitless",
        Pointwise::Northness,
        "cos(aspect) (same method suffixes)",
        &[doc("northness", "horn", "cos(aspect) = −q/√(p² + q²); 0 where flat", HORN)],
    ),
    derivative(
        Quantity::Eastness,
        "eastness",
        "unitless",
        Pointwise::Eastness,
        "sin(aspect) (same method suffixes)",
        &[doc("eastness", "horn", "sin(aspect) = −p/√(p² + q²); 0 where flat", HORN)],
    ),
    derivative(
        Quantity::ProfileCurvature,
        "profile_curvature",
        "1/m",
        Pointwise::Profile,
        "profile curvature kn (suffixes as curvature)",
        &[doc("profile_curvature", "evans_young", gated!("kn = −(p²r + 2pqs + q²t)/(g·w^1.5), g = p² + q², w = 1 + g"), CURV)],
    ),
    derivative(
        Quantity::PlanCurvature,
        "plan_curvature",
        "1/m",
        Pointwise::Plan,
        "plan curvature kc",
        &[doc("plan_curvature", "evans_young", gated!("kc = −(q²r − 2pqs + p²t)/g^1.5"), CURV)],
    ),
    derivative(
        Quantity::TangentialCurvature,
        "tangential_curvature",
        "1/m",
        Pointwise::Tangential,
        "tangential curvature kt",
        &[doc("tangential_curvature", "evans_young", gated!("kt = −(q²r − 2pqs + p²t)/(g·w^0.5)"), CURV)],
    ),
    derivative(
        Quantity::MeanCurvature,
        "mean_curvature",
        "1/m",
        Pointwise::Mean,
        "mean curvature H",
        &[doc("mean_curvature", "evans_young", "H = −((1 + q²)r − 2pqs + (1 + p²)t)/(2w^1.5); convex positive", CURV)],
    ),
    derivative(
        Quantity::GaussianCurvature,
        "gaussian_curvature",
        "1/m2",
        Pointwise::Gaussian,
        "Gaussian curvature K",
        &[doc("gaussian_curvature", "evans_young", "K = (rt − s²)/w²", CURV)],
    ),
    window(
        Quantity::Tpi,
        "tpi",
        "metres",
        Kernel::Moments { sums: sums(false, true), stat: position::tpi },
        "topographic position index, per scale",
        EDGES_TPI,
        &[doc("tpi", "square", "z − mean(window)", "Weiss 2001; Guisan et al. 1999, Plant Ecology 143, 107–122, doi:10.1023/A:1009841519580")],
    ),
    window(
        Quantity::Dev,
        "dev",
        "unitless",
        Kernel::Moments { sums: sums(true, true), stat: position::dev },
        "deviation from mean elevation, per scale",
        EDGES_DEV,
        &[doc("dev", "square", "(z − mean)/std over the window; 0 where the window is flat", "Wilson & Gallant 2000; De Reu et al. 2013, Geomorphology 186, 39–49, doi:10.1016/j.geomorph.2012.12.015")],
    ),
    window(
        Quantity::Roughness,
        "roughness",
        "metres",
        Kernel::Moments {
            sums: sums(true, false),
            stat: |_, cells, s, frac| roughness::std_dev(cells, s, frac),
        },
        "standard deviation of elevation, per scale",
        EDGES_STD,
        &[doc("roughness", "square", "population std of z over the window", "common practice")],
    ),
    QuantityRow {
        quantity: Quantity::RoughnessDetrended,
        word: "roughness_detrended",
        key: "roughness",
        stem: "roughness_detrended",
        units: "metres",
        family: Family::Window,
        kernel: Kernel::Moments {
            sums: sums(true, true),
            stat: |_, cells, s, frac| roughness::detrended_std(cells, s, frac),
        },
        method_label: "detrended_",
        halo_beyond_window: 0,
        summary: "std of residuals from a fitted plane, per scale",
        edges: EDGES_DETRENDED,
        docs: &[doc("roughness_detrended", "detrended_square", "population std of residuals from the least-squares plane over the window", "common practice")],
    },
    QuantityRow {
        quantity: Quantity::Tri,
        word: "tri",
        key: "tri",
        stem: "tri",
        units: "metres",
        family: Family::Index3x3,
        kernel: Kernel::Index3x3(PointJob::Tri),
        method_label: "riley",
        halo_beyond_window: 0,
        summary: "terrain ruggedness index, 3x3",
        edges: EDGES_3X3,
        docs: &[doc("tri", "riley", "√(Σ over 8 neighbours (zᵢ − z5)²)", "Riley, DeGloria & Elliot 1999, Intermountain Journal of Sciences 5(1–4), 23–27")],
    },
    QuantityRow {
        halo_beyond_window: 1,
        ..window(
            Quantity::Vrm,
            "vrm",
            "unitless",
            Kernel::Vrm,
            "vector ruggedness measure, per scale",
            EDGES_VRM,
            &[doc("vrm", "square", "1 − |Σ n|/N, n = (−p, −q, 1)/√(1 + p² + q²) (Horn p, q)", "Sappington, Longshore & Thompson 2007, J. Wildlife Management 71(5), 1419–1426, doi:10.2193/2005-723")],
        )
    },
    window(
        Quantity::RelativeElevation,
        "relative_elevation",
        "metres",
        Kernel::Extrema(position::relative_elevation),
        "z − window minimum, per scale",
        EDGES_EXTREMA,
        &[doc("relative_elevation", "square", "z − min(window)", EXTREMA)],
    ),
    window(
        Quantity::LocalRelief,
        "local_relief",
        "metres",
        Kernel::Extrema(|_, ex, i, j, cells, n, frac| position::local_relief(ex, i, j, cells, n, frac)),
        "window maximum − minimum, per scale",
        EDGES_EXTREMA,
        &[doc("local_relief", "square", "max(window) − min(window)", EXTREMA)],
    ),
    window(
        Quantity::ReliefPosition,
        "relief_position",
        "percent",
        Kernel::Extrema(relief_position),
        "where z lies between window minimum (0) and maximum (100), per scale",
        EDGES_RELIEF_POSITION,
        &[doc("relief_position", "square", "100 · (z − min(window)) / (max(window) − min(window)); NaN where the window is flat", "percent elevation range, Newman, Lindsay & Cockburn 2018, Geomorphology 312, 40–50")],
    ),
];

/// Words that ask for several quantities. Each is listed among the valid words just
/// before its first member.
pub const GROUPS: &[WordGroup] = &[WordGroup {
    word: "curvature",
    members: &[
        Quantity::ProfileCurvature,
        Quantity::PlanCurvature,
        Quantity::TangentialCurvature,
        Quantity::MeanCurvature,
        Quantity::GaussianCurvature,
    ],
    summary: "all five curvatures, Evans–Young; curvature:zt, curvature:quadratic",
    docs: &[
        doc("curvature:zt", "zevenbergen_thorne", "all five curvatures with r = (z4 − 2z5 + z6)/hx², t = (z2 − 2z5 + z8)/hy², s = (z3 + z7 − z1 − z9)/(4hx·hy)", ZT),
        doc("curvature:quadratic", "quadratic", "all five curvatures from the least-squares quadratic over (2k+1)² cells: r = 2a, t = 2b, s = c", WOOD),
    ],
}];

// Each row sits at its quantity's index.
const _: () = {
    let mut i = 0;
    while i < QUANTITIES.len() {
        assert!(
            QUANTITIES[i].quantity as usize == i,
            "QUANTITIES out of Quantity order"
        );
        i += 1;
    }
};

impl Quantity {
    /// This quantity's row of the table.
    pub fn row(self) -> &'static QuantityRow {
        &QUANTITIES[self as usize]
    }

    /// The quantity whose word is `word`.
    pub fn from_word(word: &str) -> Option<Quantity> {
        QUANTITIES
            .iter()
            .find(|r| r.word == word)
            .map(|r| r.quantity)
    }
}

/// The edge rule of a feature key and method label (as the sidecar records them; see
/// [`QuantityRow::edges`]): the fit's rule for `quadratic`, else that of the row with this
/// key whose method label the method starts with (the longest such label).
pub fn edge_rule(feature: &str, method: &str) -> &'static str {
    if method == "quadratic" {
        return EDGES_FIT;
    }
    QUANTITIES
        .iter()
        .filter(|r| r.key == feature && method.starts_with(r.method_label))
        .max_by_key(|r| r.method_label.len())
        .map_or(EDGES_3X3, |r| r.edges)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn words_stems_and_group_members_are_distinct_and_consistent() {
        for (i, a) in QUANTITIES.iter().enumerate() {
            for b in &QUANTITIES[i + 1..] {
                assert_ne!(a.word, b.word);
                assert_ne!(a.stem, b.stem);
            }
            assert!(!GROUPS.iter().any(|g| g.word == a.word), "{}", a.word);
            assert_eq!(Quantity::from_word(a.word), Some(a.quantity));
            assert!(!a.docs.is_empty(), "{} undocumented", a.word);
            assert!(a.docs.iter().all(|d| d.word.starts_with(a.word)));
        }
        for g in GROUPS {
            let family = g.members[0].row().family;
            assert!(
                g.members.iter().all(|q| q.row().family == family),
                "{}",
                g.word
            );
        }
    }

    #[test]
    fn edge_rules_by_key_and_method() {
        assert_eq!(edge_rule("elevation", "none"), EDGES_POINTWISE);
        assert_eq!(edge_rule("slope", "horn"), EDGES_3X3);
        assert_eq!(edge_rule("slope", "quadratic"), EDGES_FIT);
        assert_eq!(edge_rule("roughness", "square"), EDGES_STD);
        assert_eq!(edge_rule("roughness", "detrended_disc"), EDGES_DETRENDED);
        assert_eq!(edge_rule("local_relief", "disc"), EDGES_EXTREMA);
        assert_eq!(edge_rule("tri", "riley"), EDGES_3X3);
    }
}

//! The ground filter's bands in a stack: the feature words, their metadata, the halo a
//! block needs and the computation of one block (called by `stack::executor`).
//!
//! Words: `dtm`, `height`, `ground`, `ground_distance`, and any terrain word followed by
//! [`ON_DTM`] (`slope@dtm`, `tpi@5@dtm`, `curvature:quadratic@10@dtm`), which computes that
//! terrain feature on the ground surface instead of the DSM. Its band is named like the
//! DSM's with `_dtm` appended (`slope_horn_dtm`), with `source` "dtm" in `stack.json`.

use ndarray::{s, Array2, ArrayView2};

use super::{filter, GroundParams};
use crate::grid::CellSizes;
use crate::terrain::{TerrainFeature, TerrainParams};

/// Suffix of a terrain word computed on the DTM.
pub const ON_DTM: &str = "@dtm";

/// The ground words with a one-line description each (for `terrastack features`).
pub const GROUND_WORDS: &[(&str, &str)] = &[
    (
        "dtm",
        "ground elevation under the DSM (simple morphological filter), metres",
    ),
    ("height", "DSM − dtm: height above ground, metres"),
    (
        "ground",
        "1 ground, 0 above ground, 2 no ground cell within the reach",
    ),
    (
        "ground_distance",
        "metres to the nearest ground cell (how far dtm is interpolated)",
    ),
    (
        "WORD@dtm",
        "any terrain word on the dtm instead of the DSM, e.g. slope@dtm, tpi@5@dtm",
    ),
];

/// One documented ground feature (a line of `terrastack features`).
#[derive(Clone, Debug, PartialEq, serde::Serialize)]
pub struct GroundDoc {
    pub word: &'static str,
    /// The docs/design.md `feature` value (`"<terrain key>"` for `WORD@dtm`).
    pub feature: &'static str,
    pub units: &'static str,
    pub method: &'static str,
    pub formula: &'static str,
    pub reference: &'static str,
    pub edges: &'static str,
}

/// Reference of every ground feature.
pub const REFERENCE: &str = "Pingel, Clarke & McBride 2013 (simple morphological filter), \
     doi:10.1016/j.isprsjprs.2012.12.002; interpolation and NDVI guidance: docs/methods.md";

/// The ground features, for `terrastack features`.
pub fn catalogue() -> Vec<GroundDoc> {
    let edges = "the filter treats cells beyond the raster and nodata as missing; a cell \
                 farther than the reach from any ground cell has no ground (dtm, height nodata; \
                 ground 2)";
    let doc = |word, units, formula| GroundDoc {
        word,
        feature: word,
        units,
        method: "smrf",
        formula,
        reference: REFERENCE,
        edges,
    };
    vec![
        doc(
            "dtm",
            "metres",
            "openings of growing radius remove objects narrower than --ground-max-object; \
             removed cells interpolated from ground cells along four lines",
        ),
        doc("height", "metres", "DSM − dtm"),
        doc(
            "ground",
            "unitless",
            "1 where |DSM − dtm| ≤ --ground-threshold + --ground-scaling · |∇dtm|, else 0; \
             2 where no ground cell lies within --ground-reach",
        ),
        doc(
            "ground_distance",
            "metres",
            "Euclidean distance to the nearest ground cell of the filter (how far dtm is \
             interpolated), nodata beyond --ground-reach",
        ),
        GroundDoc {
            word: "WORD@dtm",
            feature: "the terrain word's",
            units: "the terrain word's",
            method: "the terrain word's",
            formula: "any terrain word computed on dtm instead of the DSM (slope@dtm, \
                      tpi@5@dtm); band name + `_dtm`, source `dtm`",
            reference: REFERENCE,
            edges: "the terrain word's, on dtm (nodata where dtm is)",
        },
    ]
}

/// One ground band of the stack.
#[derive(Clone, Debug, PartialEq)]
pub enum GroundBand {
    Dtm,
    Height,
    Ground,
    Distance,
    /// Output `i` of `terrain::compute` over [`GroundPlan::dtm_features`] on the DTM.
    OnDtm(usize),
}

impl GroundBand {
    /// The band of a ground word (`dtm`, `height`, `ground`, `ground_distance`).
    pub fn from_word(word: &str) -> Option<GroundBand> {
        Some(match word {
            "dtm" => GroundBand::Dtm,
            "height" => GroundBand::Height,
            "ground" => GroundBand::Ground,
            "ground_distance" => GroundBand::Distance,
            _ => return None,
        })
    }

    /// (band name = feature key, units) of the filter's own bands; `None` for [`GroundBand::OnDtm`].
    pub fn name_and_units(&self) -> Option<(&'static str, &'static str)> {
        Some(match self {
            GroundBand::Dtm => ("dtm", "metres"),
            GroundBand::Height => ("height", "metres"),
            GroundBand::Ground => ("ground", "unitless"),
            GroundBand::Distance => ("ground_distance", "metres"),
            GroundBand::OnDtm(_) => return None,
        })
    }
}

/// The terrain word of a `WORD@dtm` word, if it is one.
pub fn on_dtm_word(word: &str) -> Option<&str> {
    word.strip_suffix(ON_DTM).filter(|w| !w.is_empty())
}

/// What the stack's ground bands need.
#[derive(Clone, Debug)]
pub struct GroundPlan {
    pub params: GroundParams,
    /// The grid's smallest cell size, metres (fixes the opening radii for every block).
    pub h_min: f64,
    /// Cells of context the filter needs ([`GroundParams::halo_px`], at most the raster's
    /// longer side: beyond it a padded block holds the whole raster anyway).
    pub filter_halo: usize,
    /// Terrain features computed on the DTM.
    pub dtm_features: Vec<TerrainFeature>,
    /// Cells of context those features need.
    pub dtm_halo: usize,
}

impl GroundPlan {
    /// Cells of context a block needs on each side.
    pub fn halo(&self) -> usize {
        self.filter_halo + self.dtm_halo
    }

    /// The filter's parameters as recorded on each ground band (`ground_filter` in
    /// `stack.json`), with the opening radii used.
    pub fn record(&self) -> serde_json::Value {
        let p = &self.params;
        let radii = p.radii(self.h_min);
        serde_json::json!({
            "method": "simple morphological filter (Pingel, Clarke & McBride 2013), docs/methods.md",
            "reference": "doi:10.1016/j.isprsjprs.2012.12.002",
            "max_object_m": p.max_object_m,
            "slope_threshold": p.slope,
            "elevation_threshold_m": p.elevation_threshold_m,
            "elevation_scaling_m": p.slope_scale_m,
            "window": p.shape.name(),
            "openings": radii.len(),
            "radius_step_m": radii.first().copied().unwrap_or(0.0),
            "max_radius_m": p.max_radius_m(),
            "interpolation": "line pairs along four directions, weights 1/span², one-sided 1/d² at edges",
            "reach_m": p.reach_m,
            "ndvi_guidance_max": p.ndvi_max,
            "ground_codes": "1 ground, 0 above ground, 2 no ground cell within reach_m (dtm, height nodata)",
        })
    }
}

/// The ground bands `wanted` over the interior of the padded block `z` (metres, after the
/// z factor; `halo` cells on each side, at least [`GroundPlan::halo`]); `excluded` marks
/// cells that are not ground candidates (NDVI guidance). `terrain` = (parameters,
/// reference elevation) of the terrain features on the DTM (see `terrain::compute`; the
/// DTM is already in metres, so the z factor is not applied again).
pub fn compute_block(
    plan: &GroundPlan,
    z: ArrayView2<f64>,
    cells: &CellSizes,
    halo: usize,
    excluded: Option<ArrayView2<bool>>,
    terrain: (&TerrainParams, f64),
    wanted: &[GroundBand],
) -> Vec<Array2<f32>> {
    let (terrain_params, reference_z) = terrain;
    let (nr, nc) = z.dim();
    let (out_r, out_c) = (nr.saturating_sub(2 * halo), nc.saturating_sub(2 * halo));
    let layers = filter(z, cells, excluded, plan.h_min, &plan.params);
    let interior = |a: &Array2<f64>| {
        a.slice(s![halo..halo + out_r, halo..halo + out_c])
            .mapv(|v| v as f32)
    };
    let on_dtm = if wanted.iter().any(|b| matches!(b, GroundBand::OnDtm(_))) {
        let k = halo - plan.dtm_halo.min(halo);
        let sub = layers.dtm.slice(s![k..nr - k, k..nc - k]);
        let sub_cells = CellSizes {
            hx: cells.hx[k.min(cells.hx.len())..(nr - k).min(cells.hx.len())].to_vec(),
            hy: cells.hy[k.min(cells.hy.len())..(nr - k).min(cells.hy.len())].to_vec(),
        };
        let params = TerrainParams {
            z_factor: 1.0,
            ..terrain_params.clone()
        };
        crate::terrain::compute(
            &plan.dtm_features,
            sub,
            &sub_cells,
            halo - k,
            reference_z,
            &params,
        )
    } else {
        Vec::new()
    };
    wanted
        .iter()
        .map(|b| match b {
            GroundBand::Dtm => interior(&layers.dtm),
            GroundBand::Height => interior(&layers.height),
            GroundBand::Ground => layers
                .ground
                .slice(s![halo..halo + out_r, halo..halo + out_c])
                .to_owned(),
            GroundBand::Distance => interior(&layers.distance),
            GroundBand::OnDtm(i) => on_dtm[*i].clone(),
        })
        .collect()
}

//! The texture bands of a stack: the feature words, what each band needs (source, window,
//! quantiser, halo), its `stack.json` record, and the computation of one block (called by
//! `stack::executor` with the block's reflectance read over the block and its halo).
//!
//! Words (docs/methods.md, "Texture bands"): a texture quantity, an optional radius in
//! metres, and the source, joined by `@`:
//!
//! - `glcm@R@SOURCE`: the four co-occurrence features ([`super::glcm`]);
//!   `glcm_contrast@R@SOURCE`, `glcm_homogeneity@…`, `glcm_entropy@…`,
//!   `glcm_correlation@…` one each;
//! - `stddev@R@SOURCE`: the window standard deviation ([`super::first_order`]).
//!
//! Without `@R` (`glcm@ndvi`) a word expands over the recipe's scales, like the windowed
//! terrain words. SOURCE is a mapped band role (`nir`, `red`, an `extra:NAME` band by its
//! NAME), a catalogue index (`ndvi`) or a band-math expression by its name. Bands are
//! named `glcm_contrast_r1p5m_ndvi`, `stddev_r2m_nir`.

use std::collections::BTreeMap;

use ndarray::{s, Array2};

use super::first_order::window_std;
use super::glcm::{glcm_features, GlcmWindow, Quantiser};
use super::settings::TextureSettings;
use crate::error::{Error, Result};
use crate::grid::CellSizes;
use crate::spectral::{self, BandArrays, Expression, Role, SpectralIndex};
use crate::terrain::feature::radius_label;
use crate::terrain::{radius_cells, WindowShape};

/// One texture word as `terrastack features` lists it.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize)]
pub struct TextureWordDoc {
    pub word: &'static str,
    pub units: &'static str,
    pub summary: &'static str,
}

/// The texture words, for `terrastack features`.
pub const TEXTURE_WORDS: &[TextureWordDoc] = &[
    TextureWordDoc {
        word: "glcm@R@SOURCE",
        units: "",
        summary: "the four co-occurrence features below, square window of radius R metres",
    },
    TextureWordDoc {
        word: "glcm_contrast@R@SOURCE",
        units: "levels^2",
        summary: "co-occurrence contrast Σ P(i,j)(i − j)²",
    },
    TextureWordDoc {
        word: "glcm_homogeneity@R@SOURCE",
        units: "unitless",
        summary: "co-occurrence homogeneity Σ P(i,j)/(1 + (i − j)²), 0 to 1",
    },
    TextureWordDoc {
        word: "glcm_entropy@R@SOURCE",
        units: "nats",
        summary: "co-occurrence entropy −Σ P(i,j) ln P(i,j)",
    },
    TextureWordDoc {
        word: "glcm_correlation@R@SOURCE",
        units: "unitless",
        summary: "co-occurrence correlation Σ P(i,j)(i − μ)(j − μ)/σ², −1 to 1",
    },
    TextureWordDoc {
        word: "stddev@R@SOURCE",
        units: "unitless",
        summary: "population standard deviation of the source in a window of radius R metres \
                  (first-order texture; --window square or disc)",
    },
];

/// Reference of the co-occurrence features.
pub const GLCM_REFERENCE: &str = "Haralick, Shanmugam & Dinstein 1973, IEEE Trans. SMC-3(6), \
     610–621, doi:10.1109/TSMC.1973.4309314";

/// One texture quantity.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord)]
pub enum TextureQuantity {
    Contrast,
    Homogeneity,
    Entropy,
    Correlation,
    StdDev,
}

/// The co-occurrence quantities, in [`super::glcm::FEATURE_NAMES`] order.
const GLCM_QUANTITIES: [TextureQuantity; 4] = [
    TextureQuantity::Contrast,
    TextureQuantity::Homogeneity,
    TextureQuantity::Entropy,
    TextureQuantity::Correlation,
];

impl TextureQuantity {
    /// The `feature` value in `stack.json`, also the word (and band-name stem).
    pub fn key(self) -> &'static str {
        match self {
            TextureQuantity::Contrast => "glcm_contrast",
            TextureQuantity::Homogeneity => "glcm_homogeneity",
            TextureQuantity::Entropy => "glcm_entropy",
            TextureQuantity::Correlation => "glcm_correlation",
            TextureQuantity::StdDev => "stddev",
        }
    }

    /// Position among the outputs of [`glcm_features`], `None` for the standard deviation.
    fn glcm_output(self) -> Option<usize> {
        GLCM_QUANTITIES.iter().position(|&q| q == self)
    }

    /// Units of the band.
    pub fn units(self) -> &'static str {
        match self {
            TextureQuantity::Contrast => "levels^2",
            TextureQuantity::Entropy => "nats",
            // Reflectance, indices and band math are all unitless.
            _ => "unitless",
        }
    }

    /// The quantities a word's base names: `glcm` the four, a key one.
    fn of_word(base: &str) -> Option<Vec<TextureQuantity>> {
        if base == "glcm" {
            return Some(GLCM_QUANTITIES.to_vec());
        }
        GLCM_QUANTITIES
            .iter()
            .chain(&[TextureQuantity::StdDev])
            .find(|q| q.key() == base)
            .map(|&q| vec![q])
    }
}

/// What a texture band is computed from.
#[derive(Clone, Debug)]
pub enum TextureSource {
    /// The reflectance of a mapped band.
    Band(Role),
    /// A catalogue index.
    Index(&'static SpectralIndex),
    /// A band-math expression of the recipe.
    Expression(Expression),
}

impl PartialEq for TextureSource {
    fn eq(&self, other: &TextureSource) -> bool {
        match (self, other) {
            (TextureSource::Band(a), TextureSource::Band(b)) => a == b,
            (TextureSource::Index(a), TextureSource::Index(b)) => a.name == b.name,
            (TextureSource::Expression(a), TextureSource::Expression(b)) => a == b,
            _ => false,
        }
    }
}

impl TextureSource {
    /// The name the word gives it (`nir`, `ndvi`, the expression's name).
    pub fn name(&self) -> String {
        match self {
            TextureSource::Band(r) => r.name().to_string(),
            TextureSource::Index(i) => i.name.to_string(),
            TextureSource::Expression(e) => e.name().to_string(),
        }
    }

    /// The quantisation range used when the settings name none: reflectance 0..1, an
    /// index's valid range when both ends are finite; `None` otherwise (an unbounded
    /// index, band math), where the user must state one.
    pub fn default_range(&self) -> Option<(f64, f64)> {
        match self {
            TextureSource::Band(_) => Some((0.0, 1.0)),
            TextureSource::Index(i) => {
                let (lo, hi) = i.valid_range;
                (lo.is_finite() && hi.is_finite()).then_some((lo, hi))
            }
            TextureSource::Expression(_) => None,
        }
    }

    /// The source's values over a block of reflectance.
    fn values(&self, r: &BandArrays) -> Result<Array2<f32>> {
        match self {
            TextureSource::Band(role) => Ok(r.require(role, "a texture band")?.clone()),
            TextureSource::Index(i) => i.compute(r),
            TextureSource::Expression(e) => e.eval(r),
        }
    }
}

/// One texture band of a stack.
#[derive(Clone, Debug, PartialEq)]
pub struct TextureBand {
    pub quantity: TextureQuantity,
    pub source: TextureSource,
    /// Window radius, metres.
    pub radius_m: f64,
    /// Co-occurrence window half-widths (columns, rows) in cells, from the grid's smallest
    /// cell sizes; the standard deviation's windows follow each row's cell size instead.
    pub half_px: (usize, usize),
    /// Grey levels (co-occurrence only).
    pub quantiser: Option<Quantiser>,
    /// Pair distance, cells (co-occurrence only).
    pub distance_px: usize,
}

/// What the plan knows of the stack that a texture word needs.
pub struct TextureContext<'a> {
    /// Roles of the mapped bands.
    pub mapped: &'a [Role],
    /// The recipe's expressions, name → text.
    pub expressions: &'a BTreeMap<String, String>,
    /// The recipe's scales (radii in metres) for words without `@R`.
    pub scales_m: &'a [f64],
    pub settings: &'a TextureSettings,
    /// Smallest cell sizes of the grid (x, y), metres.
    pub h_min: (f64, f64),
}

/// True when `word` (lower case) is a texture word: its part before the first `@` is
/// `glcm`, a co-occurrence quantity or `stddev`.
pub fn is_texture_word(word: &str) -> bool {
    let base = word.split('@').next().unwrap_or("");
    TextureQuantity::of_word(base).is_some()
}

/// The bands of one texture word. Refuses a word without a source, a source that is not
/// mapped, an unknown quantity, and a quantisation range that cannot be known.
/// Radii are returned unchecked against the grid (the plan checks them as it checks every
/// windowed radius).
pub fn plan_word(word: &str, ctx: &TextureContext) -> Result<Vec<TextureBand>> {
    let parts: Vec<&str> = word.split('@').collect();
    let usage = || {
        Error::usage(format!(
            "texture word `{word}` does not name its source band or index"
        ))
        .with_fix(
            "write QUANTITY@RADIUS@SOURCE or QUANTITY@SOURCE, e.g. glcm@1.5@ndvi, stddev@2@nir",
        )
    };
    let (quantities, radius_text, source_text) = match parts.as_slice() {
        [q, source] => (TextureQuantity::of_word(q), None, *source),
        [q, r, source] => (TextureQuantity::of_word(q), Some(*r), *source),
        _ => return Err(usage()),
    };
    let quantities = quantities.ok_or_else(usage)?;
    if source_text.is_empty() {
        return Err(usage());
    }
    let radii: Vec<f64> = match radius_text {
        Some(t) => match t.parse::<f64>() {
            Ok(r) => {
                crate::terrain::check_radius_value(r, &format!("`{word}`"))?;
                vec![r]
            }
            Err(_) => {
                return Err(Error::usage(format!(
                    "texture word `{word}` has radius `{t}`, which is not a number of metres"
                ))
                .with_fix("write the radius in metres between the two `@`, e.g. glcm@1.5@ndvi"))
            }
        },
        None if ctx.scales_m.is_empty() => {
            return Err(Error::usage(format!(
                "texture word `{word}` has no radius and no scales are set"
            ))
            .with_fix(format!(
                "give the radius in the word, e.g. {}@1.5@{source_text}, or set --scales",
                parts[0]
            )))
        }
        None => ctx.scales_m.to_vec(),
    };
    let source = find_source(word, source_text, ctx)?;
    let glcm = quantities.iter().any(|q| q.glcm_output().is_some());
    let quantiser = if glcm {
        let range = ctx
            .settings
            .ranges
            .get(&source.name())
            .copied()
            .or_else(|| source.default_range())
            .ok_or_else(|| {
                Error::usage(format!(
                    "texture word `{word}`: `{}` has no fixed range of values to quantise into grey levels",
                    source.name()
                ))
                .with_fix(format!(
                    "state one with --texture-range {}=LOW..HIGH (or ranges in the recipe's [texture] table)",
                    source.name()
                ))
            })?;
        Some(Quantiser::new(range.0, range.1, ctx.settings.levels)?)
    } else {
        None
    };
    let mut out = Vec::new();
    for &r in &radii {
        for &q in &quantities {
            out.push(TextureBand {
                quantity: q,
                source: source.clone(),
                radius_m: r,
                half_px: (radius_cells(r, ctx.h_min.0), radius_cells(r, ctx.h_min.1)),
                quantiser: q.glcm_output().and(quantiser),
                distance_px: ctx.settings.distance_px,
            });
        }
    }
    Ok(out)
}

/// The source a word names: a mapped role, a catalogue index whose bands are mapped, or an
/// expression of the recipe.
fn find_source(word: &str, text: &str, ctx: &TextureContext) -> Result<TextureSource> {
    if let Some((name, expr)) = ctx.expressions.get_key_value(text) {
        return Ok(TextureSource::Expression(Expression::parse(name, expr)?));
    }
    if let Ok(index) = spectral::find_index(text) {
        if let Some(missing) = index
            .required_roles()
            .into_iter()
            .find(|r| !ctx.mapped.contains(r))
        {
            return Err(Error::usage(format!(
                "texture word `{word}`: index {} needs the `{missing}` band, which is not mapped",
                index.name
            ))
            .with_fix(format!(
                "map it with --ortho FILE --bands {missing}=N or --band {missing}=FILE"
            )));
        }
        return Ok(TextureSource::Index(index));
    }
    if let Ok(role) = Role::named(text) {
        if ctx.mapped.contains(&role) {
            return Ok(TextureSource::Band(role));
        }
    }
    let mapped: Vec<&str> = ctx.mapped.iter().map(|r| r.name()).collect();
    Err(Error::usage(format!(
        "texture word `{word}`: `{text}` is neither a mapped band nor an index nor an expression of the recipe"
    ))
    .with_fix(format!(
        "name a mapped band ({}), an index such as ndvi, or an expression's name",
        if mapped.is_empty() {
            "none is mapped: --ortho FILE --bands ...".to_string()
        } else {
            mapped.join(", ")
        }
    )))
}

impl TextureBand {
    /// The band's name: `glcm_contrast_r1p5m_ndvi`, `stddev_r2m_nir`.
    pub fn band_name(&self) -> String {
        format!(
            "{}_r{}m_{}",
            self.quantity.key(),
            radius_label(self.radius_m),
            self.source.name()
        )
    }

    /// Cells of context the band needs on each side of a block.
    pub fn halo_px(&self) -> usize {
        self.half_px.0.max(self.half_px.1)
    }

    /// The `method` of its `stack.json` record.
    pub fn method(&self, shape: WindowShape) -> String {
        match self.quantity {
            TextureQuantity::StdDev => format!("window_std_{}", shape.name()),
            _ => "glcm_4_directions_square".to_string(),
        }
    }

    /// Fields of its `stack.json` record beyond the common ones: the quantisation and
    /// offsets of the co-occurrence features, the window, the edge rule, the reference.
    pub fn record(&self, shape: WindowShape) -> serde_json::Map<String, serde_json::Value> {
        let mut m = serde_json::Map::new();
        match self.quantiser {
            Some(q) => {
                let d = self.distance_px;
                m.insert(
                    "texture".into(),
                    serde_json::json!({
                        "grey_levels": q.levels,
                        "quantisation_range": [q.lo, q.hi],
                        "quantisation_rule": "level = floor((v - low)·levels/(high - low)) clamped to 0..levels-1",
                        "pair_distance_px": d,
                        "offsets_row_col": [[0, d], [-(d as i64), d], [d, 0], [d, d]],
                        "directions": "0°, 45°, 90°, 135° averaged over those with a pair",
                        "window_half_px": [self.half_px.0, self.half_px.1],
                        "reference": GLCM_REFERENCE,
                    }),
                );
                m.insert(
                    "edge_rule".into(),
                    "pairs with a cell beyond the raster or nodata are left out; nodata when the centre is nodata or no direction has a pair".into(),
                );
            }
            None => {
                m.insert(
                    "texture".into(),
                    serde_json::json!({
                        "statistic": "population standard deviation of the window's valid values",
                        "window": shape.name(),
                    }),
                );
                m.insert(
                    "edge_rule".into(),
                    "cells beyond the raster and nodata are left out; nodata when the centre is nodata or fewer valid cells than min_valid_fraction".into(),
                );
            }
        }
        m
    }

    /// Window side in cells (`window_px` in `stack.json`).
    pub fn window_px(&self) -> usize {
        2 * self.halo_px() + 1
    }
}

/// A co-occurrence pass: source name and radius bits.
type GlcmKey = (String, u64);

/// Where a padded block lies on the stack's grid: its first row and column (negative
/// beyond the top or left edge) and the grid's size (rows, cols). Cells outside the grid
/// are nodata for texture, even where an orthomosaic reaches beyond the stack.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct PaddedOnGrid {
    pub row0: i64,
    pub col0: i64,
    pub grid: (usize, usize),
}

impl PaddedOnGrid {
    /// A block that is the whole grid (no cell outside).
    pub fn whole(grid: (usize, usize)) -> PaddedOnGrid {
        PaddedOnGrid {
            row0: 0,
            col0: 0,
            grid,
        }
    }

    /// Sets the cells of `a` that lie outside the grid to NaN.
    fn mask(&self, a: &mut Array2<f32>) {
        let (h, w) = (self.grid.0 as i64, self.grid.1 as i64);
        for ((i, j), v) in a.indexed_iter_mut() {
            let (r, c) = (self.row0 + i as i64, self.col0 + j as i64);
            if r < 0 || c < 0 || r >= h || c >= w {
                *v = f32::NAN;
            }
        }
    }
}

/// The texture bands `bands` of one block, in the given order. `padded` holds the block's
/// reflectance over the block and `halo` cells on each side, `on_grid` where that lies on
/// the stack's grid (cells outside it are taken as nodata), `cells` the padded block's
/// cell sizes, `(out_r, out_c)` the block's size. Each distinct source is computed once,
/// and the four co-occurrence features of one source and radius in one pass.
#[allow(clippy::too_many_arguments)]
pub fn compute_block(
    bands: &[&TextureBand],
    padded: &BandArrays,
    on_grid: PaddedOnGrid,
    cells: &CellSizes,
    halo: usize,
    (out_r, out_c): (usize, usize),
    shape: WindowShape,
    min_valid_fraction: f64,
) -> Result<Vec<Array2<f32>>> {
    let mut sources: Vec<(String, Array2<f32>)> = Vec::new();
    let mut glcm: Vec<(GlcmKey, [Array2<f64>; 4])> = Vec::new();
    let mut out = Vec::with_capacity(bands.len());
    for band in bands {
        let name = band.source.name();
        if !sources.iter().any(|(n, _)| n == &name) {
            let mut values = band.source.values(padded)?;
            on_grid.mask(&mut values);
            sources.push((name.clone(), values));
        }
        let values = &sources.iter().find(|(n, _)| n == &name).expect("added").1;
        let data = match (band.quantity.glcm_output(), band.quantiser) {
            (Some(k), Some(q)) => {
                let key = (name, band.radius_m.to_bits());
                if !glcm.iter().any(|(k2, _)| k2 == &key) {
                    let levels = q.quantise(values.view());
                    let win = GlcmWindow {
                        kx: band.half_px.0,
                        ky: band.half_px.1,
                        distance: band.distance_px,
                    };
                    let f = glcm_features(
                        levels.view(),
                        q.levels,
                        win,
                        halo..halo + out_r,
                        halo..halo + out_c,
                    );
                    glcm.push((key.clone(), f));
                }
                let f = &glcm.iter().find(|(k2, _)| k2 == &key).expect("added").1;
                f[k].mapv(|v| v as f32)
            }
            _ => {
                let std = window_std(
                    values.view(),
                    cells,
                    shape,
                    band.radius_m,
                    halo,
                    (out_r, out_c),
                    min_valid_fraction,
                )?;
                std.mapv(|v| v as f32)
            }
        };
        out.push(data);
    }
    Ok(out)
}

/// The block's part of a padded array: rows and columns `halo..halo + size`.
pub fn core(a: &Array2<f32>, halo: usize, (out_r, out_c): (usize, usize)) -> Array2<f32> {
    a.slice(s![halo..halo + out_r, halo..halo + out_c])
        .to_owned()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::random::SplitMix64;
    use crate::texture::glcm::brute_force;

    fn ctx<'a>(
        mapped: &'a [Role],
        expressions: &'a BTreeMap<String, String>,
        settings: &'a TextureSettings,
    ) -> TextureContext<'a> {
        TextureContext {
            mapped,
            expressions,
            scales_m: &[1.0, 2.5],
            settings,
            h_min: (0.5, 0.5),
        }
    }

    #[test]
    fn words_expand_name_and_refuse() {
        let mapped = [Role::Red, Role::Nir];
        let expr: BTreeMap<String, String> =
            [("ratio".to_string(), "nir / red".to_string())].into();
        let settings = TextureSettings::default();
        let c = ctx(&mapped, &expr, &settings);
        let names = |w: &str| -> Vec<String> {
            plan_word(w, &c)
                .unwrap()
                .iter()
                .map(TextureBand::band_name)
                .collect()
        };
        assert_eq!(
            names("glcm@1.5@ndvi"),
            [
                "glcm_contrast_r1p5m_ndvi",
                "glcm_homogeneity_r1p5m_ndvi",
                "glcm_entropy_r1p5m_ndvi",
                "glcm_correlation_r1p5m_ndvi"
            ]
        );
        assert_eq!(names("stddev@nir"), ["stddev_r1m_nir", "stddev_r2p5m_nir"]);
        let b = &plan_word("glcm_entropy@2@red", &c).unwrap()[0];
        assert_eq!(b.half_px, (4, 4));
        assert_eq!(b.window_px(), 9);
        assert_eq!(b.quantiser.unwrap(), Quantiser::new(0.0, 1.0, 32).unwrap());
        let n = &plan_word("glcm_contrast@2@ndvi", &c).unwrap()[0];
        assert_eq!(
            (n.quantiser.unwrap().lo, n.quantiser.unwrap().hi),
            (-1.0, 1.0)
        );
        assert!(is_texture_word("glcm@ndvi") && is_texture_word("stddev"));
        assert!(!is_texture_word("tpi@5") && !is_texture_word("ndvi"));
        // Errors: no source, unmapped band, index missing a band, unbounded range, bad radius.
        for (word, says) in [
            ("glcm", "does not name its source"),
            ("stddev@2@blue", "neither a mapped band"),
            ("glcm@2@ndre", "needs the `rededge` band"),
            ("glcm@2@ratio", "no fixed range"),
            ("glcm@x@nir", "not a number of metres"),
            ("glcm@-1@nir", "not a positive number"),
        ] {
            let e = plan_word(word, &c).unwrap_err().to_string();
            assert!(e.contains(says), "{word}: {e}");
        }
        // Band math works once its range is stated; the standard deviation needs none.
        let ranged = TextureSettings {
            ranges: [("ratio".to_string(), (0.0, 20.0))].into(),
            ..TextureSettings::default()
        };
        let c2 = ctx(&mapped, &expr, &ranged);
        assert_eq!(plan_word("glcm@2@ratio", &c2).unwrap().len(), 4);
        assert!(plan_word("stddev@2@ratio", &c).is_ok());
    }

    #[test]
    fn a_block_equals_the_kernels_on_the_whole_raster() {
        // The block's bands are the kernels' values at the same cells of the whole raster
        // (block independence), checked against the pair-by-pair reference.
        let mut rng = SplitMix64::new(11);
        let (h, w) = (30, 34);
        let nir = Array2::from_shape_fn((h, w), |_| 0.2 + 0.6 * rng.next_f64() as f32);
        let red = Array2::from_shape_fn((h, w), |_| 0.02 + 0.2 * rng.next_f64() as f32);
        let mut r = BandArrays::new();
        r.insert(Role::Nir, nir.clone()).unwrap();
        r.insert(Role::Red, red.clone()).unwrap();
        let mapped = [Role::Red, Role::Nir];
        let expr = BTreeMap::new();
        let settings = TextureSettings {
            levels: 8,
            ..TextureSettings::default()
        };
        let c = ctx(&mapped, &expr, &settings);
        let mut bands = plan_word("glcm@1.5@ndvi", &c).unwrap();
        bands.extend(plan_word("stddev@1@nir", &c).unwrap());
        let refs: Vec<&TextureBand> = bands.iter().collect();
        let halo = 3;
        let cells = CellSizes::uniform(0.5, 0.5, h);
        let got = compute_block(
            &refs,
            &r,
            PaddedOnGrid::whole((h, w)),
            &cells,
            halo,
            (h - 2 * halo, w - 2 * halo),
            WindowShape::Square,
            0.0,
        )
        .unwrap();
        assert_eq!(got.len(), 5);
        let ndvi = spectral::find_index("ndvi").unwrap().compute(&r).unwrap();
        let q = bands[0].quantiser.unwrap();
        let levels = q.quantise(ndvi.view());
        let win = GlcmWindow {
            kx: 3,
            ky: 3,
            distance: 1,
        };
        for (i, j) in [(0, 0), (5, 7), (23, 27), (12, 3)] {
            let want = brute_force(&levels, 8, win, i + halo, j + halo);
            for k in 0..4 {
                assert!(
                    (got[k][[i, j]] as f64 - want[k]).abs() < 1e-6,
                    "feature {k} at ({i}, {j}): {} {}",
                    got[k][[i, j]],
                    want[k]
                );
            }
        }
        // stddev@1 at 0.5 m cells: the 5x5 population standard deviation (numpy.std, ddof 0).
        let (i, j) = (10, 11);
        let vals: Vec<f64> = (0..5)
            .flat_map(|a| (0..5).map(move |b| (a, b)))
            .map(|(a, b)| nir[[i + halo - 2 + a, j + halo - 2 + b]] as f64)
            .collect();
        let m = vals.iter().sum::<f64>() / 25.0;
        let sd = (vals.iter().map(|v| (v - m).powi(2)).sum::<f64>() / 25.0).sqrt();
        assert!((got[4][[i, j]] as f64 - sd).abs() < 2e-6);
    }
}

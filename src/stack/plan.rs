//! The plan: a resolved recipe turned into open sources, one target grid, the list of
//! band producers with their metadata, the halo they need and the blocks to compute.
//!
//! Everything that can fail on bad input fails here, before any block is computed: a
//! missing file, a DSM with no CRS, an orthomosaic that does not overlap the DSM, a band
//! number past a file's band count, an index whose bands are not mapped, an expression
//! that does not parse.

use std::collections::BTreeSet;
use std::path::Path;
use std::sync::Arc;

use crate::align::{self, Resampling};
use crate::error::{Error, Result};
use crate::grid::{CrsKind, Grid, Window};
use crate::ground::bands::{self as ground_bands, GroundBand, GroundPlan};
use crate::raster::{self, RasterSource, SampleType};
use crate::spectral::{self, BandSource, Expression, PerBand, Role, SpectralIndex};
use crate::stack::plausibility;
use crate::stack::preview::RampKind;
use crate::stack::recipe::Recipe;
use crate::stack::sidecar::{BandMetadata, BandStats};
use crate::terrain::{self, TerrainFeature, TerrainParams};
use crate::texture::bands::{self as texture_bands, TextureBand, TextureContext};

/// What computes one band of the stack.
pub enum Producer {
    /// Output `i` of `terrain::compute` over the plan's terrain features.
    Terrain(usize),
    /// The reflectance of one mapped band.
    Reflectance(Role),
    /// A catalogue index.
    Index(&'static SpectralIndex),
    /// A user band-math expression.
    Expression(Expression),
    /// A band of the ground filter (dtm, height, ground mask, distance, terrain on the dtm).
    Ground(GroundBand),
    /// A texture band of a band or index (co-occurrence features, window standard
    /// deviation), computed over the block and its halo.
    Texture(TextureBand),
}

/// One band of the stack: what produces it, its preview ramp, and its `stack.json` record.
///
/// The record is the sidecar's own type, filled here with everything the plan knows (name,
/// feature, method, window, units, source, spectral details in `extra`); the executor adds
/// the date, the statistics and the plausibility counts. `BandPlan` reads as its record
/// (`band.name`, `band.units`).
pub struct BandPlan {
    pub producer: Producer,
    pub ramp: RampKind,
    pub meta: BandMetadata,
}

impl std::ops::Deref for BandPlan {
    type Target = BandMetadata;

    fn deref(&self) -> &BandMetadata {
        &self.meta
    }
}

/// A band's record before it is computed: no date, no statistics yet, numbered later.
#[allow(clippy::too_many_arguments)]
fn band_record(
    name: String,
    feature: String,
    method: Option<String>,
    scale_m: Option<f64>,
    window_px: Option<usize>,
    units: &str,
    source: String,
    extra: serde_json::Map<String, serde_json::Value>,
) -> BandMetadata {
    BandMetadata {
        index: 0,
        name,
        feature,
        method,
        scale_m,
        window_px,
        units: units.to_string(),
        source,
        date: None,
        stats: BandStats::default(),
        extra,
    }
}

/// One reflectance band to read: its source file (opened once per file) and scaling.
pub struct SpectralInput {
    pub source: Arc<dyn RasterSource>,
    pub band: BandSource,
}

/// An orthomosaic's alpha (coverage) band: its source and 1-based band number.
pub type AlphaBand = (Arc<dyn RasterSource>, usize);

/// Everything needed to compute the stack block by block.
pub struct StackPlan {
    pub recipe: Recipe,
    /// The stack's grid (nodata NaN).
    pub target: Grid,
    pub dsm: Arc<dyn RasterSource>,
    /// Band of the DSM file holding elevations (1-based).
    pub dsm_band: usize,
    /// Doubts about the inputs that do not stop the build; printed and kept by the executor.
    pub warnings: Vec<String>,
    /// True when the DSM already lies on the target grid: its blocks are read, not resampled.
    pub dsm_on_target: bool,
    pub spectral: Vec<SpectralInput>,
    /// Alpha (coverage) band of the orthomosaic, 0 = outside the flown area.
    pub alpha: Option<AlphaBand>,
    pub terrain: Vec<TerrainFeature>,
    pub terrain_params: TerrainParams,
    /// The ground filter, when a ground band is asked for.
    pub ground: Option<GroundPlan>,
    pub bands: Vec<BandPlan>,
    /// Cells of context every terrain block needs on each side.
    pub halo: usize,
    /// Global elevation offset handed to every terrain block (see `terrain::compute`).
    pub reference_z: f64,
}

impl StackPlan {
    /// Open the recipe's inputs and plan the stack, on `grid` when given (else the grid
    /// the recipe implies: the DSM's, or its resolution and extent rule).
    pub fn new(recipe: Recipe, grid: Option<&Grid>) -> Result<StackPlan> {
        let dsm: Arc<dyn RasterSource> = Arc::from(raster::open(&recipe.dsm)?);
        let dsm_grid = dsm.grid().clone();
        if dsm_grid.crs.kind == CrsKind::Unknown {
            return Err(Error::file(
                &recipe.dsm,
                "the DSM has no coordinate reference system, so its cell size in metres is unknown",
            )
            .with_fix("export the DSM with its CRS from the photogrammetry software, or assign one (GDAL: -a_srs EPSG:XXXX)"));
        }
        dsm_grid
            .cell_size_m(0.0)
            .map_err(|e| e.in_file(&recipe.dsm))?;
        let dsm_band = choose_dsm_band(dsm.as_ref(), recipe.dsm_band)?;
        let mut warnings: Vec<String> = Vec::new();
        warnings.extend(nodata_warning(dsm.as_ref(), dsm_band));
        if dsm.band_info(dsm_band).sample_type == raster::SampleType::U8 {
            warnings.push(format!(
                "{}: the DSM's values are 8-bit integers (0–255), which is rare for elevations: \
                 check that the file is not an image",
                recipe.dsm.display()
            ));
        }

        let (spectral_inputs, alpha) = open_spectral(&recipe)?;
        for input in &spectral_inputs {
            if let Some(w) = nodata_warning(input.source.as_ref(), input.band.band) {
                if !warnings.contains(&w) {
                    warnings.push(w);
                }
            }
        }
        let mut others: Vec<(std::path::PathBuf, Grid)> = Vec::new();
        for input in &spectral_inputs {
            if !others.iter().any(|(p, _)| p == &input.band.path) {
                check_overlap(
                    &recipe.dsm,
                    &dsm_grid,
                    &input.band.path,
                    input.source.grid(),
                )?;
                others.push((input.band.path.clone(), input.source.grid().clone()));
            }
        }
        let extent = recipe.extent;
        let mut target = match grid {
            Some(g) => {
                if !g.crs.same_as(&dsm_grid.crs) {
                    return Err(Error::file(
                        &recipe.dsm,
                        format!(
                            "the DSM lies in {} but the common grid in {}",
                            dsm_grid.crs.label(),
                            g.crs.label()
                        ),
                    )
                    .with_fix("give every flight of a multi-temporal stack the same CRS"));
                }
                g.clone()
            }
            None => {
                if let Some(res) = recipe.resolution_m {
                    check_resolution(&recipe.dsm, &dsm_grid, res)?;
                }
                let named: Vec<(&Path, &Grid)> =
                    others.iter().map(|(p, g)| (p.as_path(), g)).collect();
                align::target_grid_named(
                    (&recipe.dsm, &dsm_grid),
                    &named,
                    recipe.resolution_m,
                    extent,
                )?
            }
        };
        target.nodata = Some(f64::NAN);
        #[cfg(feature = "gdal")]
        {
            // GDAL knows the WKT of EPSG codes: stack.json then carries both.
            target.crs =
                raster::gdal::complete_crs(&target.crs).map_err(|e| e.in_file(&recipe.dsm))?;
        }
        let dsm_on_target = dsm_grid.same_geometry(&target, 0.0);

        let mapped: Vec<Role> = spectral_inputs
            .iter()
            .map(|s| s.band.role.clone())
            .collect();
        let shape = recipe.window;
        let terrain_params = TerrainParams {
            min_valid_fraction: recipe.min_valid_fraction,
            z_factor: recipe.z_factor,
            shape,
        };
        let (hx, hy) = smallest_cell(&target)?;
        let (hx_max, hy_max) = largest_cell(&target)?;
        let mut terrain_features: Vec<TerrainFeature> = Vec::new();
        let mut bands: Vec<BandPlan> = Vec::new();
        let mut ground: Option<GroundPlan> = None;
        for word in &recipe.features {
            let w = word.trim().to_ascii_lowercase();
            if GroundBand::from_word(&w).is_some() || ground_bands::on_dtm_word(&w).is_some() {
                let g = ground.get_or_insert_with(|| new_ground_plan(&recipe, &target, hx.min(hy)));
                bands.extend(ground_band_plans(
                    &w,
                    g,
                    &recipe,
                    shape,
                    (hx, hy),
                    (hx_max, hy_max),
                    &target,
                )?);
            } else if texture_bands::is_texture_word(&w) {
                bands.extend(texture_band_plans(
                    &w,
                    &recipe,
                    &mapped,
                    (hx, hy),
                    (hx_max, hy_max),
                    &target,
                )?);
            } else if w == "reflectance" {
                for input in &spectral_inputs {
                    bands.push(reflectance_band(input, recipe.resampling));
                }
            } else if w == "indices" {
                for index in spectral::catalogue() {
                    if index.required_roles().iter().all(|r| mapped.contains(r)) {
                        bands.push(index_band(index, recipe.resampling));
                    }
                }
            } else if let Ok(index) = spectral::find_index(&w) {
                if let Some(missing) = index
                    .required_roles()
                    .into_iter()
                    .find(|r| !mapped.contains(r))
                {
                    return Err(Error::usage(format!(
                        "index {} needs the `{missing}` band, which is not mapped",
                        index.name
                    ))
                    .with_fix(format!(
                        "map it with --ortho FILE --bands {missing}=N or --band {missing}=FILE, or drop {}",
                        index.name
                    )));
                }
                bands.push(index_band(index, recipe.resampling));
            } else {
                let expanded = terrain::expand(std::slice::from_ref(&w), &recipe.scales_m)
                    .map_err(|e| {
                        let names: Vec<&str> =
                            spectral::catalogue().iter().map(|i| i.name).collect();
                        match e {
                            Error::Usage { problem, fix } => Error::Usage {
                                problem,
                                fix: Some(format!(
                                    "{}; ground words: dtm, height, ground, ground_distance, WORD@dtm; texture words: glcm@R@SOURCE, glcm_contrast@R@SOURCE (homogeneity, entropy, correlation), stddev@R@SOURCE; spectral words: reflectance, indices, {}",
                                    fix.unwrap_or_default(),
                                    names.join(", ")
                                )),
                            },
                            other => other,
                        }
                    })?;
                for feature in expanded {
                    if let Some(r) = feature.scale_m() {
                        let origin = if w.contains('@') {
                            format!("`{w}` in the feature list")
                        } else {
                            "--scales, or scales_m in the recipe".to_string()
                        };
                        terrain::validate_window_radius(r, &origin, hx_max, hy_max)?;
                    }
                    let (wx, wy) = feature.window_px(hx, hy);
                    check_window_fits(&feature, (wx, wy), (hx, hy), &target)?;
                    let mut extra = serde_json::Map::new();
                    let method = feature.method_with_shape(shape);
                    extra.insert(
                        "edge_rule".into(),
                        terrain::catalogue::edge_rule(
                            feature.feature_key(),
                            method.as_deref().unwrap_or(""),
                        )
                        .into(),
                    );
                    bands.push(BandPlan {
                        producer: Producer::Terrain(terrain_features.len()),
                        ramp: RampKind::for_feature(feature.feature_key()),
                        meta: band_record(
                            feature.band_name(),
                            feature.feature_key().to_string(),
                            method,
                            feature.scale_m(),
                            feature.scale_m().map(|_| 2 * wx.max(wy) + 1),
                            feature.units(),
                            "dsm".into(),
                            extra,
                        ),
                    });
                    terrain_features.push(feature);
                }
            }
        }
        for (name, text) in &recipe.expressions {
            check_expression_name(name)?;
            let expr = Expression::parse(name, text)?;
            if let Some(missing) = expr.roles().into_iter().find(|r| !mapped.contains(r)) {
                return Err(Error::usage(format!(
                    "expression {name} uses the `{missing}` band, which is not mapped"
                ))
                .with_fix(format!(
                    "map it with --bands {0}=N or --band {0}=FILE",
                    missing.declared()
                )));
            }
            let mut extra = serde_json::Map::new();
            extra.insert("expression".into(), text.clone().into());
            extra.insert(
                "resampling".into(),
                serde_json::to_value(recipe.resampling).unwrap_or_default(),
            );
            let source = expr
                .roles()
                .iter()
                .map(|r| r.name().to_string())
                .collect::<Vec<_>>()
                .join(",");
            bands.push(BandPlan {
                producer: Producer::Expression(expr),
                ramp: RampKind::Diverging,
                meta: band_record(
                    name.clone(),
                    "expression".into(),
                    None,
                    None,
                    None,
                    "unitless",
                    source,
                    extra,
                ),
            });
        }
        // Same name twice (e.g. "slope" and "slope:horn"): keep the first.
        let mut names = BTreeSet::new();
        bands.retain(|b| names.insert(b.name.clone()));
        for (i, band) in bands.iter_mut().enumerate() {
            band.meta.index = i + 1;
        }
        if bands.is_empty() {
            return Err(Error::usage(
                "the recipe produces no band (no spectral band is mapped for the spectral words)",
            )
            .with_fix("add terrain features, or map orthomosaic bands with --ortho/--bands"));
        }
        // Every window fits the raster (checked above), so the halo is at most half the
        // raster's longer side plus one cell: no arithmetic on it can overflow.
        let halo = terrain_features
            .iter()
            .map(|f| f.halo_px(hx, hy))
            .chain(ground.as_ref().map(GroundPlan::halo))
            .chain(bands.iter().filter_map(|b| match &b.producer {
                Producer::Texture(t) => Some(t.halo_px()),
                _ => None,
            }))
            .max()
            .unwrap_or(0);
        if let Some(g) = &ground {
            check_ground_guidance(g, &mapped)?;
        }
        let reference_z = reference_elevation(
            dsm.as_ref(),
            dsm_band,
            recipe.z_factor,
            recipe.allow_any_elevation || (terrain_features.is_empty() && ground.is_none()),
        )?;
        Ok(StackPlan {
            recipe,
            target,
            dsm,
            dsm_band,
            warnings,
            dsm_on_target,
            spectral: spectral_inputs,
            alpha,
            terrain: terrain_features,
            terrain_params,
            ground,
            bands,
            halo,
            reference_z,
        })
    }

    /// Whether any band needs orthomosaic reflectance.
    pub fn needs_spectral(&self) -> bool {
        self.bands
            .iter()
            .any(|b| !matches!(b.producer, Producer::Terrain(_) | Producer::Ground(_)))
    }

    /// The texture bands, in band order.
    pub fn texture_bands(&self) -> Vec<&TextureBand> {
        self.bands
            .iter()
            .filter_map(|b| match &b.producer {
                Producer::Texture(t) => Some(t),
                _ => None,
            })
            .collect()
    }

    /// Cells of context the texture bands need around a block (0 without texture): the
    /// reflectance is read that much wider, not by the terrain's halo.
    pub fn texture_halo(&self) -> usize {
        self.texture_bands()
            .iter()
            .map(|t| t.halo_px())
            .max()
            .unwrap_or(0)
    }

    /// Bytes one block of `block` x `block` cells needs while it is computed: the DSM
    /// block with its halo and the terrain kernels' working arrays (taken as 96 bytes per
    /// padded cell per distinct window, the summed-area tables and moments), the spectral
    /// inputs and every output band.
    ///
    /// The arithmetic saturates: a size past `u64::MAX` reads as `u64::MAX`, which no
    /// budget admits, so an absurd request is refused rather than wrapped to a small number.
    pub fn block_bytes(&self, block: usize) -> u64 {
        let side = (block as u64).saturating_add((self.halo as u64).saturating_mul(2));
        let padded = side.saturating_mul(side);
        let cells = (block as u64).saturating_mul(block as u64);
        // The DSM block itself: 4 bytes a cell, 8 when read at f64 precision.
        let dsm_cell = if self.dsm_reads_f64() { 8 } else { 4 };
        let scales: BTreeSet<u64> = self
            .terrain
            .iter()
            .filter_map(|f| f.scale_m().map(|s| s.to_bits()))
            .collect();
        let terrain = if self.terrain.is_empty() && self.ground.is_none() {
            0
        } else {
            padded.saturating_mul(
                (dsm_cell + 48u64).saturating_add(96u64.saturating_mul(scales.len() as u64)),
            )
        };
        // The ground filter: about sixteen 8-byte arrays of the padded block (minimum
        // surface, openings, erosion, the running extrema's arrays, dtm, height, distance,
        // gradient, masks), and the padded reflectance when NDVI guides it.
        let ground = match &self.ground {
            None => 0,
            Some(g) => padded.saturating_mul(
                128 + if g.params.ndvi_max.is_some() {
                    4 * (2 * self.spectral.len() as u64 + 3)
                } else {
                    0
                },
            ),
        };
        let spectral = if self.needs_spectral() {
            cells.saturating_mul(4 * (2 * self.spectral.len() as u64 + 2))
        } else {
            0
        };
        // Texture: the padded reflectance instead of the block's; per distinct source its
        // padded values and grey levels (6 bytes a cell); per standard deviation the window
        // sums (96 bytes a padded cell, as the terrain statistics); per co-occurrence source
        // and radius the four f64 features of the block.
        let texture = self.texture_bands();
        let texture_side = (block as u64).saturating_add(2 * self.texture_halo() as u64);
        let texture_padded = texture_side.saturating_mul(texture_side);
        let texture_bytes = if texture.is_empty() {
            0
        } else {
            let sources: BTreeSet<String> = texture.iter().map(|t| t.source.name()).collect();
            let glcm: BTreeSet<(String, u64)> = texture
                .iter()
                .filter(|t| t.quantiser.is_some())
                .map(|t| (t.source.name(), t.radius_m.to_bits()))
                .collect();
            let stds = texture.iter().filter(|t| t.quantiser.is_none()).count() as u64;
            let per_padded =
                4 * (2 * self.spectral.len() as u64 + 2) + 6 * sources.len() as u64 + 96 * stds;
            texture_padded
                .saturating_mul(per_padded)
                .saturating_add(cells.saturating_mul(32 * glcm.len() as u64))
        };
        terrain
            .saturating_add(ground)
            .saturating_add(spectral)
            .saturating_add(texture_bytes)
            .saturating_add(cells.saturating_mul(8 * self.bands.len() as u64))
    }

    /// Cells of the target grid (width × height; at most 2⁴⁴, as each side is at most
    /// [`crate::grid::MAX_DIMENSION`]).
    pub fn cells(&self) -> u64 {
        self.target.width as u64 * self.target.height as u64
    }

    /// Refuse a target grid of more than `limit` cells, naming the size and the flag that
    /// raises the limit. Catches a mistyped `--resolution` (1e-5 m over a 20 m site is a
    /// 2,000,000 x 1,500,000 grid) before a run that would not end.
    pub fn check_cell_limit(&self, limit: u64) -> Result<()> {
        let cells = self.cells();
        if cells <= limit {
            return Ok(());
        }
        let (w, h) = (self.target.width, self.target.height);
        let (cx, cy) = self.target.cell_size_m(0.0).unwrap_or((f64::NAN, f64::NAN));
        Err(Error::usage(format!(
            "the stack's grid would be {w} x {h} = {cells} cells (cells of {cx:.3e} x {cy:.3e} m), more than the limit of {limit} cells"
        ))
        .with_fix(format!(
            "check --resolution (and the DSM's cell size); to build so large a grid on purpose, raise the limit with --cell-limit {}",
            cells
        )))
    }

    /// Bytes the build keeps for the whole raster besides the blocks in flight: the list
    /// of `block`-cell blocks (one [`Window`] each) and the per-band statistics. (The
    /// writer's tile index is counted by `GeoTiffWriter::index_bytes`.)
    pub fn raster_bytes(&self, block: usize) -> u64 {
        let block = block.max(1) as u64;
        let blocks = (self.target.width as u64)
            .div_ceil(block)
            .saturating_mul((self.target.height as u64).div_ceil(block));
        let per_block = std::mem::size_of::<Window>() as u64;
        blocks
            .saturating_mul(per_block)
            .saturating_add(self.bands.len() as u64 * 256)
    }

    /// Whether DSM blocks are read as f64 (kept exact through the kernels): for float64
    /// and 32-bit integer DSMs, read on their own grid or resampled in f64
    /// ([`crate::align::resample_window_f64`]).
    pub fn dsm_reads_f64(&self) -> bool {
        matches!(
            self.dsm.band_info(self.dsm_band).sample_type,
            SampleType::F64 | SampleType::I32 | SampleType::U32
        )
    }

    /// Blocks of the target grid, `block` cells square, row by row from the north-west.
    pub fn blocks(&self, block: usize) -> Vec<Window> {
        let mut out = Vec::new();
        for row in (0..self.target.height).step_by(block) {
            for col in (0..self.target.width).step_by(block) {
                out.push(Window::new(
                    col as i64,
                    row as i64,
                    block.min(self.target.width - col),
                    block.min(self.target.height - row),
                ));
            }
        }
        out
    }
}

/// Refuse a band-math name that is, or begins with, a built-in word: a terrain feature
/// word (`slope`, `tpi`, …, so also `slope_horn`, `tpi_r5m`), a ground word (`dtm`, `height`,
/// `ground`), a catalogue index (`ndvi`,
/// also the multi-temporal `ndvi_mean`), `reflectance` (`reflectance_nir`) or `indices`.
/// Such a band would hide a built-in band or be hidden by it.
fn check_expression_name(name: &str) -> Result<()> {
    let lower = name.to_ascii_lowercase();
    if lower.is_empty()
        || !lower
            .chars()
            .next()
            .is_some_and(|c| c.is_ascii_alphabetic())
        || !lower.chars().all(|c| c.is_ascii_alphanumeric() || c == '_')
    {
        return Err(Error::usage(format!(
            "band-math name {name:?} must start with a letter and hold only letters, digits and `_`"
        ))
        .with_fix("write e.g. --index wet=\"(green - nir) / (green + nir)\""));
    }
    let builtin = terrain::FEATURE_WORDS
        .iter()
        .map(|(w, _)| *w)
        .chain(spectral::catalogue().iter().map(|i| i.name))
        .chain(["reflectance", "indices"])
        .chain(["dtm", "height", "ground"]);
    for word in builtin {
        if lower == word || lower.starts_with(&format!("{word}_")) {
            return Err(Error::usage(format!(
                "band-math name `{name}` collides with the built-in band name `{word}`{}",
                if lower == word { "" } else { "_…" }
            ))
            .with_fix(format!(
                "choose a name of your own that neither is nor begins with `{word}_` (e.g. `my_{lower}`); \
                 to get the built-in band, ask for `{word}` in --features"
            )));
        }
    }
    Ok(())
}

/// Open the orthomosaic (one file, several roles) and per-band files; check band numbers.
fn open_spectral(recipe: &Recipe) -> Result<(Vec<SpectralInput>, Option<AlphaBand>)> {
    let mut inputs = Vec::new();
    let mut sources: Vec<BandSource> = Vec::new();
    let mut alpha = None;
    let mut opened: Vec<(std::path::PathBuf, Arc<dyn RasterSource>)> = Vec::new();
    let mut open_once = |path: &Path| -> Result<Arc<dyn RasterSource>> {
        if let Some((_, s)) = opened.iter().find(|(p, _)| p == path) {
            return Ok(s.clone());
        }
        let s: Arc<dyn RasterSource> = Arc::from(raster::open(path)?);
        opened.push((path.to_path_buf(), s.clone()));
        Ok(s)
    };
    if let (Some(ortho), Some(map)) = (&recipe.ortho, &recipe.bands) {
        let map = map.value();
        let src = open_once(ortho)?;
        for (role, band) in &map.roles {
            spectral::check_band_exists(ortho, *band, src.band_count(), role)?;
            sources.push(BandSource {
                role: role.clone(),
                path: ortho.clone(),
                band: *band,
                scale: 1.0,
                offset: 0.0,
            });
        }
        if let Some(a) = map.alpha {
            spectral::check_band_exists(ortho, a, src.band_count(), &Role::Extra("alpha".into()))?;
            alpha = Some((src.clone(), a));
        }
    }
    for spec in &recipe.band_files {
        let (role, path, band) = spectral::parse_band_file(spec)?;
        let Some(role) = role else {
            // `--band alpha=FILE[:BAND]`: a coverage mask from its own file.
            let src = open_once(&path)?;
            spectral::check_band_exists(
                &path,
                band,
                src.band_count(),
                &Role::Extra("alpha".into()),
            )?;
            if alpha.is_some() {
                return Err(
                    Error::usage("the alpha band is given twice").with_fix("give one alpha band")
                );
            }
            alpha = Some((src, band));
            continue;
        };
        if let Some(first) = sources.iter().find(|s| s.role == role) {
            return Err(Error::usage(format!(
                "role `{role}` is mapped twice: to band {} of {} and by `--band {spec}`",
                first.band,
                first.path.display()
            ))
            .with_fix("map each role once (either in --bands or with --band, not both)"));
        }
        if let Some(first) = sources.iter().find(|s| s.path == path && s.band == band) {
            return Err(Error::usage(format!(
                "band {band} of {} is mapped to two roles, `{}` and `{role}`",
                path.display(),
                first.role
            ))
            .with_fix("map each band to one role"));
        }
        let src = open_once(&path)?;
        spectral::check_band_exists(&path, band, src.band_count(), &role)?;
        sources.push(BandSource {
            role,
            path,
            band,
            scale: 1.0,
            offset: 0.0,
        });
    }
    let none = PerBand::default();
    let scale = recipe
        .reflectance_scale
        .as_ref()
        .map_or(&none, |s| s.value());
    let offset = recipe
        .reflectance_offset
        .as_ref()
        .map_or(&none, |s| s.value());
    spectral::apply_scaling(&mut sources, scale, offset)?;
    for band in sources {
        let source = open_once(&band.path)?;
        inputs.push(SpectralInput { source, band });
    }
    Ok((inputs, alpha))
}

/// Refuse an input that does not overlap the DSM, or lies in another CRS without GDAL.
fn check_overlap(dsm_path: &Path, dsm: &Grid, path: &Path, grid: &Grid) -> Result<()> {
    if !dsm.crs.same_as(&grid.crs) {
        #[cfg(not(feature = "gdal"))]
        return Err(Error::file(
            path,
            format!(
                "lies in {} but the DSM {} lies in {}; this build cannot reproject",
                grid.crs.label(),
                dsm_path.display(),
                dsm.crs.label()
            ),
        )
        .with_fix(
            "reproject it onto the DSM's CRS first, or build terrastack with `--features gdal`",
        ));
        #[cfg(feature = "gdal")]
        return Ok(()); // GDAL's warper aligns it; overlap is checked in the target CRS by warping.
    }
    let (ax0, ay0, ax1, ay1) = dsm.bounds();
    let (bx0, by0, bx1, by1) = grid.bounds();
    if bx0 >= ax1 || bx1 <= ax0 || by0 >= ay1 || by1 <= ay0 {
        return Err(Error::file(
            path,
            format!(
                "does not overlap the DSM {}: its extent x {bx0:.2}..{bx1:.2}, y {by0:.2}..{by1:.2} \
                 lies outside the DSM's x {ax0:.2}..{ax1:.2}, y {ay0:.2}..{ay1:.2}",
                dsm_path.display()
            ),
        )
        .with_fix("check that both files come from the same flight and CRS"));
    }
    Ok(())
}

/// Refuse a windowed feature whose window is larger than the raster: its side (2r + 1
/// cells for a radius of r cells on the longer axis) may not pass the raster's longer
/// side. Such a window holds fewer valid cells than the raster at every cell, so it could
/// only give nodata or one value everywhere; refusing it also bounds the halo, and so every
/// size computed from it, by the raster. (`window_px` saturates: a radius of 1e300 m, or a
/// cell of 1e-300 m, gives `usize::MAX` cells and is refused here.)
fn check_window_fits(
    feature: &TerrainFeature,
    (wx, wy): (usize, usize),
    (hx, hy): (f64, f64),
    target: &Grid,
) -> Result<()> {
    let Some(radius_m) = feature.scale_m() else {
        return Ok(()); // 3x3 features and elevation: a one-cell raster is fine.
    };
    let longest = target.width.max(target.height) as u128;
    let side = 2 * wx.max(wy) as u128 + 1;
    if side <= longest {
        return Ok(());
    }
    // The largest radius whose window still fits: (longest − 1) / 2 cells of the finer axis.
    let max_cells = ((longest - 1) / 2) as f64;
    let max_m = max_cells * hx.min(hy);
    Err(Error::usage(format!(
        "{} at radius {} m: the window is {} cells across on this grid ({hx:.3e} x {hy:.3e} m cells), larger than the raster ({} x {} cells)",
        feature.feature_key(),
        compact(radius_m),
        compact(side as f64),
        target.width,
        target.height
    ))
    .with_fix(format!(
        "use a radius of at most {max_m:.6} m for this raster (--scales, or WORD@METRES), or check the DSM's cell size and --resolution"
    )))
}

/// A number for a message: as typed when moderate, in scientific notation when huge.
fn compact(v: f64) -> String {
    if v.abs() >= 1e7 {
        format!("{v:.3e}")
    } else {
        format!("{v}")
    }
}

/// Refuse a `--resolution` that would give the stack more than
/// [`crate::grid::MAX_DIMENSION`] cells per side over the DSM's extent, naming the flag
/// (the grid code would only name the DSM). Non-positive values are left to
/// `align::target_grid_named`, which explains them.
fn check_resolution(dsm_path: &Path, dsm: &Grid, res: f64) -> Result<()> {
    if !(res.is_finite() && res > 0.0) {
        return Ok(());
    }
    let (hx, hy) = dsm
        .cell_size_m(dsm.height as f64 / 2.0 - 0.5)
        .map_err(|e| e.in_file(dsm_path))?;
    let (wm, hm) = (dsm.width as f64 * hx, dsm.height as f64 * hy);
    let (cols, rows) = (wm / res, hm / res);
    let max = crate::grid::MAX_DIMENSION as f64;
    if cols <= max && rows <= max {
        return Ok(());
    }
    Err(Error::usage(format!(
        "--resolution {res} m would make a grid of about {} x {} cells over the DSM's {wm:.2} x {hm:.2} m, more than {max} cells per side",
        compact(cols.ceil()),
        compact(rows.ceil())
    ))
    .with_fix(format!(
        "give the stack's cell size in metres (the DSM's is {hx:.4} x {hy:.4} m), e.g. --resolution {:.3}",
        hx.max(hy)
    )))
}

/// Smallest cell size in metres over the grid's rows (the first and last rows bound it on
/// geographic grids); windows in cells are sized on it, so no row gets less context.
fn smallest_cell(grid: &Grid) -> Result<(f64, f64)> {
    let (ax, ay) = grid.cell_size_m(0.0)?;
    let (bx, by) = grid.cell_size_m((grid.height - 1) as f64)?;
    Ok((ax.min(bx), ay.min(by)))
}

/// The band of the DSM that holds elevations: the one chosen, or the only one. A file with
/// several bands (an orthomosaic or a photo given as `--dsm`) is refused without a choice.
fn choose_dsm_band(dsm: &dyn RasterSource, chosen: Option<usize>) -> Result<usize> {
    match chosen {
        Some(b) => {
            raster::check_band(dsm, b).map_err(|e| {
                e.with_fix("choose the band that holds elevations with --dsm-band N (recipe: inputs.dsm_band)")
            })?;
            Ok(b)
        }
        None if dsm.band_count() > 1 => {
            let info = dsm.band_info(1);
            Err(Error::file(
                dsm.path(),
                format!(
                    "the DSM file has {} bands ({}), but a DSM holds one band of elevations; \
                     is it an orthomosaic or an image?",
                    dsm.band_count(),
                    info.sample_type.name()
                ),
            )
            .with_fix("give the DSM file, or choose the band that holds elevations with --dsm-band N (recipe: inputs.dsm_band; `terrastack info FILE` lists the bands)"))
        }
        None => Ok(1),
    }
}

/// A warning when band `band`'s nodata value cannot occur in its integer samples (−9999
/// in uint16, 0.5 in int16): then no cell reads as nodata, and the file's fill cells
/// probably hold some other value that reads as data.
fn nodata_warning(source: &dyn RasterSource, band: usize) -> Option<String> {
    use raster::SampleType::*;
    let info = source.band_info(band);
    let nd = info.nodata?;
    let (lo, hi) = match info.sample_type {
        U8 => (u8::MIN as f64, u8::MAX as f64),
        U16 => (u16::MIN as f64, u16::MAX as f64),
        I16 => (i16::MIN as f64, i16::MAX as f64),
        U32 => (u32::MIN as f64, u32::MAX as f64),
        I32 => (i32::MIN as f64, i32::MAX as f64),
        F32 | F64 => return None,
    };
    if nd.is_finite() && nd.fract() == 0.0 && (lo..=hi).contains(&nd) {
        return None;
    }
    Some(format!(
        "{}: its nodata value {nd} cannot occur in its {} samples, so no cell reads as nodata \
         (the fill cells probably hold another value); set the file's real nodata value",
        source.path().display(),
        info.sample_type.name()
    ))
}

/// The largest cell sizes (metres) of the grid: on geographic grids cells are widest at
/// the row nearest the equator (the first or last row, or the equator's own row when the
/// grid spans it); projected grids have one cell size.
fn largest_cell(grid: &Grid) -> Result<(f64, f64)> {
    let last = (grid.height - 1) as f64;
    let t = &grid.transform;
    let equator = if t[5] != 0.0 {
        (-t[3] / t[5] - 0.5).clamp(0.0, last)
    } else {
        0.0
    };
    let mut best = (0.0f64, 0.0f64);
    for row in [0.0, equator, last] {
        let (x, y) = grid.cell_size_m(row)?;
        best = (best.0.max(x), best.1.max(y));
    }
    Ok(best)
}

/// A whole-metre elevation near the DSM's data: the median of valid cells in a small
/// window at the centre, else 0. Every block of the raster gets the same value. Unless
/// `allow_any` is set, a cell of the window outside the plausible elevations
/// (`plausibility::ELEVATION_RANGE_M`, after `z_factor`) refuses the DSM before anything
/// is written (the executor checks every other cell while it streams).
fn reference_elevation(
    dsm: &dyn RasterSource,
    band: usize,
    z_factor: f64,
    allow_any: bool,
) -> Result<f64> {
    let g = dsm.grid();
    let w = 64.min(g.width);
    let h = 64.min(g.height);
    let win = Window::new(
        ((g.width - w) / 2) as i64,
        ((g.height - h) / 2) as i64,
        w,
        h,
    );
    let data = dsm.read_window(band, win)?;
    if !allow_any {
        let count = plausibility::RangeCount::of(
            data.iter().copied(),
            z_factor,
            plausibility::ELEVATION_RANGE_M,
        );
        plausibility::check_elevations(dsm.path(), &count, false, false)?;
    }
    let mut valid: Vec<f32> = data.iter().copied().filter(|v| v.is_finite()).collect();
    if valid.is_empty() {
        return Ok(0.0);
    }
    valid.sort_by(|a, b| a.total_cmp(b));
    Ok((valid[valid.len() / 2] as f64).round())
}

fn reflectance_band(input: &SpectralInput, resampling: Resampling) -> BandPlan {
    let role = input.band.role.clone();
    let mut extra = serde_json::Map::new();
    extra.insert("role".into(), role.name().into());
    extra.insert(
        "source_path".into(),
        input.band.path.to_string_lossy().into_owned().into(),
    );
    extra.insert("source_band".into(), input.band.band.into());
    extra.insert("reflectance_scale".into(), input.band.scale.into());
    extra.insert("reflectance_offset".into(), input.band.offset.into());
    extra.insert(
        "resampling".into(),
        serde_json::to_value(resampling).unwrap_or_default(),
    );
    BandPlan {
        producer: Producer::Reflectance(role.clone()),
        ramp: RampKind::Sequential,
        meta: band_record(
            format!("reflectance_{}", role.name()),
            "reflectance".into(),
            None,
            None,
            None,
            "unitless",
            role.name().to_string(),
            extra,
        ),
    }
}

fn index_band(index: &'static SpectralIndex, resampling: Resampling) -> BandPlan {
    let roles: Vec<String> = index
        .required_roles()
        .iter()
        .map(|r| r.name().to_string())
        .collect();
    let mut extra = serde_json::Map::new();
    extra.insert("formula".into(), index.formula.into());
    extra.insert("reference".into(), index.reference.into());
    extra.insert(
        "resampling".into(),
        serde_json::to_value(resampling).unwrap_or_default(),
    );
    BandPlan {
        producer: Producer::Index(index),
        ramp: if index.name == "ndwi" {
            RampKind::Diverging
        } else {
            RampKind::Sequential
        },
        meta: band_record(
            index.name.to_string(),
            index.name.to_string(),
            None,
            None,
            None,
            "unitless",
            roles.join(","),
            extra,
        ),
    }
}

/// The ground filter's plan from the recipe's `[ground]` settings, on `target` whose
/// smallest cell size is `h` metres.
fn new_ground_plan(recipe: &Recipe, target: &Grid, h: f64) -> GroundPlan {
    let params = recipe.ground.params();
    // Beyond the raster's longer side a padded block holds the whole raster: more halo
    // changes nothing.
    let filter_halo = params.halo_px(h).min(target.width.max(target.height));
    GroundPlan {
        params,
        h_min: h,
        filter_halo,
        dtm_features: Vec::new(),
        dtm_halo: 0,
    }
}

/// The bands of one ground word (`dtm`, `height`, `ground`, `ground_distance` or
/// `WORD@dtm`), adding any terrain features on the DTM to `g`.
fn ground_band_plans(
    w: &str,
    g: &mut GroundPlan,
    recipe: &Recipe,
    shape: crate::terrain::WindowShape,
    (hx, hy): (f64, f64),
    (hx_max, hy_max): (f64, f64),
    target: &Grid,
) -> Result<Vec<BandPlan>> {
    let mut extra = serde_json::Map::new();
    extra.insert("ground_filter".into(), g.record());
    if let Some(band) = GroundBand::from_word(w) {
        let (name, units) = band.name_and_units().expect("a filter band");
        return Ok(vec![BandPlan {
            producer: Producer::Ground(band),
            ramp: RampKind::Sequential,
            meta: band_record(
                name.into(),
                name.into(),
                Some("smrf".into()),
                None,
                None,
                units,
                "dsm".into(),
                extra,
            ),
        }]);
    }
    let word = ground_bands::on_dtm_word(w).expect("a WORD@dtm word");
    let features = terrain::expand(&[word.to_string()], &recipe.scales_m)?;
    let mut out = Vec::new();
    for feature in features {
        if let Some(r) = feature.scale_m() {
            terrain::validate_window_radius(
                r,
                &format!("`{w}` in the feature list"),
                hx_max,
                hy_max,
            )?;
        }
        let (wx, wy) = feature.window_px(hx, hy);
        check_window_fits(&feature, (wx, wy), (hx, hy), target)?;
        let index = match g.dtm_features.iter().position(|f| f == &feature) {
            Some(i) => i,
            None => {
                g.dtm_features.push(feature.clone());
                g.dtm_features.len() - 1
            }
        };
        g.dtm_halo = g.dtm_halo.max(feature.halo_px(hx, hy));
        let method = feature.method_with_shape(shape);
        let mut extra = extra.clone();
        extra.insert(
            "edge_rule".into(),
            terrain::catalogue::edge_rule(feature.feature_key(), method.as_deref().unwrap_or(""))
                .into(),
        );
        out.push(BandPlan {
            producer: Producer::Ground(GroundBand::OnDtm(index)),
            ramp: RampKind::for_feature(feature.feature_key()),
            meta: band_record(
                format!("{}_dtm", feature.band_name()),
                feature.feature_key().to_string(),
                method,
                feature.scale_m(),
                feature.scale_m().map(|_| 2 * wx.max(wy) + 1),
                feature.units(),
                "dtm".into(),
                extra,
            ),
        });
    }
    Ok(out)
}

/// The bands of one texture word (`glcm@1.5@ndvi`, `stddev@nir`), their radii checked
/// against the grid as every windowed radius is.
fn texture_band_plans(
    w: &str,
    recipe: &Recipe,
    mapped: &[Role],
    (hx, hy): (f64, f64),
    (hx_max, hy_max): (f64, f64),
    target: &Grid,
) -> Result<Vec<BandPlan>> {
    let ctx = TextureContext {
        mapped,
        expressions: &recipe.expressions,
        scales_m: &recipe.scales_m,
        settings: &recipe.texture,
        h_min: (hx, hy),
    };
    let shape = recipe.window;
    let mut out = Vec::new();
    for band in texture_bands::plan_word(w, &ctx)? {
        let origin = if w.matches('@').count() == 2 {
            format!("`{w}` in the feature list")
        } else {
            "--scales, or scales_m in the recipe".to_string()
        };
        terrain::validate_window_radius(band.radius_m, &origin, hx_max, hy_max)?;
        let side = band.window_px();
        if side > target.width.max(target.height) {
            return Err(Error::usage(format!(
                "{} at radius {} m: the window is {side} cells across, larger than the raster ({} x {} cells)",
                band.quantity.key(),
                compact(band.radius_m),
                target.width,
                target.height
            ))
            .with_fix("use a smaller radius (--scales, or WORD@METRES@SOURCE)"));
        }
        let ramp = if band.quantity == texture_bands::TextureQuantity::Correlation {
            RampKind::Diverging
        } else {
            RampKind::Sequential
        };
        let mut extra = band.record(shape);
        extra.insert(
            "resampling".into(),
            serde_json::to_value(recipe.resampling).unwrap_or_default(),
        );
        let meta = band_record(
            band.band_name(),
            band.quantity.key().to_string(),
            Some(band.method(shape)),
            Some(band.radius_m),
            Some(side),
            band.quantity.units(),
            band.source.name(),
            extra,
        );
        out.push(BandPlan {
            producer: Producer::Texture(band),
            ramp,
            meta,
        });
    }
    Ok(out)
}

/// NDVI guidance needs the red and near-infrared bands.
fn check_ground_guidance(g: &GroundPlan, mapped: &[Role]) -> Result<()> {
    if g.params.ndvi_max.is_none() {
        return Ok(());
    }
    for role in [Role::Red, Role::Nir] {
        if !mapped.contains(&role) {
            return Err(Error::usage(format!(
                "NDVI guidance of the ground filter needs the `{role}` band, which is not mapped"
            ))
            .with_fix(format!(
                "map it with --ortho FILE --bands {role}=N or --band {role}=FILE, or drop --ground-ndvi/--ground-ndvi-max"
            )));
        }
    }
    Ok(())
}

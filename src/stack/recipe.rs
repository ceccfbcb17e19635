//! The recipe: what a stack is built from and how, as a TOML file or flags.
//!
//! A recipe file has these tables (every key optional; relative paths are relative to the
//! recipe file's folder):
//!
//! ```toml
//! [inputs]
//! dsm = "flight/dsm.tif"
//! dsm_band = 1                                # needed when the DSM file has several bands
//! allow_any_elevation = false                 # accept elevations outside −500…9000 m
//! ortho = "flight/ortho.tif"                  # one multi-band orthomosaic …
//! bands = "blue=1,green=2,red=3,rededge=4,nir=5"
//! files = { nir = "flight/nir.tif" }         # … and/or one file per band ("FILE" or "FILE:BAND")
//! reflectance_scale = 0.0001                  # reflectance = stored · scale + offset
//! reflectance_offset = 0.0
//! zero_is_nodata = false                      # all bands 0 → nodata
//! allow_any_reflectance = false               # accept reflectance outside −0.05…1.5
//!
//! [features]
//! list = ["elevation", "slope", "curvature", "tpi", "ndvi"]   # terrain words and index names
//! scales_m = [1.0, 5.0]                        # window radii in metres
//! window = "square"                            # or "disc"
//! min_valid_fraction = 0.75
//! z_factor = 1.0
//! expressions = { wet = "(green - nir) / (green + nir)" }
//!
//! [grid]
//! resolution_m = 0.2                            # default: the DSM's cell size
//! extent = "dsm"                                # or "intersection"
//! resampling = "bilinear"                       # nearest, bilinear, cubic, average
//!
//! [output]
//! compression = "deflate"                       # or "zstd"
//!
//! [ground]                                      # the ground filter (dtm, height, ground)
//! max_object_m = 20.0                           # width of the widest object removed
//! slope = 0.15                                  # slope threshold, rise over run
//! elevation_threshold_m = 0.5
//! slope_scale_m = 1.25                          # elevation scaling factor
//! window = "square"                             # or "disc"
//! reach_m = 20.0                                # default: max_object_m
//! ndvi = false                                  # NDVI guidance (needs red and nir) …
//! ndvi_max = 0.5                                # … or guidance at this threshold
//!
//! [texture]                                     # glcm@R@SOURCE and stddev@R@SOURCE bands
//! levels = 32                                   # grey levels of the co-occurrence features
//! distance_px = 1                               # cells between the two cells of a pair
//! ranges = { ndvi = "0..1" }                    # quantisation range per source
//! ```
//!
//! Flags override the recipe key by key; the merged result is a [`Recipe`] whose every
//! field is explicit, and that is what `stack.json` records under `parameters`.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

use crate::align::Resampling;
use crate::error::{Error, Result};
pub use crate::stack::settings::{
    BandMapSetting, ExtentRule, Given, OutputCompression, ReflectanceScale, WindowShape,
};

/// The features built when neither flags nor recipe name any: the 3x3 set, position and
/// roughness at every scale, the reflectance bands and every index the bands allow.
pub const DEFAULT_FEATURES: &[&str] = &[
    "elevation",
    "slope",
    "northness",
    "eastness",
    "curvature",
    "tpi",
    "roughness",
    "relative_elevation",
    "reflectance",
    "indices",
];

/// Default window radii in metres.
pub const DEFAULT_SCALES_M: &[f64] = &[1.0, 5.0];

/// Where the window radii of a recipe come from, for error messages: the flag, the recipe
/// file's key, or the default.
pub fn scales_origin(from_flag: bool, from_file: bool) -> &'static str {
    if from_flag {
        "--scales"
    } else if from_file {
        "scales_m in the recipe"
    } else {
        "the default --scales 1,5"
    }
}

/// The recipe file as written (every key optional).
#[derive(Clone, Debug, Default, Deserialize, Serialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct RecipeFile {
    #[serde(default)]
    pub inputs: InputsSection,
    #[serde(default)]
    pub features: FeaturesSection,
    #[serde(default)]
    pub grid: GridSection,
    #[serde(default)]
    pub output: OutputSection,
    /// The file it was read from (errors about its values name it); not a key.
    #[serde(skip)]
    pub path: Option<PathBuf>,
    /// The ground filter's settings (`crate::ground::settings`).
    #[serde(default)]
    pub ground: crate::ground::settings::GroundSection,
    /// Texture settings (`crate::texture::settings`).
    #[serde(default)]
    pub texture: crate::texture::settings::TextureSection,
}

#[derive(Clone, Debug, Default, Deserialize, Serialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct InputsSection {
    pub dsm: Option<PathBuf>,
    /// Band of the DSM file holding elevations (1-based); required for multi-band files.
    pub dsm_band: Option<usize>,
    /// Accept elevations outside the plausible range (see `stack::plausibility`).
    pub allow_any_elevation: Option<bool>,
    /// Accept reflectance outside the plausible range (see `stack::plausibility`).
    pub allow_any_reflectance: Option<bool>,
    pub ortho: Option<PathBuf>,
    pub bands: Option<String>,
    #[serde(default)]
    pub files: BTreeMap<String, String>,
    /// A number, or a text such as "1/65535" or "nir=1e-4,red=1e-4".
    pub reflectance_scale: Option<toml::Value>,
    pub reflectance_offset: Option<toml::Value>,
    pub zero_is_nodata: Option<bool>,
}

#[derive(Clone, Debug, Default, Deserialize, Serialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct FeaturesSection {
    pub list: Option<Vec<String>>,
    pub scales_m: Option<Vec<f64>>,
    pub window: Option<WindowShape>,
    pub min_valid_fraction: Option<f64>,
    pub z_factor: Option<f64>,
    #[serde(default)]
    pub expressions: BTreeMap<String, String>,
}

#[derive(Clone, Debug, Default, Deserialize, Serialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct GridSection {
    pub resolution_m: Option<f64>,
    pub extent: Option<ExtentRule>,
    pub resampling: Option<Resampling>,
}

#[derive(Clone, Debug, Default, Deserialize, Serialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct OutputSection {
    pub compression: Option<OutputCompression>,
}

impl RecipeFile {
    /// Read a recipe file; relative paths become relative to its folder.
    pub fn load(path: &Path) -> Result<RecipeFile> {
        let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, e))?;
        let mut recipe: RecipeFile = toml::from_str(&text).map_err(|e| {
            let at = e
                .span()
                .map(|span| line_at(&text, span.start))
                .unwrap_or_default();
            Error::file(
                path,
                format!("not a valid recipe: {}{at}", e.message().trim()),
            )
            .with_fix("see the recipe format in the README (tables inputs, features, grid, output)")
        })?;
        recipe.path = Some(path.to_path_buf());
        let base = path.parent().unwrap_or(Path::new("."));
        let rebase = |p: &mut PathBuf| {
            if p.is_relative() {
                *p = base.join(&*p);
            }
        };
        if let Some(p) = recipe.inputs.dsm.as_mut() {
            rebase(p);
        }
        if let Some(p) = recipe.inputs.ortho.as_mut() {
            rebase(p);
        }
        for spec in recipe.inputs.files.values_mut() {
            let p = Path::new(spec.as_str());
            if p.is_relative() {
                *spec = base.join(p).to_string_lossy().into_owned();
            }
        }
        Ok(recipe)
    }
}

/// Flags given on the command line; `None`/empty means "not given".
#[derive(Clone, Debug, Default)]
pub struct RecipeFlags {
    pub dsm: Option<PathBuf>,
    pub dsm_band: Option<usize>,
    pub allow_any_elevation: bool,
    pub allow_any_reflectance: bool,
    pub ortho: Option<PathBuf>,
    pub bands: Option<String>,
    /// `ROLE=FILE[:BAND]` entries.
    pub band_files: Vec<String>,
    pub features: Option<Vec<String>>,
    pub scales_m: Option<Vec<f64>>,
    /// `NAME=EXPR` entries.
    pub expressions: Vec<String>,
    pub resolution_m: Option<f64>,
    pub extent: Option<ExtentRule>,
    pub resampling: Option<Resampling>,
    pub window: Option<WindowShape>,
    pub min_valid_fraction: Option<f64>,
    pub z_factor: Option<f64>,
    pub reflectance_scale: Option<String>,
    pub reflectance_offset: Option<String>,
    pub zero_is_nodata: bool,
    pub compression: Option<OutputCompression>,
    /// `--ground-*` flags.
    pub ground: crate::ground::settings::GroundSection,
    /// `--texture-*` flags.
    pub texture: crate::texture::settings::TextureSection,
}

/// A fully resolved recipe: every choice explicit. Recorded in `stack.json`.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct Recipe {
    pub dsm: PathBuf,
    /// Band of the DSM file holding elevations (1-based); `None` = the only band.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub dsm_band: Option<usize>,
    /// Build even when elevations lie outside the plausible range.
    #[serde(default, skip_serializing_if = "std::ops::Not::not")]
    pub allow_any_elevation: bool,
    /// Build even when reflectance lies outside the plausible range.
    #[serde(default, skip_serializing_if = "std::ops::Not::not")]
    pub allow_any_reflectance: bool,
    pub ortho: Option<PathBuf>,
    /// Band map of `ortho` ("blue=1,green=2,…,alpha=6"), recorded as given.
    pub bands: Option<BandMapSetting>,
    /// One-file-per-band inputs, `ROLE=FILE[:BAND]`.
    pub band_files: Vec<String>,
    /// Reflectance scale: one number, or `ROLE=NUMBER` pairs (`spectral::PerBand`).
    pub reflectance_scale: Option<ReflectanceScale>,
    /// Reflectance offset, same form as the scale.
    pub reflectance_offset: Option<ReflectanceScale>,
    pub zero_is_nodata: bool,
    /// Feature words and index names, as asked (expanded by the plan).
    pub features: Vec<String>,
    pub scales_m: Vec<f64>,
    pub window: WindowShape,
    pub min_valid_fraction: f64,
    pub z_factor: f64,
    /// Name → expression text.
    pub expressions: BTreeMap<String, String>,
    /// Target cell size in metres; `None` keeps the DSM's.
    pub resolution_m: Option<f64>,
    pub extent: ExtentRule,
    pub resampling: Resampling,
    pub compression: OutputCompression,
    /// The ground filter's settings (used when a ground band is asked for).
    #[serde(default)]
    pub ground: crate::ground::settings::GroundSettings,
    /// Texture settings (used when a texture band is asked for).
    #[serde(default)]
    pub texture: crate::texture::settings::TextureSettings,
}

impl Recipe {
    /// Merge a recipe file (if any) with flags; flags win. Checks every value's range.
    pub fn resolve(file: Option<&RecipeFile>, flags: &RecipeFlags) -> Result<Recipe> {
        let empty = RecipeFile::default();
        let f = file.unwrap_or(&empty);
        let dsm = flags
            .dsm
            .clone()
            .or_else(|| f.inputs.dsm.clone())
            .ok_or_else(|| {
                Error::usage("no DSM given")
                    .with_fix("pass --dsm FILE, or set inputs.dsm in the recipe")
            })?;
        let ortho = flags.ortho.clone().or_else(|| f.inputs.ortho.clone());
        let bands = flags.bands.as_deref().or(f.inputs.bands.as_deref());
        match (&ortho, &bands) {
            (None, Some(_)) => {
                return Err(Error::usage("--bands names bands of an orthomosaic, but no --ortho was given")
                    .with_fix("add --ortho FILE, or give each band as --band ROLE=FILE"))
            }
            (Some(_), None) => {
                return Err(Error::usage("--ortho was given without --bands").with_fix(
                    "say which band holds which role, e.g. --bands blue=1,green=2,red=3,rededge=4,nir=5",
                ))
            }
            _ => {}
        }
        let bands = match bands {
            Some(text) => {
                let what = origin(flags.bands.is_some(), "--bands", f, "inputs.bands");
                Some(Given::parse(&what, text).map_err(|e| named(e, &what))?)
            }
            None => None,
        };
        let band_files: Vec<String> = f
            .inputs
            .files
            .iter()
            .map(|(k, v)| format!("{k}={v}"))
            .chain(flags.band_files.iter().cloned())
            .collect();
        let features = flags
            .features
            .clone()
            .or_else(|| f.features.list.clone())
            .unwrap_or_else(|| DEFAULT_FEATURES.iter().map(|s| s.to_string()).collect());
        if features.is_empty() {
            return Err(Error::usage("the feature list is empty")
                .with_fix("name at least one feature; `terrastack features` lists them"));
        }
        let scales_origin = scales_origin(flags.scales_m.is_some(), f.features.scales_m.is_some());
        let scales_m = flags
            .scales_m
            .clone()
            .or_else(|| f.features.scales_m.clone())
            .unwrap_or_else(|| DEFAULT_SCALES_M.to_vec());
        for &s in &scales_m {
            crate::terrain::check_radius_value(s, scales_origin)?;
        }
        let window = flags.window.or(f.features.window).unwrap_or_default();
        let min_valid_fraction = flags
            .min_valid_fraction
            .or(f.features.min_valid_fraction)
            .unwrap_or(0.75);
        if !(min_valid_fraction > 0.0 && min_valid_fraction <= 1.0) {
            return Err(Error::usage(format!(
                "minimum valid fraction {min_valid_fraction} is outside (0, 1]"
            )));
        }
        let z_factor = flags.z_factor.or(f.features.z_factor).unwrap_or(1.0);
        if !z_factor.is_finite() || z_factor == 0.0 {
            return Err(Error::usage(format!(
                "z-factor {z_factor} must be a non-zero number"
            )));
        }
        let mut expressions = f.features.expressions.clone();
        let mut given = std::collections::BTreeSet::new();
        for spec in &flags.expressions {
            let (name, expr) = spec.split_once('=').ok_or_else(|| {
                Error::usage(format!("--index {spec:?} is not NAME=EXPRESSION"))
                    .with_fix("write e.g. --index wet=\"(green - nir) / (green + nir)\"")
            })?;
            let name = name.trim().to_string();
            if name.is_empty() || !name.chars().all(|c| c.is_ascii_alphanumeric() || c == '_') {
                return Err(Error::usage(format!(
                    "--index name {name:?} must be letters, digits and underscores"
                )));
            }
            if !given.insert(name.to_ascii_lowercase()) {
                return Err(Error::usage(format!("--index {name} is given twice"))
                    .with_fix("give each band-math band its own name"));
            }
            expressions.insert(name, expr.trim().to_string());
        }
        let resolution_m = flags.resolution_m.or(f.grid.resolution_m);
        if let Some(r) = resolution_m {
            if !r.is_finite() || r <= 0.0 {
                return Err(Error::usage(format!(
                    "resolution {r} m is not a positive number of metres"
                )));
            }
        }
        let extent = flags.extent.or(f.grid.extent).unwrap_or_default();
        let compression = flags
            .compression
            .or(f.output.compression)
            .unwrap_or_default();
        let reflectance_scale = per_band(
            flags.reflectance_scale.as_deref(),
            "--reflectance-scale",
            f,
            f.inputs.reflectance_scale.as_ref(),
            "inputs.reflectance_scale",
        )?;
        let reflectance_offset = per_band(
            flags.reflectance_offset.as_deref(),
            "--reflectance-offset",
            f,
            f.inputs.reflectance_offset.as_ref(),
            "inputs.reflectance_offset",
        )?;
        let dsm_band = flags.dsm_band.or(f.inputs.dsm_band);
        if dsm_band == Some(0) {
            return Err(Error::usage("--dsm-band 0: bands are numbered from 1")
                .with_fix("give the band holding elevations, e.g. --dsm-band 1"));
        }
        Ok(Recipe {
            dsm,
            dsm_band,
            allow_any_elevation: flags.allow_any_elevation
                || f.inputs.allow_any_elevation.unwrap_or(false),
            allow_any_reflectance: flags.allow_any_reflectance
                || f.inputs.allow_any_reflectance.unwrap_or(false),
            ortho,
            bands,
            band_files,
            reflectance_scale,
            reflectance_offset,
            zero_is_nodata: flags.zero_is_nodata || f.inputs.zero_is_nodata.unwrap_or(false),
            features,
            scales_m,
            window,
            min_valid_fraction,
            z_factor,
            expressions,
            resolution_m,
            extent,
            resampling: flags.resampling.or(f.grid.resampling).unwrap_or_default(),
            compression,
            ground: crate::ground::settings::GroundSettings::resolve(&f.ground, &flags.ground)?,
            texture: crate::texture::settings::TextureSettings::resolve(
                &f.texture,
                &flags.texture,
            )?,
        })
    }
}

/// A recipe value given as a number or a text, as the text the option parsers take.
fn number_text(v: &toml::Value) -> String {
    match v {
        toml::Value::String(s) => s.clone(),
        other => other.to_string(),
    }
}

/// How errors name a value: its flag when the flag gave it, else its recipe key (and the
/// recipe file when known).
fn origin(from_flag: bool, flag: &str, file: &RecipeFile, key: &str) -> String {
    match (&file.path, from_flag) {
        (_, true) => flag.to_string(),
        (Some(p), false) => format!("{key} in the recipe {}", p.display()),
        (None, false) => format!("{key} in the recipe"),
    }
}

/// `e` with `what` (a flag or recipe key) named in front of its problem, unless it names
/// it already.
fn named(e: Error, what: &str) -> Error {
    match e {
        Error::Usage { problem, fix } if !problem.contains(what) => Error::Usage {
            problem: format!("{what}: {problem}"),
            fix,
        },
        other => other,
    }
}

/// A reflectance scale or offset from its flag (text) or recipe key (number or text).
fn per_band(
    flag_text: Option<&str>,
    flag: &str,
    file: &RecipeFile,
    key_value: Option<&toml::Value>,
    key: &str,
) -> Result<Option<ReflectanceScale>> {
    let text = match (flag_text, key_value) {
        (Some(t), _) => t.to_string(),
        (None, Some(v)) => number_text(v),
        (None, None) => return Ok(None),
    };
    let what = origin(flag_text.is_some(), flag, file, key);
    Given::parse(&what, &text).map(Some)
}

/// " (line N: `TEXT`)" for the line of `text` holding byte `at`, for parse errors.
fn line_at(text: &str, at: usize) -> String {
    let mut at = at.min(text.len());
    while !text.is_char_boundary(at) {
        at -= 1;
    }
    let start = text[..at].rfind('\n').map_or(0, |i| i + 1);
    let end = text[at..].find('\n').map_or(text.len(), |i| at + i);
    let number = text[..at].matches('\n').count() + 1;
    format!(" (line {number}: `{}`)", text[start..end].trim())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn flags_with_dsm() -> RecipeFlags {
        RecipeFlags {
            dsm: Some("dsm.tif".into()),
            ..Default::default()
        }
    }

    #[test]
    fn defaults_are_explicit() {
        let r = Recipe::resolve(None, &flags_with_dsm()).unwrap();
        assert_eq!(r.scales_m, DEFAULT_SCALES_M);
        assert_eq!(r.window, WindowShape::Square);
        assert_eq!(r.min_valid_fraction, 0.75);
        assert_eq!(r.resampling, Resampling::Bilinear);
        assert_eq!(r.features.len(), DEFAULT_FEATURES.len());
    }

    #[test]
    fn flags_override_recipe() {
        let file: RecipeFile = toml::from_str(
            r#"
            [inputs]
            dsm = "a.tif"
            ortho = "o.tif"
            bands = "red=3, nir=5"
            [features]
            list = ["slope"]
            scales_m = [2.0]
            expressions = { wet = "green - nir" }
            [grid]
            resampling = "cubic"
            "#,
        )
        .unwrap();
        let flags = RecipeFlags {
            scales_m: Some(vec![0.5, 3.0]),
            expressions: vec!["dry = nir - red".into()],
            ..Default::default()
        };
        let r = Recipe::resolve(Some(&file), &flags).unwrap();
        assert_eq!(r.dsm, PathBuf::from("a.tif"));
        assert_eq!(r.bands.as_ref().map(|b| b.text()), Some("red=3, nir=5"));
        assert_eq!(r.scales_m, vec![0.5, 3.0]);
        assert_eq!(r.features, vec!["slope"]);
        assert_eq!(r.resampling, Resampling::Cubic);
        assert_eq!(r.expressions.len(), 2);
        assert_eq!(r.expressions["dry"], "nir - red");
    }

    #[test]
    fn bad_values_are_refused_with_their_name() {
        let mut f = flags_with_dsm();
        f.scales_m = Some(vec![-1.0]);
        assert!(Recipe::resolve(None, &f)
            .unwrap_err()
            .to_string()
            .contains("-1"));
        let mut f = flags_with_dsm();
        f.ortho = Some("o.tif".into());
        assert!(Recipe::resolve(None, &f)
            .unwrap_err()
            .to_string()
            .contains("--bands"));
        assert!(Recipe::resolve(None, &RecipeFlags::default()).is_err());
    }

    #[test]
    fn unknown_recipe_key_is_an_error() {
        let tmp = tempfile::tempdir().unwrap();
        let p = tmp.path().join("r.toml");
        std::fs::write(&p, "[features]\nlsit = [\"slope\"]\n").unwrap();
        let e = RecipeFile::load(&p).unwrap_err().to_string();
        assert!(e.contains("r.toml") && e.contains("lsit"), "{e}");
    }

    #[test]
    fn bad_choices_and_texts_name_their_key_and_file() {
        let tmp = tempfile::tempdir().unwrap();
        let p = tmp.path().join("r.toml");
        std::fs::write(&p, "[grid]\nresolution_m = 0.5\nextent = \"everything\"\n").unwrap();
        let e = RecipeFile::load(&p).unwrap_err().to_string();
        assert!(
            e.contains("r.toml") && e.contains("line 3") && e.contains("intersection"),
            "{e}"
        );
        std::fs::write(&p, "[inputs]\northo = \"o.tif\"\nbands = \"red=x\"\n").unwrap();
        let file = RecipeFile::load(&p).unwrap();
        let e = Recipe::resolve(Some(&file), &flags_with_dsm())
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("inputs.bands in the recipe") && e.contains("r.toml"),
            "{e}"
        );
        let mut flags = flags_with_dsm();
        flags.reflectance_scale = Some("abc".into());
        let e = Recipe::resolve(None, &flags).unwrap_err().to_string();
        assert!(e.contains("--reflectance-scale"), "{e}");
        std::fs::write(&p, "[inputs]\nreflectance_scale = 0.0001\n").unwrap();
        let file = RecipeFile::load(&p).unwrap();
        let r = Recipe::resolve(Some(&file), &flags_with_dsm()).unwrap();
        let scale = r.reflectance_scale.unwrap();
        assert_eq!((scale.text(), scale.value().all), ("0.0001", Some(1e-4)));
    }
}

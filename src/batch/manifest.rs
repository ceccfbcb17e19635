//! The batch manifest: one TOML file describing many flights of one site.
//!
//! ```toml
//! [batch]
//! out = "stacks"                 # output root, relative to this file (default "batch-out")
//! recipe = "recipe.toml"         # optional recipe file shared by every flight
//! reference = "may"              # flight the others are registered against (default: earliest date)
//! temporal = true                # also write the multi-temporal stack (default true)
//! shift_layer = "dsm"            # layer for shift estimation: "dsm" or "nir" (default "dsm")
//! align = "auto"                 # apply shifts: "auto" (confident and > 0.2 cell), "on", "off"
//!
//! [batch.recipe.features]        # inline recipe keys: the same tables as a recipe file;
//! list = ["slope", "tpi", "ndvi"]  # they override the recipe file key by key
//!
//! [grid]                         # optional common grid; every key optional
//! epsg = 32633                   # default: the reference DSM's CRS
//! resolution = 0.1               # cell size in CRS units (default: the reference DSM's)
//! bounds = [500000.0, 5000000.0, 500100.0, 5000080.0]   # xmin, ymin, xmax, ymax
//!
//! [[flight]]
//! id = "may"                     # letters, digits, '-', '_' (names the output folder)
//! date = "2025-05-14"            # ISO 8601 calendar date
//! dsm = "2025-05-14/dsm.tif"
//! ortho = "2025-05-14/ortho.tif"
//! bands = "blue=1,green=2,red=3,rededge=4,nir=5"
//!
//! [[flight]]
//! id = "june"
//! date = "2025-06-20"
//! dsm = "2025-06-20/dsm.tif"
//! files = { red = "2025-06-20/red.tif", nir = "2025-06-20/nir.tif:1" }
//! recipe = { features = { scales_m = [2.0] } }   # this flight's own overrides
//! ```
//!
//! Relative paths are relative to the manifest's folder (paths inside a recipe file are
//! relative to that file). The recipe of one flight is: the recipe file, overridden by
//! `[batch.recipe]`, overridden by the flight's `recipe` table, with the flight's inputs
//! (`dsm`, `ortho`, `bands`, `files`) on top.
//!
//! Without `bounds` the common grid is the intersection of every flight's DSM extent,
//! snapped inward to the lattice of cells anchored at the reference DSM's origin.

use std::collections::BTreeSet;
use std::path::{Path, PathBuf};

use serde::Deserialize;

use crate::error::{Error, Result};
use crate::grid::{Crs, Grid};
use crate::stack::recipe::{Recipe, RecipeFile, RecipeFlags};

/// Output root used when the manifest names none.
pub const DEFAULT_OUT: &str = "batch-out";

/// The manifest as written.
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct ManifestFile {
    #[serde(default)]
    batch: BatchSection,
    grid: Option<GridSpec>,
    #[serde(default)]
    flight: Vec<FlightEntry>,
}

#[derive(Clone, Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct BatchSection {
    out: Option<PathBuf>,
    recipe: Option<toml::Value>,
    reference: Option<String>,
    temporal: Option<bool>,
    shift_layer: Option<String>,
    align: Option<String>,
}

/// The optional `[grid]` table: a common grid given explicitly, key by key.
#[derive(Clone, Debug, Default, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct GridSpec {
    pub epsg: Option<u32>,
    /// Cell size in CRS units.
    pub resolution: Option<f64>,
    /// xmin, ymin, xmax, ymax in CRS units.
    pub bounds: Option<[f64; 4]>,
}

/// One `[[flight]]` entry.
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FlightEntry {
    pub id: String,
    pub date: String,
    pub dsm: PathBuf,
    pub ortho: Option<PathBuf>,
    pub bands: Option<String>,
    #[serde(default)]
    pub files: std::collections::BTreeMap<String, String>,
    /// This flight's recipe overrides (recipe tables).
    pub recipe: Option<toml::Value>,
}

/// Which layer shifts are estimated on.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ShiftLayer {
    /// The DSM's elevations.
    Dsm,
    /// The orthomosaic's near-infrared band.
    Nir,
}

/// A checked manifest: flights with resolved paths and recipes.
#[derive(Clone, Debug)]
pub struct Manifest {
    /// The manifest file.
    pub path: PathBuf,
    /// Output root.
    pub out: PathBuf,
    /// Id of the reference flight for shifts.
    pub reference: String,
    /// Whether to write the multi-temporal stack.
    pub temporal: bool,
    pub shift_layer: ShiftLayer,
    /// Whether flights are built on the common grid moved by their shifts
    /// (`batch.align`, default auto; `--align` overrides it).
    pub align: super::shift::AlignMode,
    pub grid: GridSpec,
    /// Flights in manifest order.
    pub flights: Vec<Flight>,
}

/// One flight, ready to build.
#[derive(Clone, Debug)]
pub struct Flight {
    pub id: String,
    /// ISO 8601 date, `YYYY-MM-DD`.
    pub date: String,
    /// The flight's fully resolved recipe (inputs included).
    pub recipe: Recipe,
}

impl Flight {
    /// Every input file of the flight with its role, in a fixed order: dsm, ortho, then
    /// per-band files by role.
    pub fn inputs(&self) -> Vec<(String, PathBuf)> {
        let mut v = vec![("dsm".to_string(), self.recipe.dsm.clone())];
        if let Some(o) = &self.recipe.ortho {
            v.push(("ortho".into(), o.clone()));
        }
        for spec in &self.recipe.band_files {
            if let Some((role, rest)) = spec.split_once('=') {
                let file = split_band_suffix(rest);
                if !v.iter().any(|(_, p)| p == &file) {
                    v.push((role.trim().to_string(), file));
                }
            }
        }
        v
    }

    /// The file and 1-based band holding near-infrared, if the flight maps one.
    pub fn nir_band(&self) -> Option<(PathBuf, usize)> {
        for spec in &self.recipe.band_files {
            if let Some((role, rest)) = spec.split_once('=') {
                if role.trim() == "nir" {
                    let file = split_band_suffix(rest);
                    let band = rest
                        .rsplit_once(':')
                        .and_then(|(_, b)| b.trim().parse().ok())
                        .unwrap_or(1);
                    return Some((file, band));
                }
            }
        }
        let ortho = self.recipe.ortho.as_ref()?;
        let bands = self.recipe.bands.as_ref()?;
        let (_, band) = bands
            .value()
            .roles
            .iter()
            .find(|(role, _)| *role == crate::spectral::Role::Nir)?;
        Some((ortho.clone(), *band))
    }
}

/// `FILE` of a `FILE[:BAND]` spec (a trailing `:N` with N a number is the band).
fn split_band_suffix(spec: &str) -> PathBuf {
    match spec.rsplit_once(':') {
        Some((file, band))
            if !band.is_empty() && band.trim().chars().all(|c| c.is_ascii_digit()) =>
        {
            PathBuf::from(file.trim())
        }
        _ => PathBuf::from(spec.trim()),
    }
}

impl Manifest {
    /// Read and check a manifest. Every problem names the manifest and the fix.
    pub fn load(path: &Path) -> Result<Manifest> {
        let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, e))?;
        Manifest::parse(&text, path)
    }

    /// Check a manifest given as text; `path` is where it lives (relative paths and
    /// messages refer to it).
    pub fn parse(text: &str, path: &Path) -> Result<Manifest> {
        let bad = |problem: String, fix: &str| Error::file(path, problem).with_fix(fix.to_string());
        let file: ManifestFile = toml::from_str(text).map_err(|e| {
            bad(
                format!("not a valid batch manifest: {}", e.message().trim()),
                "see the manifest format in the README (tables batch, grid and [[flight]])",
            )
        })?;
        let base = path.parent().map(Path::to_path_buf).unwrap_or_default();
        let base = if base.as_os_str().is_empty() {
            PathBuf::from(".")
        } else {
            base
        };
        if file.flight.is_empty() {
            return Err(bad(
                "the manifest lists no flight".into(),
                "add one [[flight]] table per flight with id, date and dsm",
            ));
        }
        let mut ids = BTreeSet::new();
        let mut dates = BTreeSet::new();
        for f in &file.flight {
            if f.id.is_empty()
                || !f
                    .id
                    .chars()
                    .all(|c| c.is_ascii_alphanumeric() || c == '-' || c == '_')
            {
                return Err(bad(
                    format!("flight id {:?} is not letters, digits, '-' and '_'", f.id),
                    "give each flight a short id such as \"2025-05-14\" or \"may_a\" (it names the output folder)",
                ));
            }
            if !ids.insert(f.id.clone()) {
                return Err(bad(
                    format!("flight id {:?} appears twice", f.id),
                    "give every flight its own id",
                ));
            }
            check_date(&f.date).map_err(|problem| {
                bad(
                    format!("flight {:?}: {problem}", f.id),
                    "write the date as YYYY-MM-DD, e.g. date = \"2025-05-14\"",
                )
            })?;
            if !dates.insert(f.date.clone()) {
                return Err(bad(
                    format!("flight {:?}: date {} is already used by another flight", f.id, f.date),
                    "the multi-temporal stack names bands by date; keep one flight per date, or set temporal = false",
                ));
            }
        }
        let temporal = file.batch.temporal.unwrap_or(true);
        let reference = match &file.batch.reference {
            Some(r) => {
                if !ids.contains(r) {
                    return Err(bad(
                        format!("reference flight {r:?} is not among the flights"),
                        "set batch.reference to one of the [[flight]] ids, or leave it out to use the earliest date",
                    ));
                }
                r.clone()
            }
            None => file
                .flight
                .iter()
                .min_by(|a, b| a.date.cmp(&b.date).then(a.id.cmp(&b.id)))
                .map(|f| f.id.clone())
                .expect("at least one flight"),
        };
        let shift_layer =
            match file.batch.shift_layer.as_deref() {
                None | Some("dsm") => ShiftLayer::Dsm,
                Some("nir") => ShiftLayer::Nir,
                Some(other) => return Err(bad(
                    format!("shift_layer {other:?} is not \"dsm\" or \"nir\""),
                    "set batch.shift_layer = \"dsm\" (elevations) or \"nir\" (near-infrared band)",
                )),
            };
        let align = match file.batch.align.as_deref() {
            None => super::shift::AlignMode::Auto,
            Some(text) => {
                super::shift::AlignMode::parse("batch.align", text).map_err(|e| e.in_file(path))?
            }
        };
        if let Some(g) = &file.grid {
            check_grid_spec(g).map_err(|p| bad(p, "fix the [grid] table: epsg = CODE, resolution = CELL SIZE (> 0), bounds = [xmin, ymin, xmax, ymax]"))?;
        }

        // Shared recipe: the file, then the inline keys.
        let mut shared = match &file.batch.recipe {
            None => toml::Value::Table(Default::default()),
            Some(toml::Value::String(p)) => {
                let p = base.join(p);
                recipe_to_value(&RecipeFile::load(&p)?, &p)?
            }
            Some(toml::Value::Table(t)) => {
                // An inline recipe may still name a file under `file`.
                let mut t = t.clone();
                let mut start = toml::Value::Table(Default::default());
                if let Some(toml::Value::String(p)) = t.remove("file") {
                    let p = base.join(p);
                    start = recipe_to_value(&RecipeFile::load(&p)?, &p)?;
                }
                let mut inline = toml::Value::Table(t);
                rebase_recipe_paths(&mut inline, &base);
                merge(&mut start, inline);
                start
            }
            Some(_) => {
                return Err(bad(
                    "batch.recipe must be a file name or a table of recipe keys".into(),
                    "write recipe = \"recipe.toml\", or [batch.recipe.features] tables",
                ))
            }
        };
        // Check the shared recipe keys once, so a typo is reported against the manifest.
        value_to_recipe(&shared, path, "batch.recipe")?;
        if let toml::Value::Table(t) = &mut shared {
            t.remove("file");
        }

        let mut flights = Vec::with_capacity(file.flight.len());
        for f in &file.flight {
            let mut value = shared.clone();
            if let Some(over) = &f.recipe {
                if !over.is_table() {
                    return Err(bad(
                        format!("flight {:?}: recipe must be a table of recipe keys", f.id),
                        "write e.g. recipe = { features = { scales_m = [2.0] } }",
                    ));
                }
                let mut over = over.clone();
                rebase_recipe_paths(&mut over, &base);
                merge(&mut value, over);
            }
            let recipe_file = value_to_recipe(&value, path, &format!("flight {:?} recipe", f.id))?;
            let flags = RecipeFlags {
                dsm: Some(base.join(&f.dsm)),
                ortho: f.ortho.as_ref().map(|o| base.join(o)),
                bands: f.bands.clone(),
                band_files: f
                    .files
                    .iter()
                    .map(|(role, spec)| format!("{role}={}", base.join(spec).to_string_lossy()))
                    .collect(),
                ..Default::default()
            };
            let recipe = Recipe::resolve(Some(&recipe_file), &flags).map_err(|e| {
                let text = e.to_string();
                let (problem, fix) = text.split_once("\n  fix: ").unwrap_or((
                    &text,
                    "correct this flight's entry (dsm, ortho with bands, files) or its recipe keys",
                ));
                bad(format!("flight {:?}: {problem}", f.id), fix)
            })?;
            flights.push(Flight {
                id: f.id.clone(),
                date: f.date.clone(),
                recipe,
            });
        }
        Ok(Manifest {
            path: path.to_path_buf(),
            out: base.join(file.batch.out.unwrap_or_else(|| PathBuf::from(DEFAULT_OUT))),
            reference,
            temporal,
            shift_layer,
            align,
            grid: file.grid.unwrap_or_default(),
            flights,
        })
    }

    /// The reference flight.
    pub fn reference_flight(&self) -> &Flight {
        self.flights
            .iter()
            .find(|f| f.id == self.reference)
            .expect("reference checked at load")
    }
}

/// Check an ISO 8601 calendar date `YYYY-MM-DD` (proleptic Gregorian leap years).
pub fn check_date(date: &str) -> std::result::Result<(), String> {
    let b = date.as_bytes();
    let digits = |r: std::ops::Range<usize>| b[r].iter().all(u8::is_ascii_digit);
    if b.len() != 10
        || b[4] != b'-'
        || b[7] != b'-'
        || !digits(0..4)
        || !digits(5..7)
        || !digits(8..10)
    {
        return Err(format!("date {date:?} is not YYYY-MM-DD"));
    }
    let year: u32 = date[0..4].parse().expect("digits");
    let month: u32 = date[5..7].parse().expect("digits");
    let day: u32 = date[8..10].parse().expect("digits");
    let leap = (year.is_multiple_of(4) && !year.is_multiple_of(100)) || year.is_multiple_of(400);
    let days = match month {
        1 | 3 | 5 | 7 | 8 | 10 | 12 => 31,
        4 | 6 | 9 | 11 => 30,
        2 if leap => 29,
        2 => 28,
        _ => return Err(format!("date {date:?} has month {month}, outside 1–12")),
    };
    if day == 0 || day > days {
        return Err(format!(
            "date {date:?} has day {day}, outside 1–{days} for that month"
        ));
    }
    Ok(())
}

fn check_grid_spec(g: &GridSpec) -> std::result::Result<(), String> {
    if let Some(r) = g.resolution {
        if !r.is_finite() || r <= 0.0 {
            return Err(format!("grid resolution {r} is not a positive number"));
        }
    }
    if let Some([x0, y0, x1, y1]) = g.bounds {
        if ![x0, y0, x1, y1].iter().all(|v| v.is_finite()) || x1 <= x0 || y1 <= y0 {
            return Err(format!(
                "grid bounds [{x0}, {y0}, {x1}, {y1}] are not xmin < xmax, ymin < ymax"
            ));
        }
    }
    Ok(())
}

/// A recipe file as a TOML value (paths already absolute or relative to the caller).
fn recipe_to_value(r: &RecipeFile, path: &Path) -> Result<toml::Value> {
    toml::Value::try_from(r)
        .map_err(|e| Error::file(path, format!("cannot merge this recipe: {e}")))
}

fn value_to_recipe(v: &toml::Value, manifest: &Path, what: &str) -> Result<RecipeFile> {
    v.clone().try_into().map_err(|e: toml::de::Error| {
        Error::file(manifest, format!("{what}: {}", e.message().trim())).with_fix(
            "recipe keys go in the tables inputs, features, grid and output, as in a recipe file",
        )
    })
}

/// Deep merge: tables merge key by key, anything else in `over` replaces `base`.
fn merge(base: &mut toml::Value, over: toml::Value) {
    match (base, over) {
        (toml::Value::Table(b), toml::Value::Table(o)) => {
            for (k, v) in o {
                match b.get_mut(&k) {
                    Some(existing) if existing.is_table() && v.is_table() => merge(existing, v),
                    _ => {
                        b.insert(k, v);
                    }
                }
            }
        }
        (b, o) => *b = o,
    }
}

/// Make the input paths of an inline recipe table relative to `base`.
fn rebase_recipe_paths(v: &mut toml::Value, base: &Path) {
    let Some(inputs) = v.get_mut("inputs").and_then(|i| i.as_table_mut()) else {
        return;
    };
    for key in ["dsm", "ortho"] {
        if let Some(toml::Value::String(p)) = inputs.get_mut(key) {
            *p = base.join(&*p).to_string_lossy().into_owned();
        }
    }
    if let Some(files) = inputs.get_mut("files").and_then(|f| f.as_table_mut()) {
        for (_, spec) in files.iter_mut() {
            if let toml::Value::String(p) = spec {
                *p = base.join(&*p).to_string_lossy().into_owned();
            }
        }
    }
}

/// The common grid of a batch: the `[grid]` table where given, else the intersection of
/// the flights' DSM `grids`, snapped inward to the reference DSM's cell lattice.
/// `reference` is the reference flight's DSM grid; `grids` holds every flight's.
pub fn common_grid(spec: &GridSpec, reference: &Grid, grids: &[(PathBuf, Grid)]) -> Result<Grid> {
    let crs = match spec.epsg {
        Some(code) if reference.crs.epsg != Some(code) => Crs::from_epsg(code),
        _ => reference.crs.clone(),
    };
    for (path, g) in grids {
        if !g.crs.same_as(&crs) {
            return Err(Error::file(
                path,
                format!(
                    "the DSM lies in {} but the batch's common grid is in {}",
                    g.crs.label(),
                    crs.label()
                ),
            )
            .with_fix("reproject the flight's rasters to one CRS first, or set [grid] epsg to the flights' CRS"));
        }
    }
    let res = spec.resolution.unwrap_or_else(|| reference.res_x());
    let res_y = spec.resolution.unwrap_or_else(|| reference.res_y());
    let (x0, y0, x1, y1) = match spec.bounds {
        Some([a, b, c, d]) => (a, b, c, d),
        None => {
            let mut bounds = reference.bounds();
            for (_, g) in grids {
                let (a, b, c, d) = g.bounds();
                bounds = (
                    bounds.0.max(a),
                    bounds.1.max(b),
                    bounds.2.min(c),
                    bounds.3.min(d),
                );
            }
            // Snap inward to the lattice anchored at the reference's north-west corner.
            let ox = reference.transform[0];
            let oy = reference.transform[3];
            let eps = 1e-9;
            let sx0 = ox + ((bounds.0 - ox) / res - eps).ceil() * res;
            let sx1 = ox + ((bounds.2 - ox) / res + eps).floor() * res;
            let sy1 = oy - ((oy - bounds.3) / res_y - eps).ceil() * res_y;
            let sy0 = oy - ((oy - bounds.1) / res_y + eps).floor() * res_y;
            (sx0, sy0, sx1, sy1)
        }
    };
    let w = (x1 - x0) / res;
    let h = (y1 - y0) / res_y;
    if w < 1.0 - 1e-9 || h < 1.0 - 1e-9 {
        let listed: Vec<String> = grids.iter().map(|(p, _)| p.display().to_string()).collect();
        return Err(Error::usage(format!(
            "the flights' DSMs do not overlap by a single cell ({})",
            listed.join(", ")
        ))
        .with_fix(
            "check that every flight covers the same site, or give [grid] bounds explicitly",
        ));
    }
    if spec.bounds.is_some() && ((w - w.round()).abs() > 1e-6 || (h - h.round()).abs() > 1e-6) {
        return Err(Error::usage(format!(
            "the [grid] bounds are not a whole number of {res}-unit cells ({w:.4} x {h:.4})"
        ))
        .with_fix("make xmax − xmin and ymax − ymin multiples of the resolution"));
    }
    Grid::new(
        w.round() as usize,
        h.round() as usize,
        [x0, res, 0.0, y1, 0.0, -res_y],
        crs,
    )
}

/// `grid` moved by (`dx`, `dy`) CRS units (east, north): the same cells, origin shifted.
pub fn shifted_grid(grid: &Grid, dx: f64, dy: f64) -> Grid {
    let mut g = grid.clone();
    g.transform[0] += dx;
    g.transform[3] += dy;
    g
}

#[cfg(test)]
mod tests {
    use super::*;

    fn manifest(text: &str) -> Result<Manifest> {
        Manifest::parse(text, Path::new("/site/flights.toml"))
    }

    const TWO: &str = r#"
        [batch]
        out = "stacks"
        [batch.recipe.features]
        list = ["slope", "ndvi"]
        scales_m = [1.0]

        [[flight]]
        id = "june"
        date = "2025-06-20"
        dsm = "b/dsm.tif"
        files = { red = "b/red.tif", nir = "b/nir.tif:2" }
        recipe = { features = { scales_m = [2.0] } }

        [[flight]]
        id = "may"
        date = "2025-05-14"
        dsm = "a/dsm.tif"
        ortho = "a/ortho.tif"
        bands = "red=3,nir=5"
    "#;

    #[test]
    fn flights_resolve_paths_and_overrides() {
        let m = manifest(TWO).unwrap();
        assert_eq!(m.out, PathBuf::from("/site/stacks"));
        // Earliest date is the reference when none is named.
        assert_eq!(m.reference, "may");
        let june = &m.flights[0];
        assert_eq!(june.recipe.dsm, PathBuf::from("/site/b/dsm.tif"));
        assert_eq!(june.recipe.scales_m, vec![2.0]);
        assert_eq!(june.recipe.features, vec!["slope", "ndvi"]);
        assert_eq!(june.nir_band(), Some((PathBuf::from("/site/b/nir.tif"), 2)));
        let may = &m.flights[1];
        assert_eq!(may.recipe.scales_m, vec![1.0]);
        assert_eq!(
            may.nir_band(),
            Some((PathBuf::from("/site/a/ortho.tif"), 5))
        );
        assert_eq!(
            may.inputs(),
            vec![
                ("dsm".to_string(), PathBuf::from("/site/a/dsm.tif")),
                ("ortho".to_string(), PathBuf::from("/site/a/ortho.tif"))
            ]
        );
        assert_eq!(june.inputs().len(), 3);
    }

    #[test]
    fn problems_name_the_manifest_and_a_fix() {
        let cases = [
            ("[batch]\nout = \"x\"\n", "no flight"),
            (
                "[[flight]]\nid = \"a b\"\ndate = \"2025-01-01\"\ndsm = \"d.tif\"\n",
                "not letters",
            ),
            (
                "[[flight]]\nid = \"a\"\ndate = \"2025-02-30\"\ndsm = \"d.tif\"\n",
                "day 30",
            ),
            (
                "[[flight]]\nid = \"a\"\ndate = \"2025-01-01\"\ndsm = \"d.tif\"\n[[flight]]\nid = \"a\"\ndate = \"2025-01-02\"\ndsm = \"d.tif\"\n",
                "appears twice",
            ),
            (
                "[batch]\nreference = \"z\"\n[[flight]]\nid = \"a\"\ndate = \"2025-01-01\"\ndsm = \"d.tif\"\n",
                "reference flight",
            ),
            (
                "[[flight]]\nid = \"a\"\ndate = \"2025-01-01\"\ndsm = \"d.tif\"\northo = \"o.tif\"\n",
                "--bands",
            ),
            (
                "[batch.recipe.features]\nlsit = [\"slope\"]\n[[flight]]\nid = \"a\"\ndate = \"2025-01-01\"\ndsm = \"d.tif\"\n",
                "lsit",
            ),
            (
                "[grid]\nresolution = -1.0\n[[flight]]\nid = \"a\"\ndate = \"2025-01-01\"\ndsm = \"d.tif\"\n",
                "resolution",
            ),
            ("[[flight]]\nid = \"a\"\n", "missing field"),
        ];
        for (text, want) in cases {
            let e = manifest(text).unwrap_err().to_string();
            assert!(e.contains("/site/flights.toml"), "{e}");
            assert!(e.contains(want), "wanted {want:?} in {e}");
            assert!(e.contains("fix:"), "{e}");
        }
    }

    #[test]
    fn dates_follow_the_gregorian_calendar() {
        // Leap-year rule of the Gregorian calendar (common practice).
        assert!(check_date("2024-02-29").is_ok());
        assert!(check_date("2000-02-29").is_ok());
        assert!(check_date("1900-02-29").is_err());
        assert!(check_date("2025-13-01").is_err());
        assert!(check_date("2025-5-14").is_err());
        assert!(check_date("2025-04-31").is_err());
    }

    fn grid(x0: f64, y1: f64, w: usize, h: usize, res: f64) -> Grid {
        Grid::new(w, h, [x0, res, 0.0, y1, 0.0, -res], Crs::from_epsg(32633)).unwrap()
    }

    #[test]
    fn common_grid_is_snapped_intersection() {
        let a = grid(100.0, 200.0, 100, 80, 0.5); // x 100..150, y 160..200
        let b = grid(101.2, 198.7, 100, 80, 0.5); // x 101.2..151.2, y 158.7..198.7
        let g = common_grid(
            &GridSpec::default(),
            &a,
            &[("a".into(), a.clone()), ("b".into(), b)],
        )
        .unwrap();
        // Inward snap to a's lattice: x 101.5..150, y 160..198.5 (hand-computed).
        assert_eq!(g.transform, [101.5, 0.5, 0.0, 198.5, 0.0, -0.5]);
        assert_eq!((g.width, g.height), (97, 77));
    }

    #[test]
    fn explicit_grid_and_errors() {
        let a = grid(100.0, 200.0, 100, 80, 0.5);
        let spec = GridSpec {
            epsg: Some(32633),
            resolution: Some(1.0),
            bounds: Some([100.0, 170.0, 140.0, 200.0]),
        };
        let g = common_grid(&spec, &a, &[("a".into(), a.clone())]).unwrap();
        assert_eq!((g.width, g.height), (40, 30));
        assert_eq!(g.transform, [100.0, 1.0, 0.0, 200.0, 0.0, -1.0]);
        let spec = GridSpec {
            bounds: Some([100.0, 170.0, 140.3, 200.0]),
            resolution: Some(1.0),
            epsg: None,
        };
        assert!(common_grid(&spec, &a, &[])
            .unwrap_err()
            .to_string()
            .contains("whole number"));
        let far = grid(1000.0, 2000.0, 10, 10, 0.5);
        let e = common_grid(
            &GridSpec::default(),
            &a,
            &[("a".into(), a.clone()), ("far.tif".into(), far)],
        )
        .unwrap_err()
        .to_string();
        assert!(e.contains("do not overlap") && e.contains("far.tif"), "{e}");
        let spec = GridSpec {
            epsg: Some(32634),
            ..Default::default()
        };
        let e = common_grid(&spec, &a, &[("a.tif".into(), a.clone())])
            .unwrap_err()
            .to_string();
        assert!(e.contains("a.tif") && e.contains("EPSG:32634"), "{e}");
    }
}

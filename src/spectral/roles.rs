//! Band roles, band maps, reflectance scaling and masks.
//!
//! An orthomosaic's bands are known to terrastack by their *role* (blue, green, red,
//! red-edge, near-infrared, or a band of the user's own declared as `extra:NAME`), never by
//! their number. This module parses the user's band maps (`blue=1,green=2,…,alpha=6` for
//! one multi-band file, `ROLE=FILE[:BAND]` for one file per band), the reflectance scale
//! and offset options, and turns stored values of one block into reflectance with every
//! masked cell set to NaN. A role word terrastack does not know is refused with the list of
//! known roles: only the explicit `extra:` prefix makes a band of one's own, so a typo
//! (`b=1`, `nri=5`) cannot silently map a band that no index reads.
//!
//! Reflectance is `stored · scale + offset` (for example stored 0–10000 with scale 1e-4,
//! or 0–65535 with scale 1/65535). A cell is masked (NaN in every band) where the file's
//! nodata value was read (the reader already gives NaN), where the alpha band is 0 or
//! nodata, and, when asked, where every band is exactly 0 (the fill many mosaicking tools
//! write around the flown area).

use std::collections::BTreeMap;
use std::fmt;
use std::path::{Path, PathBuf};

use ndarray::{Array2, ArrayView2, Zip};

use crate::error::{Error, Result};

/// What a band measures.
#[derive(Clone, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Role {
    Blue,
    Green,
    Red,
    RedEdge,
    /// Near-infrared.
    Nir,
    /// A band of the user's own, declared as `extra:NAME` in a band map (NAME: lower-case
    /// letters, digits and `_`, starting with a letter) and used by NAME in band math.
    Extra(String),
}

/// The five standard roles, in wavelength order.
pub const STANDARD_ROLES: [Role; 5] =
    [Role::Blue, Role::Green, Role::Red, Role::RedEdge, Role::Nir];

/// Words that cannot name a band: the alpha band, and the band-math keywords and functions.
pub const RESERVED_NAMES: &[&str] = &[
    "alpha", "if", "then", "else", "and", "or", "not", "min", "max", "abs", "sqrt", "ln", "exp",
    "clamp",
];

/// Prefix that declares a band of the user's own in a band map: `extra:swir1=6`.
pub const EXTRA_PREFIX: &str = "extra:";

/// The role words terrastack knows, for error messages.
pub const KNOWN_ROLES_TEXT: &str =
    "blue, green, red, rededge (or red_edge), nir, alpha, or extra:NAME for a band of your own";

impl Role {
    /// Parse a role as *declared* in a band map (`--bands`, `--band`, recipe `files`,
    /// per-role scales): `blue`, `green`, `red`, `rededge` (also `red_edge`), `nir`, or
    /// `extra:NAME` for a band of the user's own (NAME: lower-case letters, digits and `_`,
    /// starting with a letter). Case-insensitive. Any other word is refused with the list
    /// of known roles, so a typo (`b=1`, `nri=5`) can never pass as a band nobody uses.
    pub fn parse(text: &str) -> Result<Role> {
        let t = text.trim().to_ascii_lowercase();
        if let Some(name) = t.strip_prefix(EXTRA_PREFIX) {
            let name = name.trim();
            return match Role::standard(name) {
                Some(r) => Err(Error::usage(format!(
                    "`{text}`: `{name}` is a standard role, not a band of your own"
                ))
                .with_fix(format!("write `{}` without `{EXTRA_PREFIX}`", r.name()))),
                None => Role::named(name),
            };
        }
        if let Some(r) = Role::standard(&t) {
            return Ok(r);
        }
        let hint = match Role::suggestion(&t) {
            Some(near) => format!("did you mean `{near}`? Known roles: {KNOWN_ROLES_TEXT}"),
            None => format!("known roles: {KNOWN_ROLES_TEXT}"),
        };
        Err(Error::usage(format!("unknown band role `{}`", text.trim())).with_fix(hint))
    }

    /// A standard role word (`blue`, …, `nir`, `red_edge`), if `t` is one.
    fn standard(t: &str) -> Option<Role> {
        Some(match t {
            "blue" => Role::Blue,
            "green" => Role::Green,
            "red" => Role::Red,
            "rededge" | "red_edge" => Role::RedEdge,
            "nir" => Role::Nir,
            _ => return None,
        })
    }

    /// The known role closest to an unknown word: an initial (`b`, `g`, `r`, `n`), a
    /// common long form (`near_infrared`, `re`), or a word one edit away.
    fn suggestion(t: &str) -> Option<&'static str> {
        let by_form = match t {
            "b" => Some("blue"),
            "g" => Some("green"),
            "r" => Some("red"),
            "n" | "ir" | "nearinfrared" | "near_infrared" | "infrared" => Some("nir"),
            "re" | "redegde" | "edge" => Some("rededge"),
            "a" | "mask" => Some("alpha"),
            _ => None,
        };
        by_form.or_else(|| {
            ["blue", "green", "red", "rededge", "nir", "alpha"]
                .into_iter()
                .find(|r| t.len() >= 3 && edit_distance(r, t) <= 2)
        })
    }

    /// A role as *referred to* in a band-math expression: a standard role word, or the
    /// name of a band declared with `extra:NAME`. A name one or two letters away from a
    /// standard role is refused with a suggestion; a name that no band declares is caught
    /// when the plan checks the expression's bands.
    pub fn named(text: &str) -> Result<Role> {
        let t = text.trim().to_ascii_lowercase();
        if let Some(r) = Role::standard(&t) {
            return Ok(r);
        }
        let valid_ident = t.chars().next().is_some_and(|c| c.is_ascii_lowercase())
            && t.chars()
                .all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || c == '_');
        if !valid_ident {
            return Err(Error::usage(format!(
                "`{text}` is not a band name: names use letters, digits and `_` and start with a letter"
            ))
            .with_fix("use blue, green, red, rededge, nir, or declare a band of your own as `extra:swir1=N`"));
        }
        if RESERVED_NAMES.contains(&t.as_str()) {
            return Err(
                Error::usage(format!("`{t}` is a reserved word and cannot name a band"))
                    .with_fix("choose another name for the band"),
            );
        }
        let extends_standard = STANDARD_ROLES.iter().any(|r| t.starts_with(r.name()));
        if let Some(near) = STANDARD_ROLES
            .iter()
            .find(|r| t.len() >= 3 && !extends_standard && edit_distance(r.name(), &t) <= 1)
        {
            return Err(
                Error::usage(format!("unknown band role `{t}`")).with_fix(format!(
                    "did you mean `{}`? (a band of your own needs a name that is not one letter \
                 away from a standard role, e.g. `{}2`)",
                    near.name(),
                    near.name()
                )),
            );
        }
        Ok(Role::Extra(t))
    }

    /// The role as declared in a band map: the standard word, or `extra:NAME`.
    pub fn declared(&self) -> String {
        match self {
            Role::Extra(name) => format!("{EXTRA_PREFIX}{name}"),
            other => other.name().to_string(),
        }
    }

    /// The role's name as written on the command line and in band-math expressions.
    pub fn name(&self) -> &str {
        match self {
            Role::Blue => "blue",
            Role::Green => "green",
            Role::Red => "red",
            Role::RedEdge => "rededge",
            Role::Nir => "nir",
            Role::Extra(name) => name,
        }
    }
}

impl fmt::Display for Role {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// Edit distance counting insertions, deletions, substitutions and swaps of adjacent
/// letters (optimal string alignment; Damerau 1964), for "did you mean" hints.
fn edit_distance(a: &str, b: &str) -> usize {
    let a: Vec<char> = a.chars().collect();
    let b: Vec<char> = b.chars().collect();
    let mut d = vec![vec![0usize; b.len() + 1]; a.len() + 1];
    for (i, row) in d.iter_mut().enumerate() {
        row[0] = i;
    }
    for (j, cell) in d[0].iter_mut().enumerate() {
        *cell = j;
    }
    for i in 1..=a.len() {
        for j in 1..=b.len() {
            let cost = usize::from(a[i - 1] != b[j - 1]);
            let mut v = (d[i - 1][j] + 1)
                .min(d[i][j - 1] + 1)
                .min(d[i - 1][j - 1] + cost);
            if i > 1 && j > 1 && a[i - 1] == b[j - 2] && a[i - 2] == b[j - 1] {
                v = v.min(d[i - 2][j - 2] + 1);
            }
            d[i][j] = v;
        }
    }
    d[a.len()][b.len()]
}

/// One band of reflectance: where it is stored and how to scale it.
#[derive(Clone, Debug, PartialEq)]
pub struct BandSource {
    pub role: Role,
    pub path: PathBuf,
    /// Band number in the file, 1-based.
    pub band: usize,
    /// reflectance = stored · scale + offset.
    pub scale: f64,
    pub offset: f64,
}

/// A parsed `--bands` map of one multi-band orthomosaic: roles, and optionally the band
/// holding the alpha (coverage) mask.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct BandMap {
    /// Role and 1-based band number, in the order given.
    pub roles: Vec<(Role, usize)>,
    /// 1-based band number of the alpha band (0 = outside the flown area).
    pub alpha: Option<usize>,
}

impl BandMap {
    /// Parse `blue=1,green=2,red=3,rededge=4,nir=5,alpha=6`. Roles and band numbers may each
    /// appear only once. Errors quote the offending token.
    pub fn parse(text: &str) -> Result<BandMap> {
        let mut roles: Vec<(Role, usize)> = Vec::new();
        let mut alpha = None;
        let mut used_bands: BTreeMap<usize, String> = BTreeMap::new();
        if text.trim().is_empty() {
            return Err(Error::usage("the band map is empty").with_fix(
                "write it as ROLE=BAND pairs, e.g. `blue=1,green=2,red=3,rededge=4,nir=5`",
            ));
        }
        for token in text.split(',') {
            let token = token.trim();
            let fix = "write each entry as ROLE=BAND with a band number from 1, e.g. `nir=5`";
            let (name, number) = token.split_once('=').ok_or_else(|| {
                Error::usage(format!("band map entry `{token}` has no `=`")).with_fix(fix)
            })?;
            let band: usize = number
                .trim()
                .parse()
                .ok()
                .filter(|b| *b >= 1)
                .ok_or_else(|| {
                    Error::usage(format!(
                        "band map entry `{token}`: `{}` is not a band number (1, 2, …)",
                        number.trim()
                    ))
                    .with_fix(fix)
                })?;
            let name = name.trim().to_ascii_lowercase();
            if let Some(previous) = used_bands.insert(band, name.clone()) {
                return Err(Error::usage(format!(
                    "band map entry `{token}`: band {band} is already mapped to `{previous}`"
                ))
                .with_fix("map each band to one role"));
            }
            if name == "alpha" {
                if alpha.replace(band).is_some() {
                    return Err(Error::usage(format!(
                        "band map entry `{token}`: alpha is given twice"
                    ))
                    .with_fix("give the alpha band once"));
                }
                continue;
            }
            let role = Role::parse(&name).map_err(|e| prefix_usage(e, token))?;
            if roles.iter().any(|(r, _)| *r == role) {
                return Err(Error::usage(format!(
                    "band map entry `{token}`: role `{role}` is given twice"
                ))
                .with_fix("give each role once"));
            }
            roles.push((role, band));
        }
        Ok(BandMap { roles, alpha })
    }
}

fn prefix_usage(e: Error, token: &str) -> Error {
    match e {
        Error::Usage { problem, fix } => Error::Usage {
            problem: format!("band map entry `{token}`: {problem}"),
            fix,
        },
        other => other,
    }
}

/// Parse a `--bands` map into roles and band numbers (`blue=1,green=2,…`). An `alpha=N`
/// entry is accepted but not returned: use [`BandMap::parse`] to get it.
pub fn parse_band_map(text: &str) -> Result<Vec<(Role, usize)>> {
    Ok(BandMap::parse(text)?.roles)
}

/// Parse one `--band ROLE=FILE[:BAND]` (band 1 when omitted). `ROLE` may be `alpha`, which
/// returns `None` as the role. A trailing `:N` is taken as the band only when N is a whole
/// number, so paths with colons (drive letters) still work.
pub fn parse_band_file(text: &str) -> Result<(Option<Role>, PathBuf, usize)> {
    let fix =
        "write it as ROLE=FILE or ROLE=FILE:BAND, e.g. `nir=flight3_nir.tif` or `nir=ortho.tif:5`";
    let (name, rest) = text
        .split_once('=')
        .ok_or_else(|| Error::usage(format!("`--band {text}` has no `=`")).with_fix(fix))?;
    let rest = rest.trim();
    let (path, band) = match rest.rsplit_once(':') {
        Some((p, b)) if !b.is_empty() && b.chars().all(|c| c.is_ascii_digit()) => {
            let band: usize = b.parse().map_err(|_| {
                Error::usage(format!("`--band {text}`: `{b}` is not a band number")).with_fix(fix)
            })?;
            if band == 0 {
                return Err(
                    Error::usage(format!("`--band {text}`: bands are numbered from 1"))
                        .with_fix(fix),
                );
            }
            (p, band)
        }
        _ => (rest, 1),
    };
    if path.is_empty() {
        return Err(Error::usage(format!("`--band {text}` names no file")).with_fix(fix));
    }
    let name = name.trim().to_ascii_lowercase();
    let role = if name == "alpha" {
        None
    } else {
        Some(Role::parse(&name).map_err(|e| match e {
            Error::Usage { problem, fix } => Error::Usage {
                problem: format!("`--band {text}`: {problem}"),
                fix,
            },
            other => other,
        })?)
    };
    Ok((role, PathBuf::from(path), band))
}

/// A reflectance scale or offset option: one value for every band (`1e-4`), per-role values
/// (`nir=1e-4,red=1e-4`), or both (`1e-4,nir=2e-5`: the per-role value wins). A value may
/// be written as a fraction (`1/65535`).
#[derive(Clone, Debug, PartialEq, Default)]
pub struct PerBand {
    pub all: Option<f64>,
    pub by_role: Vec<(Role, f64)>,
}

impl PerBand {
    /// Parse the option text (see the type's documentation). `what` names the option in
    /// errors (`--scale`).
    pub fn parse(what: &str, text: &str) -> Result<PerBand> {
        let mut out = PerBand::default();
        let fix = format!(
            "write `{what}` as a number (`1e-4`, `1/65535`) or ROLE=NUMBER pairs (`nir=1e-4,red=1e-4`)"
        );
        for token in text.split(',') {
            let token = token.trim();
            match token.split_once('=') {
                None => {
                    let v = parse_number(token).ok_or_else(|| {
                        Error::usage(format!("{what}: `{token}` is not a number")).with_fix(&fix)
                    })?;
                    if out.all.replace(v).is_some() {
                        return Err(Error::usage(format!(
                            "{what}: more than one value for all bands (`{token}`)"
                        ))
                        .with_fix(&fix));
                    }
                }
                Some((name, value)) => {
                    let role = Role::parse(name).map_err(|e| prefix_usage(e, token))?;
                    let v = parse_number(value.trim()).ok_or_else(|| {
                        Error::usage(format!(
                            "{what}: `{token}`: `{}` is not a number",
                            value.trim()
                        ))
                        .with_fix(&fix)
                    })?;
                    if out.by_role.iter().any(|(r, _)| *r == role) {
                        return Err(
                            Error::usage(format!("{what}: role `{role}` is given twice"))
                                .with_fix(&fix),
                        );
                    }
                    out.by_role.push((role, v));
                }
            }
        }
        Ok(out)
    }

    /// The value for `role`: its own, else the one for all bands, else `default`.
    pub fn value_for(&self, role: &Role, default: f64) -> f64 {
        self.by_role
            .iter()
            .find(|(r, _)| r == role)
            .map(|(_, v)| *v)
            .or(self.all)
            .unwrap_or(default)
    }

    /// Roles named here that are not among `roles` (a per-role value for a band that was
    /// never mapped is almost certainly a typo).
    pub fn unknown_roles<'a>(&'a self, roles: &[Role]) -> Vec<&'a Role> {
        self.by_role
            .iter()
            .map(|(r, _)| r)
            .filter(|r| !roles.contains(r))
            .collect()
    }
}

fn parse_number(text: &str) -> Option<f64> {
    let v = match text.split_once('/') {
        Some((a, b)) => {
            let a: f64 = a.trim().parse().ok()?;
            let b: f64 = b.trim().parse().ok()?;
            if b == 0.0 {
                return None;
            }
            a / b
        }
        None => text.parse().ok()?,
    };
    v.is_finite().then_some(v)
}

/// Apply scale and offset options to band sources (default scale 1, offset 0). Refuses a
/// per-role value for a role that has no band, and a zero scale.
pub fn apply_scaling(sources: &mut [BandSource], scale: &PerBand, offset: &PerBand) -> Result<()> {
    let roles: Vec<Role> = sources.iter().map(|s| s.role.clone()).collect();
    for (what, opt) in [("scale", scale), ("offset", offset)] {
        if let Some(r) = opt.unknown_roles(&roles).first() {
            return Err(Error::usage(format!(
                "a reflectance {what} is given for role `{r}`, which has no band"
            ))
            .with_fix("map the band first, or remove its value"));
        }
    }
    for s in sources.iter_mut() {
        s.scale = scale.value_for(&s.role, 1.0);
        s.offset = offset.value_for(&s.role, 0.0);
        if s.scale == 0.0 {
            return Err(Error::usage(format!(
                "the reflectance scale of `{}` is 0, which would erase the band",
                s.role
            ))
            .with_fix("give the factor that turns stored values into reflectance, e.g. 1e-4"));
        }
    }
    Ok(())
}

/// Reflectance arrays of one block, by role. Every array has the same shape; NaN is nodata.
#[derive(Clone, Debug, Default)]
pub struct BandArrays {
    bands: BTreeMap<Role, Array2<f32>>,
    shape: Option<(usize, usize)>,
}

impl BandArrays {
    pub fn new() -> BandArrays {
        BandArrays::default()
    }

    /// Add (or replace) the array of `role`. Refuses an array whose shape differs from the
    /// others'.
    pub fn insert(&mut self, role: Role, data: Array2<f32>) -> Result<()> {
        let shape = data.dim();
        match self.shape {
            Some(s) if s != shape && !(self.bands.len() == 1 && self.bands.contains_key(&role)) => {
                return Err(Error::usage(format!(
                    "band `{role}` has {} x {} cells but the other bands of the block have {} x {}",
                    shape.1, shape.0, s.1, s.0
                )));
            }
            _ => self.shape = Some(shape),
        }
        self.bands.insert(role, data);
        Ok(())
    }

    /// The array of `role`, if present.
    pub fn get(&self, role: &Role) -> Option<&Array2<f32>> {
        self.bands.get(role)
    }

    /// The array of `role`, or an error naming the missing role and how to map it. `needed_by`
    /// names what asked for it ("index ndre").
    pub fn require(&self, role: &Role, needed_by: &str) -> Result<&Array2<f32>> {
        self.bands.get(role).ok_or_else(|| {
            Error::usage(format!(
                "{needed_by} needs the `{role}` band, which is not mapped (mapped: {})",
                self.roles_list()
            ))
            .with_fix(format!(
                "map it with `--bands {0}=N` or `--band {0}=FILE`, or drop {needed_by}",
                role.declared()
            ))
        })
    }

    /// Roles present, in wavelength order then by name.
    pub fn roles(&self) -> Vec<Role> {
        self.bands.keys().cloned().collect()
    }

    /// (rows, cols) of the block, `None` when empty.
    pub fn shape(&self) -> Option<(usize, usize)> {
        self.shape
    }

    fn roles_list(&self) -> String {
        if self.bands.is_empty() {
            "none".into()
        } else {
            self.bands
                .keys()
                .map(|r| r.name())
                .collect::<Vec<_>>()
                .join(", ")
        }
    }
}

/// How cells are masked beyond the files' own nodata.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub struct MaskOptions {
    /// Treat cells where every band is exactly 0 (stored value) as outside the flown area.
    pub zero_fill: bool,
}

/// Turn stored values of one block into reflectance: `stored · scale + offset` for each
/// band, computed in f64 and rounded once to f32. Cells are set to NaN in every band where
/// `alpha` is 0 or NaN, and (with `zero_fill`) where every stored band is exactly 0. A
/// NaN in one band (its nodata) stays in that band only.
pub fn to_reflectance(
    stored: Vec<(&BandSource, Array2<f32>)>,
    alpha: Option<ArrayView2<f32>>,
    options: MaskOptions,
) -> Result<BandArrays> {
    let shape = stored.first().map(|(_, a)| a.dim());
    let mut mask: Option<Array2<bool>> = None;
    if let Some(shape) = shape {
        let mut m = Array2::from_elem(shape, false);
        if let Some(alpha) = alpha {
            if alpha.dim() != shape {
                return Err(Error::usage(
                    "the alpha band's block differs in shape from the bands'",
                ));
            }
            Zip::from(&mut m)
                .and(alpha)
                .for_each(|m, &a| *m |= a.is_nan() || a == 0.0);
        }
        if options.zero_fill {
            let mut all_zero = Array2::from_elem(shape, true);
            for (_, a) in &stored {
                Zip::from(&mut all_zero)
                    .and(a)
                    .for_each(|z, &v| *z &= v == 0.0);
            }
            Zip::from(&mut m).and(&all_zero).for_each(|m, &z| *m |= z);
        }
        mask = Some(m);
    }
    let mut out = BandArrays::new();
    for (source, mut data) in stored {
        let (scale, offset) = (source.scale, source.offset);
        if let Some(m) = &mask {
            if m.dim() != data.dim() {
                return Err(Error::file(
                    &source.path,
                    format!(
                        "band {} gave a block of a different shape from the other bands",
                        source.band
                    ),
                ));
            }
            Zip::from(&mut data).and(m).for_each(|v, &masked| {
                *v = if masked {
                    f32::NAN
                } else {
                    (*v as f64 * scale + offset) as f32
                };
            });
        }
        out.insert(source.role.clone(), data)?;
    }
    Ok(out)
}

/// Check that a band source's band exists in its file's band count (used before a build
/// starts, so a bad map fails at once).
pub fn check_band_exists(path: &Path, band: usize, band_count: usize, role: &Role) -> Result<()> {
    if band == 0 || band > band_count {
        return Err(Error::file(
            path,
            format!(
                "role `{role}` is mapped to band {band}, but the file has {band_count} band(s)"
            ),
        )
        .with_fix("fix the band map (`terrastack info FILE` lists the bands)"));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn roles_parse_and_name() {
        assert_eq!(Role::parse("NIR").unwrap(), Role::Nir);
        assert_eq!(Role::parse("red_edge").unwrap(), Role::RedEdge);
        assert_eq!(Role::parse("rededge").unwrap().name(), "rededge");
        assert_eq!(
            Role::parse("extra:swir1").unwrap(),
            Role::Extra("swir1".into())
        );
        let e = Role::parse("nri").unwrap_err().to_string();
        assert!(e.contains("did you mean `nir`"), "{e}");
        assert!(Role::parse("extra:2nir").is_err());
        // In band math, declared bands of one's own are referred to by name.
        assert_eq!(Role::named("swir").unwrap(), Role::Extra("swir".into()));
        assert_eq!(Role::named("nir2").unwrap(), Role::Extra("nir2".into()));
        assert!(Role::named("nri").is_err());
        assert!(Role::parse("gren")
            .unwrap_err()
            .to_string()
            .contains("`green`"));
        assert_eq!(Role::Extra("swir1".into()).declared(), "extra:swir1");
        // Worked by hand: one swap, one substitution, two edits.
        assert_eq!(edit_distance("nir", "nri"), 1);
        assert_eq!(edit_distance("red", "ref"), 1);
        assert_eq!(edit_distance("nir", "swir"), 2);
        assert!(Role::parse("extra:sqrt")
            .unwrap_err()
            .to_string()
            .contains("reserved"));
    }

    #[test]
    fn unknown_role_words_are_refused_with_the_known_roles() {
        // `b=1,g=2,r=3` once passed as three bands of the user's own, giving no index.
        for (word, near) in [("b", "blue"), ("g", "green"), ("r", "red"), ("swir1", "")] {
            let e = Role::parse(word).unwrap_err().to_string();
            assert!(
                e.contains(&format!("unknown band role `{word}`")) && e.contains("extra:NAME"),
                "{e}"
            );
            if !near.is_empty() {
                assert!(e.contains(&format!("did you mean `{near}`")), "{e}");
            }
        }
        let e = parse_band_map("b=1,g=2,r=3").unwrap_err().to_string();
        assert!(e.contains("`b=1`") && e.contains("blue"), "{e}");
        let e = Role::parse("extra:nir").unwrap_err().to_string();
        assert!(e.contains("standard role"), "{e}");
        let m = BandMap::parse("nir=5,extra:swir1=6").unwrap();
        assert_eq!(m.roles[1], (Role::Extra("swir1".into()), 6));
    }

    #[test]
    fn band_map_with_alpha() {
        let m = BandMap::parse("blue=1, green=2,red=3,rededge=4,nir=5,alpha=6").unwrap();
        assert_eq!(m.roles.len(), 5);
        assert_eq!(m.roles[4], (Role::Nir, 5));
        assert_eq!(m.alpha, Some(6));
        assert_eq!(
            parse_band_map("nir=2,red=1").unwrap(),
            vec![(Role::Nir, 2), (Role::Red, 1)]
        );
    }

    #[test]
    fn band_map_errors_quote_token() {
        let e = parse_band_map("blue=1,green").unwrap_err().to_string();
        assert!(e.contains("`green`") && e.contains("no `=`"), "{e}");
        let e = parse_band_map("blue=1,nir=0").unwrap_err().to_string();
        assert!(e.contains("`nir=0`"), "{e}");
        let e = parse_band_map("blue=1,nir=1").unwrap_err().to_string();
        assert!(e.contains("already mapped to `blue`"), "{e}");
        let e = parse_band_map("nri=4").unwrap_err().to_string();
        assert!(
            e.contains("`nri=4`") && e.contains("did you mean `nir`"),
            "{e}"
        );
        let e = parse_band_map("nir=4,nir=5").unwrap_err().to_string();
        assert!(e.contains("twice"), "{e}");
        assert!(parse_band_map("").is_err());
    }

    #[test]
    fn band_file_specs() {
        let (r, p, b) = parse_band_file("nir=flight3/nir.tif").unwrap();
        assert_eq!(
            (r, p, b),
            (Some(Role::Nir), PathBuf::from("flight3/nir.tif"), 1)
        );
        let (r, p, b) = parse_band_file("red=C:\\data\\ortho.tif:3").unwrap();
        assert_eq!(
            (r, p, b),
            (Some(Role::Red), PathBuf::from("C:\\data\\ortho.tif"), 3)
        );
        let (r, _, b) = parse_band_file("alpha=mask.tif:2").unwrap();
        assert_eq!((r, b), (None, 2));
        assert!(parse_band_file("nir").is_err());
        assert!(parse_band_file("nir=a.tif:0")
            .unwrap_err()
            .to_string()
            .contains("from 1"));
        assert!(parse_band_file("nir=").is_err());
    }

    #[test]
    fn scale_options() {
        let s = PerBand::parse("--scale", "1/65535, nir=1e-4").unwrap();
        assert_eq!(s.value_for(&Role::Red, 1.0), 1.0 / 65535.0);
        assert_eq!(s.value_for(&Role::Nir, 1.0), 1e-4);
        assert_eq!(PerBand::default().value_for(&Role::Nir, 1.0), 1.0);
        assert!(PerBand::parse("--scale", "abc")
            .unwrap_err()
            .to_string()
            .contains("`abc`"));
        assert!(PerBand::parse("--scale", "1/0").is_err());
        let mut src = vec![BandSource {
            role: Role::Nir,
            path: "o.tif".into(),
            band: 5,
            scale: 1.0,
            offset: 0.0,
        }];
        apply_scaling(&mut src, &s, &PerBand::parse("--offset", "-0.01").unwrap()).unwrap();
        assert_eq!((src[0].scale, src[0].offset), (1e-4, -0.01));
        let bad = PerBand::parse("--scale", "red=1e-4").unwrap();
        let e = apply_scaling(&mut src, &bad, &PerBand::default())
            .unwrap_err()
            .to_string();
        assert!(e.contains("`red`"), "{e}");
    }

    #[test]
    fn reflectance_scaling_and_masks() {
        let nir = BandSource {
            role: Role::Nir,
            path: "o.tif".into(),
            band: 2,
            scale: 1e-4,
            offset: 0.0,
        };
        let red = BandSource {
            role: Role::Red,
            path: "o.tif".into(),
            band: 1,
            scale: 1e-4,
            offset: 0.01,
        };
        let alpha = array![[255.0f32, 0.0, 255.0, f32::NAN]];
        let out = to_reflectance(
            vec![
                (&nir, array![[4000.0f32, 4000.0, 0.0, 1.0]]),
                (&red, array![[500.0f32, 500.0, 0.0, f32::NAN]]),
            ],
            Some(alpha.view()),
            MaskOptions { zero_fill: true },
        )
        .unwrap();
        let n = out.get(&Role::Nir).unwrap();
        let r = out.get(&Role::Red).unwrap();
        // 4000 · 1e-4 = 0.4 and 500 · 1e-4 + 0.01 = 0.06 (arithmetic).
        assert!((n[[0, 0]] - 0.4).abs() < 1e-7);
        assert!((r[[0, 0]] - 0.06).abs() < 1e-7);
        assert!(n[[0, 1]].is_nan() && r[[0, 1]].is_nan()); // alpha 0
        assert!(n[[0, 2]].is_nan() && r[[0, 2]].is_nan()); // all bands zero
        assert!(n[[0, 3]].is_nan()); // alpha nodata
        let missing = out
            .require(&Role::RedEdge, "index ndre")
            .unwrap_err()
            .to_string();
        assert!(
            missing.contains("`rededge`") && missing.contains("ndre"),
            "{missing}"
        );
    }

    #[test]
    fn zero_fill_off_keeps_zero_reflectance() {
        let nir = BandSource {
            role: Role::Nir,
            path: "o.tif".into(),
            band: 1,
            scale: 1.0,
            offset: 0.0,
        };
        let out =
            to_reflectance(vec![(&nir, array![[0.0f32]])], None, MaskOptions::default()).unwrap();
        assert_eq!(out.get(&Role::Nir).unwrap()[[0, 0]], 0.0);
    }

    #[test]
    fn band_arrays_refuse_mismatched_shapes() {
        let mut b = BandArrays::new();
        b.insert(Role::Nir, Array2::zeros((2, 3))).unwrap();
        assert!(b.insert(Role::Red, Array2::zeros((3, 2))).is_err());
        assert_eq!(b.shape(), Some((2, 3)));
    }

    #[test]
    fn band_existence_check_names_file() {
        let e = check_band_exists(Path::new("ortho.tif"), 6, 5, &Role::Nir)
            .unwrap_err()
            .to_string();
        assert!(e.starts_with("ortho.tif") && e.contains("band 6"), "{e}");
    }
}

//! Feature words: `--features` and recipe words (`slope`, `curvature:zt`, `tpi@5`) turned
//! into [`TerrainFeature`]s, by the grammar of each quantity's [`Family`] in the feature
//! table.

use std::sync::LazyLock;

use super::feature::TerrainFeature;
use super::params::SlopeMethod;
use super::radius::check_radius_value;
use super::table::{Family, Kernel, Quantity, GROUPS, QUANTITIES};
use crate::error::{Error, Result};

/// The feature words [`expand`] understands, with a one-line description each, in table
/// order (a group word such as `curvature` just before its first member).
pub static FEATURE_WORDS: LazyLock<Vec<(&'static str, &'static str)>> = LazyLock::new(|| {
    let mut words = Vec::new();
    for row in QUANTITIES {
        for g in GROUPS.iter().filter(|g| g.members[0] == row.quantity) {
            words.push((g.word, g.summary));
        }
        words.push((row.word, row.summary));
    }
    words
});

fn valid_words() -> String {
    FEATURE_WORDS
        .iter()
        .map(|(w, _)| *w)
        .collect::<Vec<_>>()
        .join(", ")
}

fn parse_method(word: &str, suffix: Option<&str>, curvature: bool) -> Result<SlopeMethod> {
    let m = match suffix {
        None => {
            if curvature {
                SlopeMethod::EvansYoung
            } else {
                SlopeMethod::Horn
            }
        }
        Some("horn") if !curvature => SlopeMethod::Horn,
        Some("zt") => SlopeMethod::ZevenbergenThorne,
        Some("ey") => SlopeMethod::EvansYoung,
        Some("quadratic") => SlopeMethod::Quadratic,
        Some(other) => {
            let valid = if curvature {
                "zt, ey, quadratic (Horn 1981 gives no second derivatives)"
            } else {
                "horn, zt, ey, quadratic"
            };
            return Err(
                Error::usage(format!("unknown method `{other}` in feature word `{word}`"))
                    .with_fix(format!("use one of: {valid}")),
            );
        }
    };
    Ok(m)
}

fn parse_radius(word: &str, text: &str) -> Result<f64> {
    let origin = format!("`{word}`");
    match text.parse::<f64>() {
        Ok(r) => check_radius_value(r, &origin).map(|_| r),
        Err(_) => Err(Error::usage(format!(
            "feature word `{word}` has radius `{text}`, which is not a number of metres"
        ))
        .with_fix("write the radius in metres after `@`, e.g. `tpi@5`")),
    }
}

/// The quantities a word's base (without `:method` and `@radius`) names: a group's
/// members or one quantity.
fn quantities_of(base: &str) -> Option<Vec<Quantity>> {
    if let Some(g) = GROUPS.iter().find(|g| g.word == base) {
        return Some(g.members.to_vec());
    }
    Quantity::from_word(base).map(|q| vec![q])
}

/// Features from CLI words and scales: windowed words (tpi, dev, roughness,
/// roughness_detrended, vrm, relative_elevation, local_relief, and any `:quadratic`
/// derivative) expand over `scales_m` (radii in metres) unless they carry `@METRES`.
/// Duplicates are dropped, order is kept. An unknown word is an error listing the valid ones.
///
/// ```
/// use terrastack::terrain::expand;
///
/// let words = ["slope:zt".to_string(), "tpi".to_string(), "vrm@2".to_string()];
/// let names: Vec<String> = expand(&words, &[1.0, 5.0])
///     .unwrap()
///     .iter()
///     .map(|f| f.band_name())
///     .collect();
/// assert_eq!(names, ["slope_zevenbergen_thorne", "tpi_r1m", "tpi_r5m", "vrm_r2m"]);
/// assert!(expand(&["slop".to_string()], &[]).is_err());
/// ```
pub fn expand(words: &[String], scales_m: &[f64]) -> Result<Vec<TerrainFeature>> {
    for &s in scales_m {
        check_radius_value(s, "--scales")?;
    }
    let mut out: Vec<TerrainFeature> = Vec::new();
    for raw in words {
        let word = raw.trim().to_ascii_lowercase();
        let (body, explicit) = match word.split_once('@') {
            Some((b, r)) => (b.to_string(), Some(parse_radius(&word, r)?)),
            None => (word.clone(), None),
        };
        let (base, suffix) = match body.split_once(':') {
            Some((b, m)) => (b.to_string(), Some(m.to_string())),
            None => (body.clone(), None),
        };
        let radii: Vec<f64> = match explicit {
            Some(r) => vec![r],
            None => scales_m.to_vec(),
        };
        let need_radii = |out_len: usize| -> Result<()> {
            if out_len == 0 {
                Err(Error::usage(format!(
                    "feature word `{word}` needs a window radius, and no scales were given"
                ))
                .with_fix("add `--scales METRES,...` or write the radius as `WORD@METRES`"))
            } else {
                Ok(())
            }
        };
        let members = quantities_of(&base).unwrap_or_default();
        let family = members.first().map(|q| q.row().family);
        if suffix.is_some() && family != Some(Family::Derivative) {
            return Err(
                Error::usage(format!("feature word `{word}` takes no `:method` suffix"))
                    .with_fix(format!("valid words: {}", valid_words())),
            );
        }
        let mut produced: Vec<TerrainFeature> = Vec::new();
        match family {
            Some(Family::Derivative) => {
                let second_order = members
                    .iter()
                    .any(|q| matches!(q.row().kernel, Kernel::Derivative(f) if f.second_order()));
                let method = parse_method(&word, suffix.as_deref(), second_order)?;
                if method == SlopeMethod::Quadratic {
                    need_radii(radii.len())?;
                    for &r in &radii {
                        for &q in &members {
                            produced.push(TerrainFeature::derivative(q, method, Some(r)));
                        }
                    }
                } else {
                    if explicit.is_some() {
                        return Err(Error::usage(format!(
                            "feature word `{word}` is a 3x3 estimate and takes no radius"
                        ))
                        .with_fix(
                            "drop the `@METRES`, or use the `:quadratic` method for a multi-scale fit",
                        ));
                    }
                    for &q in &members {
                        produced.push(TerrainFeature::derivative(q, method, None));
                    }
                }
            }
            Some(Family::Window) => {
                need_radii(radii.len())?;
                for &q in &members {
                    produced.extend(radii.iter().map(|&r| TerrainFeature::windowed(q, r)));
                }
            }
            Some(Family::Elevation | Family::Index3x3) => {
                if explicit.is_some() {
                    return Err(
                        Error::usage(format!("feature word `{word}` takes no radius"))
                            .with_fix("drop the `@METRES`"),
                    );
                }
                produced.extend(members.iter().map(|&q| TerrainFeature::new(q)));
            }
            None => {
                return Err(
                    Error::usage(format!("unknown terrain feature word `{base}`"))
                        .with_fix(format!("valid words: {}", valid_words())),
                )
            }
        }
        for f in produced {
            if !out.contains(&f) {
                out.push(f);
            }
        }
    }
    Ok(out)
}

impl TerrainFeature {
    /// Features from a comma-separated list of words, each windowed word carrying its
    /// radius as `@METRES` (e.g. `"slope,tpi@5,slope:quadratic@2.5"`).
    pub fn parse(text: &str) -> Result<Vec<TerrainFeature>> {
        let words: Vec<String> = text
            .split(',')
            .map(|w| w.trim().to_string())
            .filter(|w| !w.is_empty())
            .collect();
        expand(&words, &[])
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn band_names_are_stable() {
        let f = TerrainFeature::derivative(Quantity::Slope, SlopeMethod::Horn, None);
        assert_eq!(f.band_name(), "slope_horn");
        assert_eq!(
            TerrainFeature::windowed(Quantity::Tpi, 5.0).band_name(),
            "tpi_r5m"
        );
        let q = TerrainFeature::derivative(Quantity::Slope, SlopeMethod::Quadratic, Some(2.5));
        assert_eq!(q.band_name(), "slope_quadratic_r2p5m");
        assert_eq!(q.scale_m(), Some(2.5));
        assert_eq!(
            TerrainFeature::windowed(Quantity::RoughnessDetrended, 0.5).band_name(),
            "roughness_detrended_r0p5m"
        );
        assert_eq!(TerrainFeature::new(Quantity::Tri).band_name(), "tri");
        for f in expand(
            &FEATURE_WORDS
                .iter()
                .map(|(w, _)| w.to_string())
                .collect::<Vec<_>>(),
            &[0.25, 3.0],
        )
        .unwrap()
        {
            let n = f.band_name();
            assert!(
                n.chars()
                    .all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || c == '_' || c == '.'),
                "{n}"
            );
        }
    }

    #[test]
    fn word_list_keeps_its_order() {
        let words: Vec<&str> = FEATURE_WORDS.iter().map(|(w, _)| *w).collect();
        assert_eq!(
            words,
            [
                "elevation",
                "slope",
                "aspect",
                "northness",
                "eastness",
                "curvature",
                "profile_curvature",
                "plan_curvature",
                "tangential_curvature",
                "mean_curvature",
                "gaussian_curvature",
                "tpi",
                "dev",
                "roughness",
                "roughness_detrended",
                "tri",
                "vrm",
                "relative_elevation",
                "local_relief",
                "relief_position",
            ]
        );
    }

    #[test]
    fn expand_words_over_scales() {
        let words: Vec<String> = ["slope", "curvature:zt", "tpi", "vrm@2", "slope:quadratic"]
            .iter()
            .map(|s| s.to_string())
            .collect();
        let f = expand(&words, &[1.0, 5.0]).unwrap();
        let names: Vec<String> = f.iter().map(|f| f.band_name()).collect();
        assert_eq!(
            names,
            vec![
                "slope_horn",
                "profile_curvature_zevenbergen_thorne",
                "plan_curvature_zevenbergen_thorne",
                "tangential_curvature_zevenbergen_thorne",
                "mean_curvature_zevenbergen_thorne",
                "gaussian_curvature_zevenbergen_thorne",
                "tpi_r1m",
                "tpi_r5m",
                "vrm_r2m",
                "slope_quadratic_r1m",
                "slope_quadratic_r5m",
            ]
        );
    }

    #[test]
    fn unknown_word_lists_valid_ones() {
        let e = expand(&["slop".to_string()], &[1.0])
            .unwrap_err()
            .to_string();
        assert!(e.contains("unknown terrain feature word `slop`"), "{e}");
        assert!(e.contains("roughness_detrended"), "{e}");
        let e = TerrainFeature::parse("tpi").unwrap_err().to_string();
        assert!(e.contains("needs a window radius"), "{e}");
        let e = TerrainFeature::parse("curvature:horn")
            .unwrap_err()
            .to_string();
        assert!(e.contains("Horn"), "{e}");
        assert!(TerrainFeature::parse("tpi@-1").is_err());
        assert!(expand(&["tpi".into()], &[f64::NAN]).is_err());
        assert_eq!(
            TerrainFeature::parse("elevation, tri,tpi@2.5").unwrap(),
            vec![
                TerrainFeature::new(Quantity::Elevation),
                TerrainFeature::new(Quantity::Tri),
                TerrainFeature::windowed(Quantity::Tpi, 2.5)
            ]
        );
        let e = TerrainFeature::parse("tpi:zt@2").unwrap_err().to_string();
        assert!(e.contains("takes no `:method` suffix"), "{e}");
        let e = TerrainFeature::parse("tri@2").unwrap_err().to_string();
        assert!(e.contains("takes no radius"), "{e}");
        let e = TerrainFeature::parse("slope@2").unwrap_err().to_string();
        assert!(e.contains("3x3 estimate"), "{e}");
    }
}

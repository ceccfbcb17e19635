//! The catalogue of terrain features: word, units, method, formula and reference, for the
//! `features` command and the stack's documentation, read from the feature table
//! ([`super::table`]).

use serde::Serialize;

use super::table::{MethodDoc, GROUPS, QUANTITIES};

pub use super::table::{
    edge_rule, EDGES_3X3, EDGES_DETRENDED, EDGES_DEV, EDGES_EXTREMA, EDGES_FIT, EDGES_STD,
    EDGES_TPI, EDGES_VRM,
};

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

fn entry(d: &MethodDoc, feature: &'static str, units: &'static str) -> FeatureDoc {
    FeatureDoc {
        word: d.word,
        feature,
        units,
        method: d.method,
        formula: d.formula,
        reference: d.reference,
        edges: edge_rule(feature, d.method),
    }
}

/// Every terrain feature terrastack computes, one entry per word and method: the table's
/// rows in order, then the group words' own methods.
pub fn catalogue() -> Vec<FeatureDoc> {
    let mut v: Vec<FeatureDoc> = QUANTITIES
        .iter()
        .flat_map(|row| row.docs.iter().map(|d| entry(d, row.key, row.units)))
        .collect();
    for g in GROUPS {
        let first = g.members[0].row();
        v.extend(g.docs.iter().map(|d| entry(d, first.key, first.units)));
    }
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
            assert_eq!(
                f[0].method().as_deref().unwrap_or("none"),
                d.method,
                "{}",
                d.word
            );
        }
        let cat = catalogue();
        for (w, _) in FEATURE_WORDS.iter() {
            if *w == "curvature" {
                continue;
            }
            assert!(cat.iter().any(|d| d.word == *w), "{w} undocumented");
        }
    }
}

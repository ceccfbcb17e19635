//! Typed recipe settings, parsed once at the edge: the recipe file's keys and the command
//! line's flags both produce these values, and nothing later compares their text again.
//!
//! - Choices ([`WindowShape`], [`ExtentRule`], [`OutputCompression`]) are `clap::ValueEnum`s
//!   (a flag's bad value is refused by clap, naming the flag and the possible values) and
//!   serde enums (a recipe's bad value is refused naming the file, its line and the
//!   possible values). Both spell the values alike, as `stack.json` records them.
//! - Values with a syntax of their own (the band map, reflectance scale and offset) are
//!   [`Given`]: the parsed value together with the text as given, which is what `stack.json`
//!   records (so a stack's sidecar and a batch's parameter hashes do not change).

use clap::builder::PossibleValue;
use clap::ValueEnum;
use serde::{Deserialize, Deserializer, Serialize, Serializer};

pub use crate::align::ExtentRule;
use crate::error::Result;
use crate::raster::geotiff::Compression;
use crate::spectral::{BandMap, PerBand};
pub use crate::terrain::WindowShape;

/// Compression of `stack.tif` (`--compression`, `output.compression`).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize, ValueEnum)]
#[serde(rename_all = "lowercase")]
pub enum OutputCompression {
    /// Deflate (zlib), read by every GeoTIFF reader.
    #[default]
    Deflate,
    /// Zstandard: faster to write, read by GDAL 2.3 and later.
    Zstd,
}

impl OutputCompression {
    /// The writer's codec.
    pub fn codec(self) -> Compression {
        match self {
            OutputCompression::Deflate => Compression::Deflate,
            OutputCompression::Zstd => Compression::Zstd,
        }
    }
}

impl ValueEnum for WindowShape {
    fn value_variants<'a>() -> &'a [Self] {
        &[WindowShape::Disc, WindowShape::Square]
    }

    fn to_possible_value(&self) -> Option<PossibleValue> {
        Some(PossibleValue::new(self.name()))
    }
}

/// `stack.json` and recipes spell a window shape by its [`WindowShape::name`].
impl Serialize for WindowShape {
    fn serialize<S: Serializer>(&self, s: S) -> std::result::Result<S::Ok, S::Error> {
        s.serialize_str(self.name())
    }
}

impl<'de> Deserialize<'de> for WindowShape {
    fn deserialize<D: Deserializer<'de>>(d: D) -> std::result::Result<Self, D::Error> {
        let text = String::deserialize(d)?;
        WindowShape::from_str(&text, false).map_err(|_| {
            serde::de::Error::custom(format!(
                "unknown window shape `{text}`, expected `disc` or `square`"
            ))
        })
    }
}

impl ValueEnum for ExtentRule {
    fn value_variants<'a>() -> &'a [Self] {
        &[ExtentRule::Dsm, ExtentRule::Intersection]
    }

    fn to_possible_value(&self) -> Option<PossibleValue> {
        Some(PossibleValue::new(match self {
            ExtentRule::Dsm => "dsm",
            ExtentRule::Intersection => "intersection",
        }))
    }
}

/// A value with a syntax of its own, parsed once, kept with the text it was parsed from.
/// Serialises as that text; deserialises by parsing it again.
#[derive(Clone, Debug, PartialEq)]
pub struct Given<T> {
    text: String,
    value: T,
}

/// How a [`Given`] value is parsed from its text; `what` names the flag or key in errors.
pub trait ParseGiven: Sized {
    fn parse_given(what: &str, text: &str) -> Result<Self>;
}

impl ParseGiven for BandMap {
    fn parse_given(_what: &str, text: &str) -> Result<BandMap> {
        BandMap::parse(text)
    }
}

impl ParseGiven for PerBand {
    fn parse_given(what: &str, text: &str) -> Result<PerBand> {
        PerBand::parse(what, text)
    }
}

impl<T: ParseGiven> Given<T> {
    /// Parse `text`; `what` (a flag, or a recipe key and its file) names it in errors.
    pub fn parse(what: &str, text: &str) -> Result<Given<T>> {
        Ok(Given {
            value: T::parse_given(what, text)?,
            text: text.to_string(),
        })
    }
}

impl<T> Given<T> {
    /// The text as given.
    pub fn text(&self) -> &str {
        &self.text
    }

    /// The parsed value.
    pub fn value(&self) -> &T {
        &self.value
    }
}

impl<T> Serialize for Given<T> {
    fn serialize<S: Serializer>(&self, s: S) -> std::result::Result<S::Ok, S::Error> {
        s.serialize_str(&self.text)
    }
}

impl<'de, T: ParseGiven> Deserialize<'de> for Given<T> {
    fn deserialize<D: Deserializer<'de>>(d: D) -> std::result::Result<Self, D::Error> {
        let text = String::deserialize(d)?;
        Given::parse("the recorded value", &text).map_err(serde::de::Error::custom)
    }
}

/// The band map of an orthomosaic (`--bands`, `inputs.bands`).
pub type BandMapSetting = Given<BandMap>;

/// A reflectance scale or offset: one number or `ROLE=NUMBER` pairs
/// (`--reflectance-scale`, `inputs.reflectance_scale`; likewise the offset).
pub type ReflectanceScale = Given<PerBand>;

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn choices_read_and_write_as_stack_json_spells_them() {
        for (shape, text) in [(WindowShape::Disc, "disc"), (WindowShape::Square, "square")] {
            assert_eq!(serde_json::to_value(shape).unwrap(), text);
            assert_eq!(
                serde_json::from_value::<WindowShape>(text.into()).unwrap(),
                shape
            );
            assert_eq!(WindowShape::from_str(text, false).unwrap(), shape);
        }
        for (rule, text) in [
            (ExtentRule::Dsm, "dsm"),
            (ExtentRule::Intersection, "intersection"),
        ] {
            assert_eq!(serde_json::to_value(rule).unwrap(), text);
            assert_eq!(ExtentRule::from_str(text, false).unwrap(), rule);
        }
        assert_eq!(
            serde_json::to_value(OutputCompression::Zstd).unwrap(),
            "zstd"
        );
        assert_eq!(OutputCompression::Zstd.codec(), Compression::Zstd);
        let e = serde_json::from_value::<WindowShape>("round".into()).unwrap_err();
        assert!(e.to_string().contains("`disc` or `square`"), "{e}");
    }

    #[test]
    fn given_values_keep_their_text() {
        let m: BandMapSetting = Given::parse("--bands", "red=3, nir=5").unwrap();
        assert_eq!(m.value().roles.len(), 2);
        assert_eq!(serde_json::to_value(&m).unwrap(), "red=3, nir=5");
        let back: BandMapSetting = serde_json::from_value("red=3, nir=5".into()).unwrap();
        assert_eq!(back, m);
        let s: ReflectanceScale = Given::parse("--reflectance-scale", "1/10000").unwrap();
        assert_eq!(s.value().all, Some(1e-4));
        let e = ReflectanceScale::parse("--reflectance-scale", "abc").unwrap_err();
        assert!(e.to_string().contains("--reflectance-scale"), "{e}");
    }
}

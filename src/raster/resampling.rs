//! Resampling methods: how source cells are combined into a target cell when a source is
//! read onto another grid (`--resampling`, recipes). The kernels are in
//! [`crate::resample`]; GDAL's warper maps the same names to its own (`raster::gdal::warp`).

use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};

/// How source cells are combined into a target cell.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "lowercase")]
pub enum Resampling {
    /// The source cell containing the target cell's centre.
    Nearest,
    /// Bilinear interpolation of the four nearest source cell centres.
    #[default]
    Bilinear,
    /// Cubic convolution (Keys 1981, a = −0.5) on the 4x4 nearest source cell centres.
    Cubic,
    /// Area-weighted mean of the source cells the target cell covers (for going coarser).
    Average,
}

impl Resampling {
    /// Parse `nearest`, `bilinear`, `cubic` or `average` (case-insensitive).
    pub fn parse(text: &str) -> Result<Resampling> {
        match text.trim().to_ascii_lowercase().as_str() {
            "nearest" => Ok(Resampling::Nearest),
            "bilinear" => Ok(Resampling::Bilinear),
            "cubic" => Ok(Resampling::Cubic),
            "average" => Ok(Resampling::Average),
            _ => Err(Error::usage(format!("unknown resampling method `{text}`"))
                .with_fix("choose nearest, bilinear, cubic or average")),
        }
    }

    /// Lower-case name, as parsed.
    pub fn name(self) -> &'static str {
        match self {
            Resampling::Nearest => "nearest",
            Resampling::Bilinear => "bilinear",
            Resampling::Cubic => "cubic",
            Resampling::Average => "average",
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parse_methods() {
        assert_eq!(Resampling::parse("Cubic").unwrap(), Resampling::Cubic);
        let e = Resampling::parse("lanczos").unwrap_err().to_string();
        assert!(e.contains("`lanczos`") && e.contains("average"), "{e}");
        for m in [
            Resampling::Nearest,
            Resampling::Bilinear,
            Resampling::Cubic,
            Resampling::Average,
        ] {
            assert_eq!(Resampling::parse(m.name()).unwrap(), m);
        }
    }
}

//! Resampling every input onto the target grid. (filled in by its issue)

use serde::{Deserialize, Serialize};

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

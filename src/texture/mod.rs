//! Texture of a band or index: how its values vary within a window of a few metres.
//!
//! - [`glcm`]: grey-level co-occurrence features (Haralick, Shanmugam & Dinstein 1973):
//!   contrast, homogeneity, entropy and correlation of a quantised band, averaged over
//!   four directions, with a sliding window.
//! - [`first_order`]: the window standard deviation of a band, from exact window sums.
//! - [`bands`]: the texture words of a stack (`glcm@1.5@ndvi`, `stddev@2@nir`), their
//!   records and one block's computation; [`settings`]: grey levels, pair distance and
//!   quantisation ranges (`[texture]`, `--texture-*`).
//!
//! Formulas and references: docs/methods.md, "Grey-level co-occurrence texture" and
//! "First-order texture".

pub mod bands;
pub mod first_order;
pub mod glcm;
pub mod settings;

//! Texture of a band or index: how its values vary within a window of a few metres.
//!
//! - [`glcm`]: grey-level co-occurrence features (Haralick, Shanmugam & Dinstein 1973):
//!   contrast, homogeneity, entropy and correlation of a quantised band, averaged over
//!   four directions, with a sliding window.
//! - [`first_order`]: the window standard deviation of a band, from exact window sums.
//!
//! Formulas and references: docs/methods.md, "Grey-level co-occurrence texture" and
//! "First-order texture".

pub mod first_order;
pub mod glcm;

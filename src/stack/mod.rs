//! From a recipe to a finished stack: the resolved recipe, the block plan, the executor,
//! the sidecar metadata, the preview and the STAC Item.

pub mod executor;
pub mod output;
pub mod plan;
pub mod plausibility;
pub mod preview;
pub mod recipe;
pub mod settings;
pub mod sidecar;
pub mod stac;
pub mod tile_sink;

pub use executor::{build, BuildOptions, BuildReport, Progress};
pub use recipe::{Recipe, RecipeFile, RecipeFlags};

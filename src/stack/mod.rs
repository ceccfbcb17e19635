//! From a recipe to a finished stack: the resolved recipe, the block plan, the executor,
//! the sidecar metadata and the preview.

pub mod output;
pub mod preview;
pub mod recipe;
pub mod sidecar;

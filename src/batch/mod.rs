//! Many flights from one manifest.
//!
//! - [`manifest`]: the TOML manifest, its checks, and the common grid.
//! - [`ledger`]: one record per finished flight, so reruns skip it.
//! - [`shard`]: the deterministic partition of flights for a cluster scheduler.
//! - [`shift`]: between-flight offsets by phase correlation.

pub mod ledger;
pub mod manifest;
pub mod shard;
pub mod shift;
pub mod temporal;

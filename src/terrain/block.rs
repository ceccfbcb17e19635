//! What a kernel receives with a block: elevation samples at their stored precision
//! ([`DsmSample`]) and the block's cell sizes per row ([`RowSizes`]).

use crate::grid::CellSizes;

/// A stored elevation sample: f32 or f64. Kernels widen it exactly to f64 (then multiply
/// by the z-factor), so an f64 DSM keeps its precision through every kernel and is
/// rounded once, to the f32 of the output band. Two windowed paths quantise elevations
/// (exact integer sums, for bit-identical blocks): TPI, DEV and roughness to 2⁻²⁰ m
/// (error ≤ 0.48 µm per cell, see [`window_sums`]), and the multi-scale quadratic fit to
/// the same quantum (its effect on curvature is stated in [`quadratic_fit`]); the 3x3
/// estimators, VRM and the window extrema work on the f64 values themselves.
pub trait DsmSample: Copy + Send + Sync + Into<f64> + 'static {
    /// The storage precision's spacing (ulp) at elevation `z`, metres (before the z factor).
    fn spacing_at(z: f64) -> f64;
}

impl DsmSample for f32 {
    fn spacing_at(z: f64) -> f64 {
        let z = (z.abs() as f32).max(f32::MIN_POSITIVE);
        (f32::from_bits(z.to_bits() + 1) - z) as f64
    }
}

impl DsmSample for f64 {
    fn spacing_at(z: f64) -> f64 {
        let z = z.abs().max(f64::MIN_POSITIVE);
        f64::from_bits(z.to_bits() + 1) - z
    }
}

/// Row-indexed cell sizes (metres) that never index out of range: rows past the end
/// repeat the last entry; an empty list reads as 1 m.
#[derive(Clone, Copy, Debug)]
pub struct RowSizes<'a> {
    cells: &'a CellSizes,
}

impl<'a> RowSizes<'a> {
    /// Wraps a block's cell sizes.
    pub fn new(cells: &'a CellSizes) -> Self {
        RowSizes { cells }
    }
    /// East-west cell size of block row `row`.
    pub fn hx(&self, row: usize) -> f64 {
        let v = &self.cells.hx;
        v.get(row).or(v.last()).copied().unwrap_or(1.0)
    }
    /// North-south cell size of block row `row`.
    pub fn hy(&self, row: usize) -> f64 {
        let v = &self.cells.hy;
        v.get(row).or(v.last()).copied().unwrap_or(1.0)
    }
}

//! One output band of terrain analysis as data: a [`Quantity`] of the feature table, its
//! estimator (derivatives only) and its scale (window or fit radius, metres). Names,
//! units, methods, windows and halos are read from the quantity's row
//! ([`super::table::QUANTITIES`]) and its [`Family`].

use super::params::{SlopeMethod, WindowShape};
use super::radius::radius_cells;
use super::table::{edge_rule, Family, Kernel, Quantity, QuantityRow, EDGES_FIT};

/// One output band of terrain analysis. Build it with [`TerrainFeature::new`] (elevation,
/// 3x3 indices), [`TerrainFeature::windowed`] (window statistics) or
/// [`TerrainFeature::derivative`], or from words with [`super::words::expand`] and
/// `TerrainFeature::parse` (in [`super::words`]).
#[derive(Clone, Debug, PartialEq)]
pub struct TerrainFeature {
    quantity: Quantity,
    method: Option<SlopeMethod>,
    scale_m: Option<f64>,
}

/// Formats a radius for band names: shortest decimal form ("5", "2.5", "0.25"), with `p`
/// for the point ("2p5").
pub(crate) fn radius_label(r: f64) -> String {
    format!("{r}").replace('.', "p")
}

impl TerrainFeature {
    /// A feature with neither estimator nor radius: elevation, or a 3x3 index (TRI).
    pub fn new(quantity: Quantity) -> TerrainFeature {
        debug_assert!(matches!(
            quantity.row().family,
            Family::Elevation | Family::Index3x3
        ));
        TerrainFeature {
            quantity,
            method: None,
            scale_m: None,
        }
    }

    /// A window statistic (TPI, roughness, ...) over a window of radius `radius_m` metres.
    pub fn windowed(quantity: Quantity, radius_m: f64) -> TerrainFeature {
        debug_assert_eq!(quantity.row().family, Family::Window);
        TerrainFeature {
            quantity,
            method: None,
            scale_m: Some(radius_m),
        }
    }

    /// A derivative (slope, aspect, curvatures) by `method`; `scale_m` is the fit radius
    /// in metres, given with [`SlopeMethod::Quadratic`] only.
    pub fn derivative(
        quantity: Quantity,
        method: SlopeMethod,
        scale_m: Option<f64>,
    ) -> TerrainFeature {
        debug_assert_eq!(quantity.row().family, Family::Derivative);
        TerrainFeature {
            quantity,
            method: Some(method),
            scale_m,
        }
    }

    /// What the band measures.
    pub fn quantity(&self) -> Quantity {
        self.quantity
    }

    /// The quantity's row of the feature table.
    pub fn row(&self) -> &'static QuantityRow {
        self.quantity.row()
    }

    /// The quantity's family (grammar of its word, its window).
    pub fn family(&self) -> Family {
        self.row().family
    }

    /// What computes it.
    pub fn kernel(&self) -> Kernel {
        self.row().kernel
    }

    /// The derivative estimator; `None` for every other family.
    pub fn estimator(&self) -> Option<SlopeMethod> {
        self.method
    }

    /// The (method, scale) pair of a derivative-based feature.
    pub(crate) fn derivative_spec(&self) -> Option<(SlopeMethod, Option<f64>)> {
        self.method.map(|m| (m, self.scale_m))
    }

    /// The (method, fit radius) of a curvature feature (profile, plan, tangential, mean,
    /// Gaussian); `None` for every other feature.
    pub fn curvature_spec(&self) -> Option<(SlopeMethod, Option<f64>)> {
        match self.kernel() {
            Kernel::Derivative(f) if f.second_order() => self.derivative_spec(),
            _ => None,
        }
    }

    /// Whether this curvature needs a slope direction (kn, kc, kt): such layers are
    /// nodata where the gradient is within [`super::curvature::GRADIENT_SIGNIFICANCE`] standard
    /// errors of zero.
    pub fn needs_direction(&self) -> bool {
        matches!(self.kernel(), Kernel::Derivative(f) if f.needs_direction())
    }

    /// Whether the derivatives come from the multi-scale quadratic fit (a `:quadratic`
    /// feature with a radius) rather than a 3x3 estimator.
    pub fn is_fitted(&self) -> bool {
        self.method == Some(SlopeMethod::Quadratic) && self.scale_m.is_some()
    }

    /// Stable band name, an identifier `[a-z0-9_]`: "slope_horn", "tpi_r5m",
    /// "slope_quadratic_r2p5m".
    pub fn band_name(&self) -> String {
        let stem = self.row().stem;
        match (self.method, self.scale_m) {
            (Some(m @ SlopeMethod::Quadratic), Some(r)) => {
                format!("{stem}_{}_r{}m", m.name(), radius_label(r))
            }
            (Some(m), _) => format!("{stem}_{}", m.name()),
            (None, Some(r)) => format!("{stem}_r{}m", radius_label(r)),
            (None, None) => stem.to_string(),
        }
    }

    /// The docs/design.md `feature` value: "slope", "tpi", "roughness", ...
    pub fn feature_key(&self) -> &'static str {
        self.row().key
    }

    /// The method label for metadata: the derivative estimator, "riley" for TRI,
    /// "detrended_square" for detrended roughness (the default window), `None` for
    /// elevation. Windowed statistics report their window shape through
    /// [`TerrainFeature::method_with_shape`].
    pub fn method(&self) -> Option<String> {
        self.method_with_shape(WindowShape::default())
    }

    /// Like [`TerrainFeature::method`], with the window shape actually used.
    pub fn method_with_shape(&self, shape: WindowShape) -> Option<String> {
        let row = self.row();
        match row.family {
            Family::Elevation => None,
            Family::Derivative => self.method.map(|m| m.name().to_string()),
            Family::Index3x3 => Some(row.method_label.to_string()),
            Family::Window => Some(format!("{}{}", row.method_label, shape.name())),
        }
    }

    /// What the value is where the raster's edge or nodata cuts the window (the sidecar's
    /// `edge_rule`), for windows of `shape`.
    pub fn edge_rule(&self, shape: WindowShape) -> &'static str {
        if self.is_fitted() {
            return EDGES_FIT;
        }
        let method = self.method_with_shape(shape).unwrap_or_default();
        edge_rule(self.feature_key(), &method)
    }

    /// Window radius in metres for windowed features (and the multi-scale fit).
    pub fn scale_m(&self) -> Option<f64> {
        self.scale_m
    }

    /// Units: "degrees", "metres", "1/m", "1/m2" (Gaussian curvature) or "unitless".
    pub fn units(&self) -> &'static str {
        self.row().units
    }

    /// Window radius in cells (x, y) for cell size (`hx`, `hy`) metres: 1 for 3x3
    /// features, ⌊r/h⌋ for windows of radius r, 0 for elevation.
    pub fn window_px(&self, hx: f64, hy: f64) -> (usize, usize) {
        match (self.family(), self.scale_m) {
            (Family::Window, Some(r)) => (radius_cells(r, hx), radius_cells(r, hy)),
            (Family::Derivative, Some(r)) if self.method == Some(SlopeMethod::Quadratic) => {
                (radius_cells(r, hx).max(1), radius_cells(r, hy).max(1))
            }
            (Family::Derivative | Family::Index3x3, _) => (1, 1),
            _ => (0, 0),
        }
    }

    /// Cells of context needed on every side. Pass the smallest cell sizes of the raster
    /// (on geographic grids, those of the row nearest a pole) so every block gets enough.
    pub fn halo_px(&self, hx: f64, hy: f64) -> usize {
        let (x, y) = self.window_px(hx, hy);
        x.max(y) + self.row().halo_beyond_window
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn window_and_halo_sizes() {
        let t = TerrainFeature::windowed(Quantity::Tpi, 0.5);
        // 0.5 m at 0.05 m cells is exactly 10 cells (decimal input, tolerance 1e-9).
        assert_eq!(t.window_px(0.05, 0.05), (10, 10));
        assert_eq!(t.halo_px(0.05, 0.1), 10);
        assert_eq!(
            TerrainFeature::windowed(Quantity::Vrm, 1.0).halo_px(0.5, 0.5),
            3
        );
        assert_eq!(TerrainFeature::new(Quantity::Tri).halo_px(1.0, 1.0), 1);
        assert_eq!(
            TerrainFeature::new(Quantity::Elevation).halo_px(1.0, 1.0),
            0
        );
        assert_eq!(
            TerrainFeature::windowed(Quantity::Tpi, 1.0).units(),
            "metres"
        );
        assert_eq!(
            TerrainFeature::derivative(Quantity::GaussianCurvature, SlopeMethod::EvansYoung, None)
                .units(),
            "1/m2"
        );
    }

    #[test]
    fn methods_and_edge_rules() {
        use super::super::table::{EDGES_DETRENDED, EDGES_STD};
        let d = TerrainFeature::windowed(Quantity::RoughnessDetrended, 2.0);
        assert_eq!(d.method().as_deref(), Some("detrended_square"));
        assert_eq!(
            d.method_with_shape(WindowShape::Disc).as_deref(),
            Some("detrended_disc")
        );
        assert_eq!(d.edge_rule(WindowShape::Square), EDGES_DETRENDED);
        assert_eq!(
            TerrainFeature::windowed(Quantity::Roughness, 2.0).edge_rule(WindowShape::Disc),
            EDGES_STD
        );
        assert_eq!(
            TerrainFeature::new(Quantity::Tri).method().as_deref(),
            Some("riley")
        );
        assert_eq!(TerrainFeature::new(Quantity::Elevation).method(), None);
        let q = TerrainFeature::derivative(Quantity::Slope, SlopeMethod::Quadratic, Some(2.0));
        assert_eq!(q.edge_rule(WindowShape::Disc), EDGES_FIT);
        assert_eq!(q.method().as_deref(), Some("quadratic"));
    }
}

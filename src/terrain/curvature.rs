//! Curvatures of the land surface from partial derivatives p, q, r, s, t.
//!
//! Florinsky 2016 (Digital Terrain Analysis in Soil Science and Geology, 2nd ed.) and
//! Minár et al. 2020 (Earth-Science Reviews 211, 103414; see docs/methods.md), with the
//! sign convention of docs/methods.md: convex (a dome) is positive. Units 1/m (Gaussian 1/m²).
//! With g = p² + q² and w = 1 + g:
//! - profile kn = −(p²r + 2pqs + q²t) / (g·w^(3/2))
//! - tangential kt = −(q²r − 2pqs + p²t) / (g·w^(1/2))
//! - plan kc = −(q²r − 2pqs + p²t) / g^(3/2)
//! - mean H = −((1 + q²)r − 2pqs + (1 + p²)t) / (2w^(3/2))
//! - Gaussian K = (rt − s²) / w²
//!
//! kn, kt and kc need a slope direction. The formulas here are NaN only where g = 0
//! exactly; the layers go further ([`directional`]): where the gradient is not larger than
//! [`GRADIENT_SIGNIFICANCE`] times its own standard error, its direction is noise, and kn,
//! kt and kc are nodata. The standard error comes from the precision of the estimator at
//! that cell: the elevation noise σ̂ left by the least-squares quadratic over the
//! estimator's window (3x3: RSS/3; the n x n fit: RSS/(N − 6)) times the estimator's
//! weights (Evans–Young p: σ̂/(√6·h); Horn 0.433σ̂/h; Zevenbergen–Thorne 0.707σ̂/h;
//! the fit σ̂/(h·√Σi²)). So the threshold is a slope, tan S_min = k·σ_p, stated per cell,
//! that follows the DSM's noise and storage precision: on a flat plane with elevation noise
//! most cells are nodata, on a noise-free quadratic only the stationary point is, and where
//! kc is kept |kc| stays of the order of |r|/(k·σ_p). Without the rule, near-flat cells of
//! a noisy DSM gave |kc| above 10⁴ 1/m. H and K need no direction and are defined
//! everywhere. Pointwise, O(1) per cell.

use super::pqrst::Pqrst;

/// How many standard errors the gradient must exceed for kn, kt and kc to be defined: 2,
/// the usual two-sigma rule (common practice). On pure noise over a 3x3 window the share
/// of cells left undefined is P(F(2, 3) < k²/2) = 1 − (1 + k²/3)^(−3/2) = 0.719.
pub const GRADIENT_SIGNIFICANCE: f64 = 2.0;

/// `k` where the squared gradient g = p² + q² exceeds `g_min` (the estimator's noise,
/// from [`super::derivatives::gradient_floor_3x3`] or the fit), else NaN. g = 0 is always
/// NaN. Branch-free.
#[inline(always)]
pub fn directional(k: f64, d: &Pqrst, g_min: f64) -> f64 {
    let g = d.p * d.p + d.q * d.q;
    super::arctan::select(g <= g_min, f64::NAN, k)
}

/// `k`, or NaN where the slope has no direction (g = p² + q² = 0). Written as a select so
/// row loops stay branch-free (and vectorise).
#[inline(always)]
fn undirected_nan(g: f64, k: f64) -> f64 {
    super::arctan::select(g == 0.0, f64::NAN, k)
}

/// Profile curvature kn (1/m): normal curvature along the slope line; NaN where g = 0.
///
/// On z = x − 0.05x² at x = 0 (p = 1, q = 0, r = −0.1, s = t = 0) the slope line is the
/// curve itself, so kn = −r/(1 + p²)^1.5 = 0.1/2^1.5 (closed form; convex positive), and
/// the contours are straight, so plan curvature is 0:
///
/// ```
/// use terrastack::terrain::curvature::{plan, profile};
/// use terrastack::terrain::pqrst::Pqrst;
///
/// let d = Pqrst { p: 1.0, q: 0.0, r: -0.1, s: 0.0, t: 0.0 };
/// assert!((profile(&d) - 0.1 / 2f64.powf(1.5)).abs() < 1e-15);
/// assert_eq!(plan(&d), 0.0);
/// ```
#[inline]
pub fn profile(d: &Pqrst) -> f64 {
    let g = d.p * d.p + d.q * d.q;
    let w = 1.0 + g;
    let k = -(d.p * d.p * d.r + 2.0 * d.p * d.q * d.s + d.q * d.q * d.t) / (g * w * w.sqrt());
    undirected_nan(g, k)
}

/// Tangential curvature kt (1/m): normal curvature along the contour; NaN where g = 0.
#[inline]
pub fn tangential(d: &Pqrst) -> f64 {
    let g = d.p * d.p + d.q * d.q;
    let w = 1.0 + g;
    let k = -(d.q * d.q * d.r - 2.0 * d.p * d.q * d.s + d.p * d.p * d.t) / (g * w.sqrt());
    undirected_nan(g, k)
}

/// Plan curvature kc (1/m): curvature of the contour line in the horizontal plane; NaN
/// where g = 0.
#[inline]
pub fn plan(d: &Pqrst) -> f64 {
    let g = d.p * d.p + d.q * d.q;
    let k = -(d.q * d.q * d.r - 2.0 * d.p * d.q * d.s + d.p * d.p * d.t) / (g * g.sqrt());
    undirected_nan(g, k)
}

/// Mean curvature H (1/m), the average of the principal curvatures.
///
/// At the top of the paraboloid z = −(x² + y²)/(2R) (p = q = 0, r = t = −1/R, s = 0)
/// both principal curvatures are 1/R, so H = 1/R and K = 1/R² (closed form; convex
/// positive):
///
/// ```
/// use terrastack::terrain::curvature::{gaussian, mean};
/// use terrastack::terrain::pqrst::Pqrst;
///
/// let r_m = 25.0;
/// let top = Pqrst { p: 0.0, q: 0.0, r: -1.0 / r_m, s: 0.0, t: -1.0 / r_m };
/// assert!((mean(&top) - 1.0 / r_m).abs() < 1e-15);
/// assert!((gaussian(&top) - 1.0 / (r_m * r_m)).abs() < 1e-15);
/// ```
#[inline]
pub fn mean(d: &Pqrst) -> f64 {
    let w = 1.0 + d.p * d.p + d.q * d.q;
    -((1.0 + d.q * d.q) * d.r - 2.0 * d.p * d.q * d.s + (1.0 + d.p * d.p) * d.t)
        / (2.0 * w * w.sqrt())
}

/// Gaussian curvature K (1/m²), the product of the principal curvatures.
#[inline]
pub fn gaussian(d: &Pqrst) -> f64 {
    let w = 1.0 + d.p * d.p + d.q * d.q;
    (d.r * d.t - d.s * d.s) / (w * w)
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    /// Exact derivatives of the sphere cap z = √(R² − x² − y²).
    fn sphere(r0: f64, x: f64, y: f64) -> Pqrst {
        let z = (r0 * r0 - x * x - y * y).sqrt();
        Pqrst {
            p: -x / z,
            q: -y / z,
            r: -(r0 * r0 - y * y) / z.powi(3),
            s: -x * y / z.powi(3),
            t: -(r0 * r0 - x * x) / z.powi(3),
        }
    }

    #[test]
    fn worked_sphere_cap() {
        // docs/methods.md worked: R = 37 m at (3, 4): kn = kt = H = 1/R = 0.027027, K = 1/R²,
        // kc = 1/ρ = 0.2 with ρ = 5 m.
        let d = sphere(37.0, 3.0, 4.0);
        assert_relative_eq!(profile(&d), 1.0 / 37.0, epsilon = 1e-12);
        assert_relative_eq!(tangential(&d), 1.0 / 37.0, epsilon = 1e-12);
        assert_relative_eq!(mean(&d), 1.0 / 37.0, epsilon = 1e-12);
        assert_relative_eq!(gaussian(&d), 1.0 / (37.0 * 37.0), epsilon = 1e-12);
        assert_relative_eq!(plan(&d), 0.2, epsilon = 1e-12);
    }

    #[test]
    fn worked_bowl() {
        // docs/methods.md worked: bowl z = (x² + y²)/(2R), R = 100 m, at (30, 40):
        // kn = −0.0071554, kt = −0.0089443, kc = −0.0200, H = −0.0080498, K = 6.4e-5.
        let d = Pqrst {
            p: 0.3,
            q: 0.4,
            r: 0.01,
            s: 0.0,
            t: 0.01,
        };
        assert_relative_eq!(profile(&d), -0.0071554, epsilon = 1e-7);
        assert_relative_eq!(tangential(&d), -0.0089443, epsilon = 1e-7);
        assert_relative_eq!(plan(&d), -0.0200, epsilon = 1e-7);
        assert_relative_eq!(mean(&d), -0.0080498, epsilon = 1e-7);
        assert_relative_eq!(gaussian(&d), 6.4e-5, epsilon = 1e-9);
    }

    #[test]
    fn worked_gaussian_hill() {
        // docs/methods.md worked: z = 100·exp(−ρ²/(2·50²)) at (50, 0): kn = 0, kt = 0.0154323,
        // H = 0.0077162, K = 0. Derivatives in closed form: with e = exp(−1/2),
        // p = −100·x/σ²·e, r = 100·e·(x²/σ⁴ − 1/σ²) = 0 at x = σ, t = −100·e/σ², s = q = 0.
        let sig2 = 2500.0;
        let e = (-0.5f64).exp();
        let d = Pqrst {
            p: -100.0 * 50.0 / sig2 * e,
            q: 0.0,
            r: 0.0,
            s: 0.0,
            t: -100.0 * e / sig2,
        };
        assert_relative_eq!(profile(&d), 0.0, epsilon = 1e-12);
        assert_relative_eq!(tangential(&d), 0.0154323, epsilon = 1e-7);
        assert_relative_eq!(mean(&d), 0.0077162, epsilon = 1e-7);
        assert_relative_eq!(gaussian(&d), 0.0, epsilon = 1e-12);
    }

    #[test]
    fn saddle_is_negative_gaussian_and_flat_rule() {
        // Closed form: z = xy + x at the origin: p = 1, q = 0, s = 1, r = t = 0;
        // K = −1/(1 + 1)² = −0.25, H = 0.
        let d = Pqrst {
            p: 1.0,
            q: 0.0,
            r: 0.0,
            s: 1.0,
            t: 0.0,
        };
        assert_relative_eq!(gaussian(&d), -0.25, epsilon = 1e-12);
        assert_relative_eq!(mean(&d), 0.0, epsilon = 1e-12);
        // kn = −(2pqs)/(g w^1.5) = 0; kt = −(−2pqs + p²t)/(g √w) = 0 here (q = 0).
        assert_relative_eq!(profile(&d), 0.0, epsilon = 1e-12);
        let flat = Pqrst {
            p: 0.0,
            q: 0.0,
            r: 0.1,
            s: 0.0,
            t: 0.1,
        };
        assert!(profile(&flat).is_nan() && plan(&flat).is_nan() && tangential(&flat).is_nan());
        // H of the bowl bottom: −(r + t)/2 = −0.1, K = rt = 0.01 (closed form).
        assert_relative_eq!(mean(&flat), -0.1, epsilon = 1e-12);
        assert_relative_eq!(gaussian(&flat), 0.01, epsilon = 1e-12);
    }

    /// kn, kt, kc, H, K (Evans–Young, 3x3) of `z` through [`crate::terrain::compute`].
    fn layers<T: crate::terrain::DsmSample>(
        z: &ndarray::Array2<T>,
        h: f64,
        reference_z: f64,
    ) -> Vec<ndarray::Array2<f32>> {
        use crate::terrain::{compute, Quantity, SlopeMethod, TerrainFeature, TerrainParams};
        let m = SlopeMethod::EvansYoung;
        let feats = [
            TerrainFeature::derivative(Quantity::ProfileCurvature, m, None),
            TerrainFeature::derivative(Quantity::TangentialCurvature, m, None),
            TerrainFeature::derivative(Quantity::PlanCurvature, m, None),
            TerrainFeature::derivative(Quantity::MeanCurvature, m, None),
            TerrainFeature::derivative(Quantity::GaussianCurvature, m, None),
        ];
        let cells = crate::grid::CellSizes::uniform(h, h, z.nrows());
        compute(
            &feats,
            z.view(),
            &cells,
            1,
            reference_z,
            &TerrainParams::default(),
        )
    }

    #[test]
    fn directional_curvatures_are_undefined_on_a_noisy_flat_plane() {
        // A flat plane with 1 mm Gaussian noise (tiny next to 0.1 m cells): the gradient
        // is pure noise. With k = 2 the share of cells where kn, kt, kc are nodata is
        // P(F(2, 3) < 2) = 1 − (7/3)^(−3/2) = 0.7194 (F distribution CDF, closed form;
        // p and q are independent projections, σ̂² has 3 degrees of freedom). H and K stay
        // defined everywhere. Before the rule, such cells gave |kc| far above 10³ 1/m.
        use crate::terrain::test_support::SplitMix64;
        let mut rng = SplitMix64::new(5);
        let n = 302;
        let mut gauss = || {
            let (u1, u2) = (rng.next_f64().max(1e-300), rng.next_f64());
            (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()
        };
        let z = ndarray::Array2::from_shape_fn((n, n), |_| 100.0 + 1e-3 * gauss());
        let out = layers(&z, 0.1, 100.0);
        let cells = ((n - 2) * (n - 2)) as f64;
        for (k, band) in out.iter().enumerate().take(3) {
            let undefined = band.iter().filter(|v| v.is_nan()).count() as f64 / cells;
            assert!((undefined - 0.7194).abs() < 0.01, "band {k}: {undefined}");
        }
        for (k, band) in out.iter().enumerate().skip(3) {
            assert!(band.iter().all(|v| v.is_finite()), "band {k}");
        }
        // Where kc is kept it is bounded by the signal-to-noise of the gradient.
        let kc_max = out[2]
            .iter()
            .filter(|v| v.is_finite())
            .fold(0.0f32, |a, v| a.max(v.abs()));
        assert!(kc_max < 200.0, "max |kc| = {kc_max}");
    }

    #[test]
    fn worked_values_survive_the_undefined_rule_at_high_elevation() {
        // docs/methods.md worked values through the layers, on f64 DSMs 1500 m up with 5 cm
        // cells: the bowl z = (x² + y²)/200 at (30, 40) is exact for Evans–Young
        // (kn = −0.0071554, kt = −0.0089443, kc = −0.0200, H = −0.0080498, K = 6.4e-5);
        // the sphere cap R = 37 m at (3, 4) (kn = kt = H = 1/R, kc = 0.2, K = 1/R²) is
        // within the method's truncation error, far below 1e-6 at this cell size.
        let h = 0.05;
        let at = |f: &dyn Fn(f64, f64) -> f64, x0: f64, y0: f64| {
            ndarray::Array2::from_shape_fn((3, 3), |(i, j)| {
                1500.0 + f(x0 + (j as f64 - 1.0) * h, y0 - (i as f64 - 1.0) * h)
            })
        };
        let bowl = at(&|x, y| (x * x + y * y) / 200.0, 30.0, 40.0);
        let got: Vec<f64> = layers(&bowl, h, 1500.0)
            .iter()
            .map(|a| a[[0, 0]] as f64)
            .collect();
        let want = [-0.0071554, -0.0089443, -0.0200, -0.0080498, 6.4e-5];
        for (g, w) in got.iter().zip(want) {
            assert_relative_eq!(*g, w, epsilon = 2e-7);
        }
        let r0 = 37.0;
        let cap = at(&|x, y| (r0 * r0 - x * x - y * y).sqrt(), 3.0, 4.0);
        let got: Vec<f64> = layers(&cap, h, 1500.0)
            .iter()
            .map(|a| a[[0, 0]] as f64)
            .collect();
        let want = [1.0 / r0, 1.0 / r0, 0.2, 1.0 / r0, 1.0 / (r0 * r0)];
        for (g, w) in got.iter().zip(want) {
            assert_relative_eq!(*g, w, epsilon = 1e-6);
        }
    }

    #[test]
    fn f64_dsm_curvature_error_is_the_truncation_error() {
        // Sphere cap R = 37 m at (3, 4) on 5 cm cells, 1500 m up. Truncation error of
        // Evans–Young: its formula on the exact f64 samples without the offset, minus the
        // closed form. An f64 DSM 1500 m up must show that error (up to f64 rounding at
        // 1500 m, ~0.4·2.3e-13/h² = 4e-11 1/m, and the f32 output's rounding), while the
        // same DSM stored as f32 adds the storage noise floor (0.408·u/h² = 2.0e-2 1/m
        // for r), far larger than the truncation error.
        use crate::terrain::derivatives::pqrst_3x3;
        use crate::terrain::precision::second_derivative_floor;
        use crate::terrain::{DsmSample, SlopeMethod};
        let (h, r0, x0, y0) = (0.05, 37.0, 3.0, 4.0);
        let f = |x: f64, y: f64| (r0 * r0 - x * x - y * y).sqrt();
        let mut w = [0.0; 9];
        for (k, v) in w.iter_mut().enumerate() {
            *v = f(x0 + (k % 3) as f64 * h - h, y0 - (k / 3) as f64 * h + h);
        }
        let d = pqrst_3x3(&w, h, h, SlopeMethod::EvansYoung).unwrap();
        let truncation = mean(&d) - 1.0 / r0;
        let z64 = ndarray::Array2::from_shape_fn((3, 3), |(i, j)| 1500.0 + w[i * 3 + j]);
        let got64 = layers(&z64, h, 1500.0)[3][[0, 0]] as f64 - 1.0 / r0;
        let out_ulp = (1.0f32 / 37.0).to_bits();
        let out_ulp = (f32::from_bits(out_ulp + 1) - f32::from_bits(out_ulp)) as f64;
        assert!(
            (got64 - truncation).abs() <= 4e-11 + out_ulp,
            "f64 path {got64:e} vs truncation {truncation:e}"
        );
        let z32 = z64.mapv(|v| v as f32);
        let got32 = layers(&z32, h, 1500.0)[3][[0, 0]] as f64 - 1.0 / r0;
        let floor = second_derivative_floor(
            SlopeMethod::EvansYoung,
            None,
            <f32 as DsmSample>::spacing_at(1500.0),
            h,
            h,
        );
        assert!(
            got32.abs() > 10.0 * truncation.abs(),
            "{got32:e} {truncation:e}"
        );
        assert!(got32.abs() < 4.0 * floor, "{got32:e} vs floor {floor:e}");
    }
}

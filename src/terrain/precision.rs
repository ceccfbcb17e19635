//! The noise floor that a DSM's storage precision puts on curvature.
//!
//! A stored elevation is the true one rounded to the storage type's spacing u at that
//! elevation (f32: u = 2⁻²³·2^⌊log2 |z|⌋, 1.2·10⁻⁴ m at 1500 m; f64: 2.3·10⁻¹³ m there).
//! Rounding to nearest leaves an error uniform in ±u/2, of standard deviation σ = u/√12
//! (common practice). Every second derivative is a weighted sum of elevations divided by
//! h², so it carries a noise of standard deviation σ·√(Σw²)/h² whatever the terrain:
//! - Evans–Young (and the r, t that Horn sets carry): r = (…)/(3h²) with Σw² = 18/9 = 2,
//!   floor √2·σ/h² = 0.408·u/h²;
//! - Zevenbergen–Thorne: r = (z4 − 2z5 + z6)/h², Σw² = 6, floor √6·σ/h² = 0.707·u/h²;
//! - the n x n quadratic fit: r = 2A/h², floor 2σ/(√qx·h²), qx = Σ(i² − mean i²)² over
//!   the window (qx = 2 for n = 3, so the same as Evans–Young).
//!
//! So the floor is "about ulp(z)/h²" with the estimator's factor above, and it grows with
//! the site's elevation and falls with the square of the cell size. [`second_derivative_floor`]
//! gives it in 1/m for one band; the stack records it beside each curvature band and warns
//! when it is a large share of the band's spread. On a surface with elevation noise larger
//! than u/√12 (any photogrammetric DSM) the real noise is larger still: this is a floor.

use super::quadratic_fit::fit_half_widths;
use super::SlopeMethod;

/// Share of a curvature band's standard deviation above which the storage floor earns a
/// warning: 0.1 (common practice: a tenth of the spread is where noise starts to show).
pub const WARN_SHARE: f64 = 0.1;

/// Standard deviation (1/m) of the estimator's second derivative r (and t) caused by
/// rounding every elevation to a spacing of `spacing_m` metres, for `method` at cell
/// sizes `hx`, `hy` metres (the largest of the x and y figures); `scale_m` is the fit
/// radius of [`SlopeMethod::Quadratic`].
pub fn second_derivative_floor(
    method: SlopeMethod,
    scale_m: Option<f64>,
    spacing_m: f64,
    hx: f64,
    hy: f64,
) -> f64 {
    let sigma = spacing_m / 12f64.sqrt();
    let h2 = hx.min(hy).powi(2);
    match (method, scale_m) {
        (SlopeMethod::ZevenbergenThorne, _) => 6f64.sqrt() * sigma / h2,
        (SlopeMethod::Quadratic, Some(r)) => {
            let (kx, ky) = fit_half_widths(r, hx, hy);
            let q = |k: usize, other: usize| {
                let n = (2 * k + 1) as f64;
                let (s2, s4): (f64, f64) = (-(k as i64)..=k as i64)
                    .map(|i| ((i * i) as f64, (i * i * i * i) as f64))
                    .fold((0.0, 0.0), |a, b| (a.0 + b.0, a.1 + b.1));
                (2 * other + 1) as f64 * (s4 - s2 * s2 / n)
            };
            let fx = 2.0 * sigma / (q(kx, ky).sqrt() * hx * hx);
            let fy = 2.0 * sigma / (q(ky, kx).sqrt() * hy * hy);
            fx.max(fy)
        }
        _ => 2f64.sqrt() * sigma / h2,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::grid::CellSizes;
    use crate::terrain::{compute, DsmSample, Quantity, TerrainFeature, TerrainParams};
    use approx::assert_relative_eq;
    use ndarray::Array2;

    #[test]
    fn f32_spacing_and_floor_match_ulp_over_h_squared() {
        // f32 spacing at 1500 m is 2^(10 − 23) = 2⁻¹³ m (IEEE 754 binary32: 1500 lies in
        // [1024, 2048)); the Evans–Young floor is √2/√12 = 0.408 times ulp(z)/h², the
        // Zevenbergen–Thorne floor √6/√12 = 0.707 times (sums of squared weights).
        let u = <f32 as DsmSample>::spacing_at(1500.0);
        assert_eq!(u, 2f64.powi(-13));
        assert_eq!(<f64 as DsmSample>::spacing_at(1500.0), 2f64.powi(10 - 52));
        let h = 0.05;
        let ey = second_derivative_floor(SlopeMethod::EvansYoung, None, u, h, h);
        assert_relative_eq!(ey / (u / (h * h)), 0.408248, epsilon = 1e-6);
        let zt = second_derivative_floor(SlopeMethod::ZevenbergenThorne, None, u, h, h);
        assert_relative_eq!(zt / (u / (h * h)), (0.5f64).sqrt(), epsilon = 1e-12);
        // The 3x3 fit is Evans–Young (qx = 2); a 5x5 fit averages more cells.
        let q3 = second_derivative_floor(SlopeMethod::Quadratic, Some(h), u, h, h);
        assert_relative_eq!(q3, ey, epsilon = 1e-12 * ey);
        let q5 = second_derivative_floor(SlopeMethod::Quadratic, Some(2.0 * h), u, h, h);
        assert!(q5 < ey / 4.0, "{q5} vs {ey}");
    }

    #[test]
    fn f32_noise_floor_matches_rounding_noise_on_a_high_plane() {
        // Monte Carlo check of the floor: a tilted plane 1500 m up on 5 cm cells, with a
        // sub-spacing jitter so that the f32 rounding errors of neighbours are independent
        // (as on a real DSM), stored once as f64 and once as f32. The difference of their
        // mean curvatures is the rounding noise alone. For Evans–Young r and t are
        // uncorrelated (their weights are orthogonal), so on a gentle plane
        // std(ΔH) = std(Δr)/√2: the measured figure must match the floor within 10 %.
        use crate::terrain::test_support::SplitMix64;
        let (n, h) = (400usize, 0.05);
        let u = <f32 as DsmSample>::spacing_at(1500.0);
        let mut rng = SplitMix64::new(3);
        let z64 = Array2::from_shape_fn((n, n), |(i, j)| {
            1500.0 + 0.0123 * (j as f64 * h) - 0.0071 * (i as f64 * h) + 3.0 * u * rng.next_f64()
        });
        let z32 = z64.mapv(|v| v as f32);
        let feats = [TerrainFeature::derivative(
            Quantity::MeanCurvature,
            SlopeMethod::EvansYoung,
            None,
        )];
        let cells = CellSizes::uniform(h, h, n);
        let p = TerrainParams::default();
        let a = compute(&feats, z32.view(), &cells, 1, 1500.0, &p).remove(0);
        let b = compute(&feats, z64.view(), &cells, 1, 1500.0, &p).remove(0);
        let d: Vec<f64> = a
            .iter()
            .zip(b.iter())
            .map(|(x, y)| *x as f64 - *y as f64)
            .collect();
        let m = d.iter().sum::<f64>() / d.len() as f64;
        let sd = (d.iter().map(|x| (x - m).powi(2)).sum::<f64>() / d.len() as f64).sqrt();
        let floor = second_derivative_floor(SlopeMethod::EvansYoung, None, u, h, h);
        let ratio = sd * 2f64.sqrt() / floor;
        assert!((0.9..1.1).contains(&ratio), "measured/floor = {ratio}");
    }
}

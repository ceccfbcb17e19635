//! Curvatures of the land surface from partial derivatives p, q, r, s, t.
//!
//! Florinsky 2016 (Digital Terrain Analysis in Soil Science and Geology, 2nd ed.) and
//! Minár et al. 2020 (Earth-Science Reviews 211, 103414), citations from memory, with the
//! sign convention of METHODS.md: convex (a dome) is positive. Units 1/m (Gaussian 1/m²).
//! With g = p² + q² and w = 1 + g:
//! - profile kn = −(p²r + 2pqs + q²t) / (g·w^(3/2))
//! - tangential kt = −(q²r − 2pqs + p²t) / (g·w^(1/2))
//! - plan kc = −(q²r − 2pqs + p²t) / g^(3/2)
//! - mean H = −((1 + q²)r − 2pqs + (1 + p²)t) / (2w^(3/2))
//! - Gaussian K = (rt − s²) / w²
//!
//! kn, kt and kc need a slope direction: where g = 0 exactly they are NaN (no direction,
//! so no curvature along it). H and K are defined everywhere. Pointwise, O(1) per cell.

use super::derivatives::Pqrst;

/// `k`, or NaN where the slope has no direction (g = p² + q² = 0). Written as a select so
/// row loops stay branch-free (and vectorise).
#[inline(always)]
fn undirected_nan(g: f64, k: f64) -> f64 {
    super::arctan::select(g == 0.0, f64::NAN, k)
}

/// Profile curvature kn (1/m): normal curvature along the slope line; NaN where g = 0.
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
        // METHODS.md worked: R = 37 m at (3, 4): kn = kt = H = 1/R = 0.027027, K = 1/R²,
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
        // METHODS.md worked: bowl z = (x² + y²)/(2R), R = 100 m, at (30, 40):
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
        // METHODS.md worked: z = 100·exp(−ρ²/(2·50²)) at (50, 0): kn = 0, kt = 0.0154323,
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
}

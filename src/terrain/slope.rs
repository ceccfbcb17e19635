//! Slope, aspect, northness and eastness from first derivatives p = ∂z/∂x, q = ∂z/∂y.
//!
//! - slope = atan(√(p² + q²)), degrees, 0 on a flat cell (the gradient-magnitude form of
//!   Horn 1981 and Zevenbergen & Thorne 1987; formulas as in docs/methods.md).
//! - aspect = the downslope direction, degrees clockwise from north in [0, 360):
//!   atan2(−p, −q) mod 360. NaN on a flat cell (p = q = 0).
//! - northness = cos(aspect), eastness = sin(aspect), both 0 on a flat cell.
//!
//! x points east and y north; a plane rising to the north-east faces (drains) south-west.
//! Pointwise, O(1) per cell; NaN derivatives give NaN. Arctangents come from
//! [`super::arctan`] (a polynomial of our own, within 2 ulp of libm, the same bits on every
//! machine), and the functions are branch-free so row loops vectorise.

use super::arctan::{self, select};
use super::pqrst::Pqrst;

/// Slope angle in degrees, atan(√(p² + q²)).
///
/// On the plane z = 0.3x + 0.4y (p = 0.3, q = 0.4) the gradient is 0.5, so the slope is
/// atan(0.5) = 26.565° (closed form):
///
/// ```
/// use terrastack::terrain::pqrst::Pqrst;
/// use terrastack::terrain::slope::slope_deg;
///
/// let plane = Pqrst { p: 0.3, q: 0.4, r: 0.0, s: 0.0, t: 0.0 };
/// assert!((slope_deg(&plane) - 0.5f64.atan().to_degrees()).abs() < 1e-12);
/// ```
#[inline]
pub fn slope_deg(d: &Pqrst) -> f64 {
    arctan::atan((d.p * d.p + d.q * d.q).sqrt()).to_degrees()
}

/// Aspect in degrees clockwise from north, the direction of steepest descent; NaN when
/// the cell is flat (p = q = 0) or the derivatives are missing.
///
/// The plane z = 0.3x + 0.4y rises to the north-east, so it drains south-west:
/// 180° + atan(0.3/0.4) = 216.87° (closed form); northness = −0.4/0.5, eastness = −0.3/0.5.
///
/// ```
/// use terrastack::terrain::pqrst::Pqrst;
/// use terrastack::terrain::slope::{aspect_deg, eastness, northness};
///
/// let plane = Pqrst { p: 0.3, q: 0.4, r: 0.0, s: 0.0, t: 0.0 };
/// let expected = 180.0 + (0.3f64 / 0.4).atan().to_degrees();
/// assert!((aspect_deg(&plane) - expected).abs() < 1e-12);
/// assert!((northness(&plane) + 0.8).abs() < 1e-15);
/// assert!((eastness(&plane) + 0.6).abs() < 1e-15);
/// let flat = Pqrst { p: 0.0, q: 0.0, r: 0.0, s: 0.0, t: 0.0 };
/// assert!(aspect_deg(&flat).is_nan());
/// ```
#[inline]
pub fn aspect_deg(d: &Pqrst) -> f64 {
    let a = arctan::atan2(-d.p, -d.q).to_degrees();
    let a = select(a < 0.0, a + 360.0, a);
    let a = select(a >= 360.0, a - 360.0, a);
    select(d.p == 0.0 && d.q == 0.0, f64::NAN, a)
}

/// cos(aspect) = −q/√(p² + q²): +1 facing north, −1 facing south, 0 when flat.
#[inline]
pub fn northness(d: &Pqrst) -> f64 {
    let g = (d.p * d.p + d.q * d.q).sqrt();
    select(g == 0.0, 0.0, -d.q / g)
}

/// sin(aspect) = −p/√(p² + q²): +1 facing east, −1 facing west, 0 when flat.
#[inline]
pub fn eastness(d: &Pqrst) -> f64 {
    let g = (d.p * d.p + d.q * d.q).sqrt();
    select(g == 0.0, 0.0, -d.p / g)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::grid::CellSizes;
    use crate::terrain::test_support::sample;
    use crate::terrain::{compute, Quantity, SlopeMethod, TerrainFeature, TerrainParams};
    use approx::assert_relative_eq;

    fn pq(p: f64, q: f64) -> Pqrst {
        Pqrst {
            p,
            q,
            r: 0.0,
            s: 0.0,
            t: 0.0,
        }
    }

    #[test]
    fn worked_plane() {
        // docs/methods.md worked value: z = 0.3x + 0.4y has slope atan(0.5) = 26.5651° and
        // aspect 216.8699° (downhill to the south-west).
        let d = pq(0.3, 0.4);
        assert_relative_eq!(slope_deg(&d), 26.5651, epsilon = 1e-4);
        assert_relative_eq!(aspect_deg(&d), 216.8699, epsilon = 1e-4);
        assert_relative_eq!(
            northness(&d),
            (216.8699f64).to_radians().cos(),
            epsilon = 1e-6
        );
        assert_relative_eq!(
            eastness(&d),
            (216.8699f64).to_radians().sin(),
            epsilon = 1e-6
        );
    }

    #[test]
    fn cardinal_directions() {
        // Closed form: rising to the east (p > 0) drains west, 270°; rising to the north
        // drains south, 180°; falling to the north drains north, 0°; falling east, 90°.
        assert_relative_eq!(aspect_deg(&pq(1.0, 0.0)), 270.0, epsilon = 1e-12);
        assert_relative_eq!(aspect_deg(&pq(0.0, 1.0)), 180.0, epsilon = 1e-12);
        assert_relative_eq!(aspect_deg(&pq(0.0, -1.0)), 0.0, epsilon = 1e-12);
        assert_relative_eq!(aspect_deg(&pq(-1.0, 0.0)), 90.0, epsilon = 1e-12);
        assert_relative_eq!(slope_deg(&pq(1.0, 0.0)), 45.0, epsilon = 1e-12);
    }

    #[test]
    fn flat_rule() {
        let d = pq(0.0, 0.0);
        assert_eq!(slope_deg(&d), 0.0);
        assert!(aspect_deg(&d).is_nan());
        assert_eq!(northness(&d), 0.0);
        assert_eq!(eastness(&d), 0.0);
    }

    #[test]
    fn worked_plane_through_compute_on_a_raster() {
        // The same worked plane sampled on a raster with unequal cell sizes.
        let z = sample(7, 7, 0.5, 2.0, |x, y| 0.3 * x + 0.4 * y + 50.0);
        for m in [
            SlopeMethod::Horn,
            SlopeMethod::ZevenbergenThorne,
            SlopeMethod::EvansYoung,
        ] {
            let f = [
                TerrainFeature::derivative(Quantity::Slope, m, None),
                TerrainFeature::derivative(Quantity::Aspect, m, None),
            ];
            let out = compute(
                &f,
                z.view(),
                &CellSizes::uniform(0.5, 2.0, 7),
                1,
                0.0,
                &TerrainParams::default(),
            );
            for v in out[0].iter() {
                assert_relative_eq!(*v as f64, 26.5651, epsilon = 2e-3);
            }
            for v in out[1].iter() {
                assert_relative_eq!(*v as f64, 216.8699, epsilon = 2e-3);
            }
        }
    }
}

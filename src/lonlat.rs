//! WGS84 longitude/latitude of grid coordinates, for catalogue footprints (STAC Items).
//!
//! Without GDAL, the CRSs the default build classifies ([`Crs::from_epsg`]) are inverted in
//! closed form or by published series:
//! - UTM on WGS84 (EPSG:326xx, 327xx), ETRS89 (25828–25838) and NAD83 (26901–26923):
//!   Krüger's series to sixth order in the third flattening n, as given by Karney (2011),
//!   "Transverse Mercator with an accuracy of a few nanometers", J. Geodesy 85, 475–485,
//!   doi:10.1007/s00190-011-0445-3 (eqs. 11, 15, 36 and the Newton solution of §2 for
//!   latitude from conformal latitude); see docs/methods.md "Inverse projections".
//! - Pseudo-Mercator (3857) and World Mercator (3395): the inverses in [`crate::grid`].
//! - WGS84 geographic (4326) as it is.
//!
//! ETRS89 and NAD83 coordinates are reported as WGS84 without a datum shift. That is the
//! null transformation PROJ itself applies between these frames when no time-dependent
//! grid is asked for (EPSG:1149 for ETRS89, EPSG:1188 for NAD83, stated accuracy 1 m and
//! 4 m; from memory), and it is far inside what a catalogue footprint needs. Any other CRS
//! is refused by the default build (the footprint would be wrong); with the `gdal` feature
//! every CRS is transformed through GDAL's OSR (PROJ).

use crate::error::{Error, Result};
use crate::grid::{Crs, CrsKind, Grid, WGS84_A, WGS84_INV_F};

/// GRS 1980 inverse flattening (EPSG:7019), the ellipsoid of ETRS89 and NAD83.
const GRS80_INV_F: f64 = 298.257_222_101;

/// UTM scale factor on the central meridian.
const UTM_K0: f64 = 0.9996;

/// A transverse Mercator projection on an ellipsoid of semi-major axis `a` (metres) and
/// flattening `f`, with scale `k0` on central meridian `lon0` (degrees), false easting
/// `fe` and false northing `fn_` (metres).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct TransverseMercator {
    pub a: f64,
    pub f: f64,
    pub k0: f64,
    pub lon0: f64,
    pub fe: f64,
    pub fn_: f64,
}

impl TransverseMercator {
    /// UTM zone `zone` (1–60) of the northern (`south` false) or southern hemisphere.
    pub fn utm(zone: u32, south: bool, inv_f: f64) -> TransverseMercator {
        TransverseMercator {
            a: WGS84_A,
            f: 1.0 / inv_f,
            k0: UTM_K0,
            lon0: zone as f64 * 6.0 - 183.0,
            fe: 500_000.0,
            fn_: if south { 10_000_000.0 } else { 0.0 },
        }
    }

    /// Rectifying radius A = a/(1+n)·(1 + n²/4 + n⁴/64 + n⁶/256) (Karney 2011, eq. 14).
    fn rectifying_radius(&self) -> f64 {
        let n = self.f / (2.0 - self.f);
        let n2 = n * n;
        self.a / (1.0 + n) * (1.0 + n2 / 4.0 + n2 * n2 / 64.0 + n2 * n2 * n2 / 256.0)
    }

    /// Coefficients β₁…β₆ of the inverse series (Karney 2011, eq. 36, to order n⁶).
    fn beta(&self) -> [f64; 6] {
        let n = self.f / (2.0 - self.f);
        let p = [n, n * n, n.powi(3), n.powi(4), n.powi(5), n.powi(6)];
        [
            p[0] / 2.0 - 2.0 / 3.0 * p[1] + 37.0 / 96.0 * p[2]
                - 1.0 / 360.0 * p[3]
                - 81.0 / 512.0 * p[4]
                + 96199.0 / 604800.0 * p[5],
            1.0 / 48.0 * p[1] + 1.0 / 15.0 * p[2] - 437.0 / 1440.0 * p[3] + 46.0 / 105.0 * p[4]
                - 1118711.0 / 3870720.0 * p[5],
            17.0 / 480.0 * p[2] - 37.0 / 840.0 * p[3] - 209.0 / 4480.0 * p[4]
                + 5569.0 / 90720.0 * p[5],
            4397.0 / 161280.0 * p[3] - 11.0 / 504.0 * p[4] - 830251.0 / 7257600.0 * p[5],
            4583.0 / 161280.0 * p[4] - 108847.0 / 3991680.0 * p[5],
            20648693.0 / 638668800.0 * p[5],
        ]
    }

    /// Longitude and latitude (degrees) of easting `x`, northing `y` (metres).
    pub fn inverse(&self, x: f64, y: f64) -> (f64, f64) {
        let big_a = self.rectifying_radius();
        let xi = (y - self.fn_) / (self.k0 * big_a);
        let eta = (x - self.fe) / (self.k0 * big_a);
        // ξ' = ξ − Σ βj sin 2jξ cosh 2jη, η' = η − Σ βj cos 2jξ sinh 2jη (eq. 11 inverted).
        let (mut xi1, mut eta1) = (xi, eta);
        for (j, b) in self.beta().iter().enumerate() {
            let k = 2.0 * (j + 1) as f64;
            xi1 -= b * (k * xi).sin() * (k * eta).cosh();
            eta1 -= b * (k * xi).cos() * (k * eta).sinh();
        }
        // Conformal latitude and longitude on the sphere (eqs. 9–10 inverted).
        let tau1 = xi1.sin() / (eta1.sinh().hypot(xi1.cos()));
        let lam = eta1.sinh().atan2(xi1.cos());
        let tau = tau_of_conformal(tau1, self.f);
        (self.lon0 + lam.to_degrees(), tau.atan().to_degrees())
    }
}

/// τ = tan φ from the conformal τ' = tan χ by Newton's method on
/// τ'(τ) = τ√(1+σ²) − σ√(1+τ²), σ = sinh(e·atanh(eτ/√(1+τ²))) (Karney 2011, eqs. 7–9 and
/// the derivative dτ'/dτ = (1−e²)√(1+τ'²)√(1+τ²)/(1+(1−e²)τ²)).
fn tau_of_conformal(tau1: f64, f: f64) -> f64 {
    let e2 = f * (2.0 - f);
    let e = e2.sqrt();
    let mut tau = tau1;
    for _ in 0..10 {
        let s1 = (1.0 + tau * tau).sqrt();
        let sigma = (e * (e * tau / s1).atanh()).sinh();
        let taup = tau * (1.0 + sigma * sigma).sqrt() - sigma * s1;
        let d = (1.0 - e2) * (1.0 + taup * taup).sqrt() * s1 / (1.0 + (1.0 - e2) * tau * tau);
        let step = (tau1 - taup) / d;
        tau += step;
        if step.abs() <= 1e-15 * tau.abs().max(1.0) {
            break;
        }
    }
    tau
}

/// A map from grid coordinates to WGS84 longitude/latitude in degrees.
type Inverse = Box<dyn Fn(f64, f64) -> (f64, f64)>;

/// A grid's outline in WGS84 and its bbox (west, south, east, north).
pub type Footprint = (Vec<(f64, f64)>, [f64; 4]);

/// How a CRS is inverted to WGS84 lon/lat without GDAL, or `None` when it cannot be.
fn inverse_without_gdal(crs: &Crs) -> Option<Inverse> {
    if crs.kind == CrsKind::Unknown {
        return None;
    }
    let code = crs.epsg?;
    let tm = match code {
        4326 | 4258 | 4269 => return Some(Box::new(|x, y| (x, y))),
        3857 => {
            return Some(Box::new(|x, y| {
                (
                    (x / WGS84_A).to_degrees(),
                    crate::grid::pseudo_mercator_latitude(y),
                )
            }))
        }
        3395 => {
            return Some(Box::new(|x, y| {
                (
                    (x / WGS84_A).to_degrees(),
                    crate::grid::world_mercator_latitude(y),
                )
            }))
        }
        32601..=32660 => TransverseMercator::utm(code - 32600, false, WGS84_INV_F),
        32701..=32760 => TransverseMercator::utm(code - 32700, true, WGS84_INV_F),
        25828..=25838 => TransverseMercator::utm(code - 25800, false, GRS80_INV_F),
        26901..=26923 => TransverseMercator::utm(code - 26900, false, GRS80_INV_F),
        _ => return None,
    };
    Some(Box::new(move |x, y| tm.inverse(x, y)))
}

/// Transform `points` (x, y in `crs`) into WGS84 longitude/latitude in degrees, in place.
/// The default build inverts the CRSs listed in the module docs and refuses others with
/// an error naming the CRS and the `gdal` feature; with the feature GDAL transforms any
/// CRS it knows.
pub fn to_wgs84(crs: &Crs, points: &mut [(f64, f64)]) -> Result<()> {
    if let Some(inv) = inverse_without_gdal(crs) {
        for p in points.iter_mut() {
            *p = inv(p.0, p.1);
        }
        return Ok(());
    }
    #[cfg(feature = "gdal")]
    if crs.kind != CrsKind::Unknown {
        return crate::raster::gdal::transform_points(crs, &Crs::from_epsg(4326), points);
    }
    Err(Error::usage(format!(
        "this build cannot transform coordinates in {} to WGS84 longitude/latitude",
        crs.label()
    ))
    .with_fix(
        "build terrastack with `--features gdal` (GDAL transforms every CRS), or use WGS84, \
         UTM (WGS84, ETRS89, NAD83), EPSG:3857 or EPSG:3395",
    ))
}

/// Points along the outline of `grid` (its outer cell edges), `per_side` segments on
/// each side, counter-clockwise from the south-west corner, closed (the first point
/// repeated last), in the grid's CRS.
pub fn outline(grid: &Grid, per_side: usize) -> Vec<(f64, f64)> {
    let (x0, y0, x1, y1) = grid.bounds();
    let n = per_side.max(1);
    let t = |i: usize| i as f64 / n as f64;
    let mut pts = Vec::with_capacity(4 * n + 1);
    for i in 0..n {
        pts.push((x0 + (x1 - x0) * t(i), y0));
    }
    for i in 0..n {
        pts.push((x1, y0 + (y1 - y0) * t(i)));
    }
    for i in 0..n {
        pts.push((x1 - (x1 - x0) * t(i), y1));
    }
    for i in 0..n {
        pts.push((x0, y1 - (y1 - y0) * t(i)));
    }
    pts.push(pts[0]);
    pts
}

/// The footprint of `grid` in WGS84: the outline densified with `per_side` segments a
/// side, transformed point by point, and its bounding box (west, south, east, north)
/// taken over every densified point.
pub fn footprint(grid: &Grid, per_side: usize) -> Result<Footprint> {
    let mut pts = outline(grid, per_side);
    to_wgs84(&grid.crs, &mut pts)?;
    let mut bbox = [
        f64::INFINITY,
        f64::INFINITY,
        f64::NEG_INFINITY,
        f64::NEG_INFINITY,
    ];
    for &(x, y) in &pts {
        if !(x.is_finite() && y.is_finite()) {
            return Err(Error::usage(format!(
                "the grid's outline has no WGS84 position in {}",
                grid.crs.label()
            ))
            .with_fix("check the stack's CRS and transform"));
        }
        bbox = [
            bbox[0].min(x),
            bbox[1].min(y),
            bbox[2].max(x),
            bbox[3].max(y),
        ];
    }
    Ok((pts, bbox))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Meridian arc length from the equator to latitude φ on an ellipsoid, by composite
    /// Simpson quadrature of M(φ) = a(1−e²)/(1−e² sin²φ)^{3/2} (the meridional radius of
    /// curvature, any geodesy text), independent of the Krüger series.
    fn meridian_arc(a: f64, f: f64, phi_deg: f64) -> f64 {
        let e2 = f * (2.0 - f);
        let m = |p: f64| a * (1.0 - e2) / (1.0 - e2 * p.sin().powi(2)).powf(1.5);
        let n = 20_000;
        let h = phi_deg.to_radians() / n as f64;
        let mut s = m(0.0) + m(phi_deg.to_radians());
        for i in 1..n {
            s += m(i as f64 * h) * if i % 2 == 1 { 4.0 } else { 2.0 };
        }
        s * h / 3.0
    }

    #[test]
    fn central_meridian_gives_latitude_of_the_meridian_arc() {
        // On the central meridian the transverse Mercator northing is k0 times the
        // meridian arc (closed form of the projection's definition), so the inverse must
        // return that latitude and the central meridian's longitude.
        let tm = TransverseMercator::utm(33, false, WGS84_INV_F);
        for phi in [0.5, 10.0, 45.0, 60.0, 80.0] {
            let y = tm.k0 * meridian_arc(tm.a, tm.f, phi);
            let (lon, lat) = tm.inverse(500_000.0, y);
            assert!((lat - phi).abs() < 1e-9, "{phi}: {lat}");
            assert!((lon - 15.0).abs() < 1e-12, "{lon}");
        }
        // Southern hemisphere: false northing 10 000 km.
        let tm = TransverseMercator::utm(56, true, WGS84_INV_F);
        let y = 10_000_000.0 - tm.k0 * meridian_arc(tm.a, tm.f, 33.5);
        let (lon, lat) = tm.inverse(500_000.0, y);
        assert!((lat + 33.5).abs() < 1e-9 && (lon - 153.0).abs() < 1e-12);
    }

    #[test]
    fn equator_maps_to_the_equator_and_symmetry() {
        // The equator is a straight line of the projection (northing = false northing)
        // and the projection is symmetric about the central meridian and the equator.
        let tm = TransverseMercator::utm(31, false, WGS84_INV_F);
        let (lon, lat) = tm.inverse(700_000.0, 0.0);
        assert!(lat.abs() < 1e-12 && lon > 3.0 && lon < 6.0, "{lon} {lat}");
        let (lon_w, lat_w) = tm.inverse(300_000.0, 5_000_000.0);
        let (lon_e, lat_e) = tm.inverse(700_000.0, 5_000_000.0);
        assert!((lat_w - lat_e).abs() < 1e-12);
        assert!(((lon_w - 3.0) + (lon_e - 3.0)).abs() < 1e-12);
    }

    #[test]
    fn equatorial_easting_closed_form() {
        // On the equator (φ = 0) the forward mapping has a closed form: τ = τ' = 0, so
        // ξ' = 0 and η' = asinh(tan λ) = atanh(sin λ) (Karney 2011, eq. 10), and
        // E − FE = k0·A·(η' + Σ αj sinh 2jη') (eq. 11 with ξ' = 0). The forward
        // coefficients αj (eq. 35; the values to order n³ from memory, the n⁴ terms below
        // 1e-11 of η here) are a separate series from the inverse's βj, so inverting E
        // must give back λ.
        let tm = TransverseMercator::utm(31, false, WGS84_INV_F);
        let n = tm.f / (2.0 - tm.f);
        let alpha = [
            n / 2.0 - 2.0 / 3.0 * n * n + 5.0 / 16.0 * n.powi(3),
            13.0 / 48.0 * n * n - 3.0 / 5.0 * n.powi(3),
            61.0 / 240.0 * n.powi(3),
        ];
        let lam = 2.5f64.to_radians();
        let eta1 = lam.sin().atanh();
        let mut eta = eta1;
        for (j, a) in alpha.iter().enumerate() {
            eta += a * (2.0 * (j + 1) as f64 * eta1).sinh();
        }
        let x = tm.fe + tm.k0 * tm.rectifying_radius() * eta;
        let (lon, lat) = tm.inverse(x, 0.0);
        assert!(lat.abs() < 1e-12);
        assert!((lon - 5.5).abs() < 1e-9, "{lon}");
    }

    #[test]
    fn crs_support_and_refusal() {
        let mut p = [(500_000.0, 0.0)];
        to_wgs84(&Crs::from_epsg(32633), &mut p).unwrap();
        assert!((p[0].0 - 15.0).abs() < 1e-12 && p[0].1.abs() < 1e-12);
        let mut p = [(0.0, 0.0)];
        to_wgs84(&Crs::from_epsg(3857), &mut p).unwrap();
        assert_eq!(p[0], (0.0, 0.0));
        let mut p = [(12.5, 48.0)];
        to_wgs84(&Crs::from_epsg(4326), &mut p).unwrap();
        assert_eq!(p[0], (12.5, 48.0));
        #[cfg(not(feature = "gdal"))]
        {
            let e = to_wgs84(&Crs::from_epsg(2056), &mut p)
                .unwrap_err()
                .to_string();
            assert!(
                e.contains("EPSG:2056") && e.contains("--features gdal"),
                "{e}"
            );
        }
        let e = to_wgs84(&Crs::none(), &mut p).unwrap_err().to_string();
        assert!(e.contains("unknown CRS"), "{e}");
    }

    #[test]
    fn outline_is_closed_and_counter_clockwise() {
        let grid = Grid::new(
            4,
            2,
            [100.0, 1.0, 0.0, 200.0, 0.0, -1.0],
            Crs::from_epsg(32633),
        )
        .unwrap();
        let o = outline(&grid, 2);
        assert_eq!(o.len(), 9);
        assert_eq!(o[0], (100.0, 198.0));
        assert_eq!(o[1], (102.0, 198.0));
        assert_eq!(o[2], (104.0, 198.0));
        assert_eq!(o[4], (104.0, 200.0));
        assert_eq!(o[8], o[0]);
        // Shoelace area > 0: counter-clockwise (RFC 7946 exterior rings).
        let area: f64 = o
            .windows(2)
            .map(|w| w[0].0 * w[1].1 - w[1].0 * w[0].1)
            .sum();
        assert!((area / 2.0 - 8.0).abs() < 1e-9);
    }
}

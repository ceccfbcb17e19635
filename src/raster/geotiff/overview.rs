//! Reduced-resolution images (overviews) of a tiled GeoTIFF: their sizes and how four
//! cells become one.
//!
//! Levels follow the Cloud Optimized GeoTIFF standard (OGC 21-026, requirement
//! "optimized_geotiff/number" and recommendation "size-and-numbers"): level k has cells
//! 2^k times the full resolution's, each level halves the previous one (rounding up, so
//! the last row and column of cells may cover less ground), and the last level is the first
//! that fits in one tile (TilesAcross = TilesDown = 1). A raster that fits in one tile has
//! no overview.
//!
//! Each cell of level k + 1 is made from the 2 x 2 cells of level k it covers; cells past
//! the raster's edge and nodata cells do not take part, and a cell with none left is
//! nodata. How the values are combined is chosen per band ([`OverviewResampling`]).

/// How the 2 x 2 cells of one level become a cell of the next.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum OverviewResampling {
    /// The arithmetic mean of the valid cells.
    Average,
    /// Angles in degrees clockwise from north (aspect): the mean direction of the valid
    /// cells, atan2(Σ sin θ, Σ cos θ) mapped to [0, 360) (Fisher 1993, "Statistical
    /// Analysis of Circular Data", §2.3.1, from memory). Where the directions cancel
    /// (mean resultant length below 1e-9), the cell is nodata: it has no mean direction.
    Circular,
    /// The first valid cell in reading order (upper left, upper right, lower left, lower
    /// right): values are kept as they are, for classes and date indices.
    Nearest,
}

impl OverviewResampling {
    /// A short name, for documents and messages.
    pub fn name(self) -> &'static str {
        match self {
            OverviewResampling::Average => "average",
            OverviewResampling::Circular => "circular mean",
            OverviewResampling::Nearest => "nearest",
        }
    }
}

/// Sizes (width, height) of the overview levels of a `width` x `height` raster in
/// `tile` x `tile` tiles, largest first (level 1 first); empty when the raster fits one tile.
pub fn level_sizes(width: usize, height: usize, tile: usize) -> Vec<(usize, usize)> {
    let mut out = Vec::new();
    let (mut w, mut h) = (width, height);
    while (w > tile || h > tile) && tile > 0 {
        w = w.div_ceil(2);
        h = h.div_ceil(2);
        out.push((w, h));
    }
    out
}

/// Combine up to four values (NaN = not valid) into one.
pub fn reduce(kind: OverviewResampling, v: &[f64]) -> f64 {
    match kind {
        OverviewResampling::Average => {
            let (mut sum, mut n) = (0.0, 0u32);
            for x in v.iter().filter(|x| !x.is_nan()) {
                sum += x;
                n += 1;
            }
            if n == 0 {
                f64::NAN
            } else {
                sum / n as f64
            }
        }
        OverviewResampling::Nearest => v.iter().copied().find(|x| !x.is_nan()).unwrap_or(f64::NAN),
        OverviewResampling::Circular => {
            let (mut s, mut c, mut n) = (0.0, 0.0, 0u32);
            for x in v.iter().filter(|x| x.is_finite()) {
                let (sin, cos) = sin_cos_degrees(*x);
                s += sin;
                c += cos;
                n += 1;
            }
            mean_direction(s, c, n)
        }
    }
}

/// The mean direction, in degrees clockwise from north in [0, 360), of `n` directions
/// whose sines sum to `s` and cosines to `c`, as [`OverviewResampling::Circular`] defines
/// it; NaN when `n` is 0 or they cancel.
pub fn mean_direction(s: f64, c: f64, n: u32) -> f64 {
    if n == 0 || (s * s + c * c).sqrt() < 1e-9 * n as f64 {
        return f64::NAN;
    }
    let mut deg = crate::terrain::arctan::atan2(s, c).to_degrees();
    if deg < 0.0 {
        deg += 360.0;
    }
    // 360 and a hair rounds to 360 in float32; it is the direction 0.
    if deg as f32 >= 360.0 {
        deg = 0.0;
    }
    deg
}

/// `sin_cos_degrees` of each of `deg` into `sin` and `cos` (NaN, NaN for values that are
/// not finite), the same bits as one at a time; vectorised with AVX2 where the CPU has it
/// (only the vector width changes: no fused multiply-add is enabled, and Rust never
/// contracts a·b + c).
pub fn sin_cos_degrees_many(deg: &[f64], sin: &mut [f64], cos: &mut [f64]) {
    #[cfg(target_arch = "x86_64")]
    if crate::terrain::derivatives::wide_vectors_available() {
        // SAFETY: the CPU reports AVX2.
        unsafe { sin_cos_many_avx2(deg, sin, cos) };
        return;
    }
    sin_cos_many_any(deg, sin, cos);
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
unsafe fn sin_cos_many_avx2(deg: &[f64], sin: &mut [f64], cos: &mut [f64]) {
    sin_cos_many_any(deg, sin, cos);
}

#[inline(always)]
fn sin_cos_many_any(deg: &[f64], sin: &mut [f64], cos: &mut [f64]) {
    let mut rare = false;
    for ((d, s), c) in deg.iter().zip(sin.iter_mut()).zip(cos.iter_mut()) {
        let inside = (0.0..360.0).contains(d);
        rare |= !inside;
        // Outside [0, 360) (NaN included) the angle 0 stands in, put right below.
        let (a, b) = sin_cos_in_turn(if inside { *d } else { 0.0 });
        *s = a;
        *c = b;
    }
    if rare {
        for ((d, s), c) in deg.iter().zip(sin.iter_mut()).zip(cos.iter_mut()) {
            if !(0.0..360.0).contains(d) {
                (*s, *c) = if d.is_finite() {
                    sin_cos_degrees(*d)
                } else {
                    (f64::NAN, f64::NAN)
                };
            }
        }
    }
}

/// (sin, cos) of an angle in degrees, the same on every machine (plain IEEE arithmetic,
/// no libm): the angle is reduced exactly to [0°, 45°] by quadrant and symmetry
/// (`%` and `90 − x` are exact in floating point), then the Taylor series of sin and cos
/// to degree 17 and 16 (truncation below 1e-18 on [0, π/4]).
pub fn sin_cos_degrees(deg: f64) -> (f64, f64) {
    // Aspects are already in [0, 360): no remainder to take (`%` is a slow library call).
    let mut d = if (0.0..360.0).contains(&deg) {
        deg
    } else {
        deg % 360.0
    };
    if d < 0.0 {
        d += 360.0;
    }
    // 360 − a hair plus 360 rounds to 360.
    if d >= 360.0 {
        d = 0.0;
    }
    sin_cos_in_turn(d)
}

/// (sin, cos) of `d` in [0, 360) degrees: the quadrant by comparison (d / 90 could round
/// up to the next whole number), and every choice as a selection, without branches, so
/// that loops over many angles vectorise (directions of a real surface come in no order
/// a branch predictor could learn).
#[inline(always)]
fn sin_cos_in_turn(d: f64) -> (f64, f64) {
    let (q1, q2, q3) = (d >= 90.0, d >= 180.0, d >= 270.0);
    let turn = if q3 {
        270.0
    } else if q2 {
        180.0
    } else if q1 {
        90.0
    } else {
        0.0
    };
    let r = d - turn; // [0, 90), exact
    let high = r > 45.0;
    let (s, c) = sin_cos_small(if high { 90.0 - r } else { r }.to_radians());
    let (s, c) = if high { (c, s) } else { (s, c) };
    // Quadrants 0..3: (s, c), (c, −s), (−s, −c), (−c, s); multiplying by ±1 is exact.
    let odd = q1 != q2 || q3;
    let (a, b) = if odd { (c, s) } else { (s, c) };
    let sin_sign = if q2 { -1.0 } else { 1.0 };
    let cos_sign = if q1 != q3 { -1.0 } else { 1.0 };
    (a * sin_sign, b * cos_sign)
}

/// (sin, cos) of `t` in [0, π/4] by the Taylor series, sin t = t Σ (−t²)^k / (2k+1)! and
/// cos t = Σ (−t²)^k / (2k)!, k = 0..=8, each polynomial in u = t² evaluated by Estrin's
/// scheme (pairs, then pairs of pairs: four dependent steps instead of Horner's nine).
#[inline(always)]
fn sin_cos_small(t: f64) -> (f64, f64) {
    let u = t * t;
    (t * estrin(&SIN_TERMS, u), estrin(&COS_TERMS, u))
}

/// Σ a_k u^k, k = 0..=8, by Estrin's scheme.
#[inline(always)]
fn estrin(a: &[f64; 9], u: f64) -> f64 {
    let u2 = u * u;
    let u4 = u2 * u2;
    let low = (a[0] + a[1] * u) + (a[2] + a[3] * u) * u2;
    let high = (a[4] + a[5] * u) + (a[6] + a[7] * u) * u2;
    (low + high * u4) + a[8] * (u4 * u4)
}

/// (−1)^k / (2k+1)!, k = 0..=8: the Taylor coefficients of sin t / t.
const SIN_TERMS: [f64; 9] = taylor_terms(1);
/// (−1)^k / (2k)!, k = 0..=8: the Taylor coefficients of cos t.
const COS_TERMS: [f64; 9] = taylor_terms(0);

/// (−1)^k / (2k + odd)! for k = 0..=8, the factorial multiplied up from 1 in f64 (exact
/// through 18!, which is below 2^53), computed when the program is compiled.
const fn taylor_terms(odd: u32) -> [f64; 9] {
    let mut out = [0.0; 9];
    let mut k = 0;
    while k < 9 {
        let n = 2 * k as u32 + odd;
        let mut f = 1.0;
        let mut j = 1;
        while j <= n {
            f *= j as f64;
            j += 1;
        }
        out[k] = if k % 2 == 0 { 1.0 / f } else { -1.0 / f };
        k += 1;
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn levels_halve_until_one_tile() {
        // 20000 cells in 512-cell tiles: 10000, 5000, 2500, 1250, 625, 313 (rounded up).
        let l = level_sizes(20_000, 1_000, 512);
        let w: Vec<usize> = l.iter().map(|s| s.0).collect();
        assert_eq!(w, vec![10_000, 5_000, 2_500, 1_250, 625, 313]);
        assert_eq!(l.last().unwrap().1, 16);
        assert!(level_sizes(512, 512, 512).is_empty());
        assert_eq!(level_sizes(513, 10, 512), vec![(257, 5)]);
    }

    #[test]
    fn averages_skip_nodata() {
        let nan = f64::NAN;
        assert_eq!(
            reduce(OverviewResampling::Average, &[1.0, 2.0, 3.0, 6.0]),
            3.0
        );
        assert_eq!(
            reduce(OverviewResampling::Average, &[1.0, nan, 3.0, nan]),
            2.0
        );
        assert!(reduce(OverviewResampling::Average, &[nan, nan]).is_nan());
        assert_eq!(reduce(OverviewResampling::Nearest, &[nan, 7.0, 3.0]), 7.0);
    }

    #[test]
    fn circular_mean_wraps_at_north() {
        // 359° and 1° are 2° apart across north: their mean direction is 0°, not 180°.
        let m = reduce(OverviewResampling::Circular, &[359.0, 1.0, f64::NAN]);
        assert!(m.min(360.0 - m) < 1e-9, "{m}");
        // 80° and 100° (no wrap): 90°; 350, 10, 20: 6.6° (atan2 of summed unit vectors,
        // worked by hand).
        let m = reduce(OverviewResampling::Circular, &[80.0, 100.0]);
        assert!((m - 90.0).abs() < 1e-9, "{m}");
        let m = reduce(OverviewResampling::Circular, &[350.0, 10.0, 20.0]);
        let (s, c) = (
            (350f64.to_radians()).sin() + 10f64.to_radians().sin() + 20f64.to_radians().sin(),
            (350f64.to_radians()).cos() + 10f64.to_radians().cos() + 20f64.to_radians().cos(),
        );
        assert!((m - s.atan2(c).to_degrees()).abs() < 1e-9, "{m}");
        // Opposite directions have no mean direction.
        assert!(reduce(OverviewResampling::Circular, &[0.0, 180.0]).is_nan());
    }

    #[test]
    fn sin_cos_match_the_platform() {
        // Reference: the platform's libm on the angle in radians (whose rounding to radians
        // itself errs by up to half an ulp of the angle: 4.4e-16 at 2π, 1.8e-15 at 6π).
        for i in -3600..=7200 {
            let d = i as f64 * 0.1 + 0.013;
            let (s, c) = sin_cos_degrees(d);
            let tol = if (0.0..360.0).contains(&d) {
                1e-15
            } else {
                4e-15
            };
            assert!((s - d.to_radians().sin()).abs() < tol, "{d}");
            assert!((c - d.to_radians().cos()).abs() < tol, "{d}");
        }
        assert_eq!(sin_cos_degrees(90.0), (1.0, 0.0));
        assert_eq!(sin_cos_degrees(0.0), (0.0, 1.0));
    }

    #[test]
    fn many_at_once_are_the_same_bits_as_one_at_a_time() {
        // Angles across every quadrant and octant boundary, their neighbours one ulp
        // away, values outside [0, 360) and non-finite ones.
        let mut deg: Vec<f64> = (0..7200).map(|i| i as f64 * 0.05 + 0.001).collect();
        for b in [0.0f64, 45.0, 90.0, 135.0, 180.0, 225.0, 270.0, 315.0, 360.0] {
            deg.extend([
                b,
                f64::from_bits(b.to_bits() + 1),
                f64::from_bits(b.to_bits().max(1) - 1),
            ]);
        }
        deg.extend([
            -0.0,
            -1.5,
            -725.25,
            720.0,
            1e6,
            f64::NAN,
            f64::INFINITY,
            -f64::INFINITY,
        ]);
        let (mut s, mut c) = (vec![0.0; deg.len()], vec![0.0; deg.len()]);
        sin_cos_degrees_many(&deg, &mut s, &mut c);
        for (i, d) in deg.iter().enumerate() {
            if d.is_finite() {
                let (es, ec) = sin_cos_degrees(*d);
                assert_eq!(
                    (s[i].to_bits(), c[i].to_bits()),
                    (es.to_bits(), ec.to_bits()),
                    "{d}"
                );
            } else {
                assert!(s[i].is_nan() && c[i].is_nan(), "{d}");
            }
        }
    }
}

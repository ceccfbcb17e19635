//! Deterministic pseudo-random numbers and smooth noise for the demo site.
//!
//! Everything the generator draws comes from SplitMix64 (Steele, Lea & Flood 2014,
//! "Fast splittable pseudorandom number generators", OOPSLA '14), either as a stream
//! ([`SplitMix64`]) or as a hash of integer coordinates ([`hash3`]). Smooth fields are
//! value noise on an integer lattice with quintic fade (Perlin 2002, "Improving noise",
//! SIGGRAPH) summed into fractional Brownian motion ([`fbm`]). The same inputs give the
//! same bits on every run and thread count: nothing here has state shared between cells.

use crate::random::GOLDEN_GAMMA;
pub use crate::random::{mix64, unit_f64, SplitMix64};

/// A hash of two signed integer coordinates and a seed, uniform over 64 bits.
pub fn hash3(a: i64, b: i64, seed: u64) -> u64 {
    let h = mix64(seed.wrapping_add(GOLDEN_GAMMA));
    let h = mix64(h ^ (a as u64).wrapping_mul(0xD1B5_4A32_D192_ED03));
    mix64(h ^ (b as u64).wrapping_mul(0xAEF1_7502_108E_F2D9))
}

/// A standard normal deviate for integer cell (`a`, `b`) under `seed`, by the Box–Muller
/// transform (Box & Muller 1958, Ann. Math. Statist. 29(2)) of two hashed uniforms.
pub fn gaussian_at(a: i64, b: i64, seed: u64) -> f64 {
    let h1 = hash3(a, b, seed);
    let h2 = mix64(h1 ^ GOLDEN_GAMMA);
    // 1 − u lies in (0, 1], so the logarithm is finite.
    let u1 = 1.0 - unit_f64(h1);
    let u2 = unit_f64(h2);
    (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()
}

/// Quintic fade 6t⁵ − 15t⁴ + 10t³ (Perlin 2002): C² continuous interpolation weight.
fn fade(t: f64) -> f64 {
    t * t * t * (t * (t * 6.0 - 15.0) + 10.0)
}

/// Value noise in [−1, 1] at (`x`, `y`) in lattice units: random values at integer
/// points, blended with the quintic fade. Equals the lattice value at integer points.
pub fn value_noise(x: f64, y: f64, seed: u64) -> f64 {
    let x0 = x.floor();
    let y0 = y.floor();
    let (ix, iy) = (x0 as i64, y0 as i64);
    let tx = fade(x - x0);
    let ty = fade(y - y0);
    let v = |i: i64, j: i64| 2.0 * unit_f64(hash3(i, j, seed)) - 1.0;
    let a = v(ix, iy) + tx * (v(ix + 1, iy) - v(ix, iy));
    let b = v(ix, iy + 1) + tx * (v(ix + 1, iy + 1) - v(ix, iy + 1));
    a + ty * (b - a)
}

/// Fractional Brownian motion: `octaves` layers of [`value_noise`], each at twice the
/// frequency and half the amplitude of the previous, divided by the summed amplitudes so
/// the result stays in [−1, 1]. `wavelength` is the first layer's lattice spacing in the
/// units of `x` and `y`.
pub fn fbm(x: f64, y: f64, wavelength: f64, octaves: u32, seed: u64) -> f64 {
    let mut sum = 0.0;
    let mut norm = 0.0;
    let mut amp = 1.0;
    let mut freq = 1.0 / wavelength;
    for k in 0..octaves {
        sum += amp * value_noise(x * freq, y * freq, seed.wrapping_add(k as u64 * 7919));
        norm += amp;
        amp *= 0.5;
        freq *= 2.0;
    }
    sum / norm
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn uniform_moments() {
        // A uniform variable on [0, 1) has mean 1/2 and variance 1/12 (closed form);
        // with n = 200 000 draws the standard error of the mean is 0.00065.
        let mut r = SplitMix64::new(42);
        let n = 200_000;
        let xs: Vec<f64> = (0..n).map(|_| r.next_f64()).collect();
        let mean = xs.iter().sum::<f64>() / n as f64;
        let var = xs.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / n as f64;
        assert!((mean - 0.5).abs() < 0.003, "mean {mean}");
        assert!((var - 1.0 / 12.0).abs() < 0.001, "variance {var}");
        assert!(xs.iter().all(|&x| (0.0..1.0).contains(&x)));
    }

    #[test]
    fn gaussian_moments() {
        // Standard normal: mean 0, variance 1, P(|z| < 1.96) = 0.95 (closed form / tables).
        let n = 300i64;
        let zs: Vec<f64> = (0..n)
            .flat_map(|a| (0..n).map(move |b| gaussian_at(a, b, 7)))
            .collect();
        let m = zs.len() as f64;
        let mean = zs.iter().sum::<f64>() / m;
        let var = zs.iter().map(|z| (z - mean).powi(2)).sum::<f64>() / m;
        let inside = zs.iter().filter(|z| z.abs() < 1.96).count() as f64 / m;
        assert!(mean.abs() < 0.01, "mean {mean}");
        assert!((var - 1.0).abs() < 0.02, "variance {var}");
        assert!(
            (inside - 0.95).abs() < 0.003,
            "fraction within 1.96: {inside}"
        );
    }

    #[test]
    fn value_noise_interpolates_lattice_values() {
        for (i, j) in [(0i64, 0i64), (3, -2), (-7, 11)] {
            let lattice = 2.0 * unit_f64(hash3(i, j, 5)) - 1.0;
            assert_eq!(value_noise(i as f64, j as f64, 5), lattice);
        }
        // Continuity across a lattice line: values 1e-9 apart differ by less than 1e-7.
        let a = value_noise(2.0 - 1e-9, 0.3, 5);
        let b = value_noise(2.0 + 1e-9, 0.3, 5);
        assert!((a - b).abs() < 1e-7);
    }

    #[test]
    fn fbm_bounded_and_seed_dependent() {
        let mut differs = 0;
        for k in 0..1000 {
            let x = k as f64 * 0.173;
            let y = k as f64 * 0.071;
            let v = fbm(x, y, 3.0, 4, 11);
            assert!((-1.0..=1.0).contains(&v));
            if (v - fbm(x, y, 3.0, 4, 12)).abs() > 1e-6 {
                differs += 1;
            }
        }
        assert!(differs > 950);
    }
}

//! Surface reflectance of each cover class in each season, five bands, and the texture
//! that makes an orthomosaic look like one.
//!
//! The table values are invented for the demo but follow the well-known shapes (common
//! practice, values from memory): green vegetation absorbs red and reflects strongly in
//! the near infrared with the red-edge between; water is dark and darkest in the near
//! infrared; gravel and bare track are bright and nearly flat; senescent or leafless
//! vegetation has a weaker near-infrared plateau and more red.
//!
//! The demo is built so that spectra alone do not separate every class (the reason for
//! terrain and height predictors):
//! - the farm track is surfaced with gravel from the bar: both have one spectrum, and only
//!   elevation (the bar lies near the water, the track on the terrace) separates them;
//! - willow leaves and the wet meadow beneath look alike in spring and summer, and the
//!   canopy's gaps show the meadow: only the vegetation height in the DSM separates willow
//!   scrub from wet meadow until the leaves turn in autumn;
//! - wet and dry meadow are alike in spring, part in summer (the wet sward is lusher) and
//!   in autumn (the dry meadow is mown), and mix over a 6 m transition
//!   ([`super::cover::wet_fraction`]);
//! - every class varies within itself: a vigour field moves red and near infrared
//!   against each other (vegetation) or the brightness (bare ground), and each band has a
//!   slow variation of its own.

use super::cover::{self, CoverClass, Season};
use super::noise::{fbm, gaussian_at};

/// Band names in file order, as written into the orthomosaics' band descriptions.
pub const BAND_NAMES: [&str; 5] = ["blue", "green", "red", "rededge", "nir"];

/// Reflectance (0–1) of `class` in `season`, bands in [`BAND_NAMES`] order.
pub fn reflectance(class: CoverClass, season: Season) -> [f64; 5] {
    use CoverClass::*;
    use Season::*;
    match (class, season) {
        (OpenWater, Spring) => [0.060, 0.078, 0.062, 0.040, 0.025],
        (OpenWater, Summer) => [0.048, 0.062, 0.042, 0.030, 0.018],
        (OpenWater, Autumn) => [0.052, 0.066, 0.048, 0.034, 0.021],
        (GravelBar | FarmTrack, Spring) => [0.150, 0.168, 0.185, 0.200, 0.214],
        (GravelBar | FarmTrack, Summer) => [0.172, 0.190, 0.208, 0.224, 0.238],
        (GravelBar | FarmTrack, Autumn) => [0.160, 0.178, 0.196, 0.211, 0.226],
        (WetMeadow, Spring) => [0.038, 0.074, 0.054, 0.172, 0.305],
        (WetMeadow, Summer) => [0.030, 0.070, 0.038, 0.205, 0.430],
        (WetMeadow, Autumn) => [0.040, 0.076, 0.066, 0.180, 0.305],
        (DryMeadow, Spring) => [0.042, 0.078, 0.062, 0.166, 0.288],
        (DryMeadow, Summer) => [0.040, 0.082, 0.058, 0.200, 0.345],
        (DryMeadow, Autumn) => [0.055, 0.085, 0.095, 0.170, 0.250],
        (WillowScrub, Spring) => [0.036, 0.072, 0.052, 0.176, 0.312],
        (WillowScrub, Summer) => [0.028, 0.066, 0.036, 0.212, 0.450],
        (WillowScrub, Autumn) => [0.050, 0.078, 0.080, 0.150, 0.235],
    }
}

/// Relative strength of the spatial texture (shared by all bands) and of the per-pixel
/// noise (independent per band) for a class.
fn texture_strength(class: CoverClass) -> (f64, f64) {
    match class {
        CoverClass::OpenWater => (0.06, 0.03),
        // The track's gravel is the bar's: the same texture too.
        CoverClass::GravelBar | CoverClass::FarmTrack => (0.10, 0.06),
        CoverClass::WetMeadow | CoverClass::DryMeadow => (0.12, 0.03),
        CoverClass::WillowScrub => (0.18, 0.04),
    }
}

/// Share of the willow canopy in a willow pixel by season (the rest shows the wet meadow
/// beneath through gaps), before the patchy variation of ±0.2.
fn canopy_cover(season: Season) -> f64 {
    match season {
        Season::Spring => 0.75,
        Season::Summer => 0.9,
        Season::Autumn => 0.6,
    }
}

/// Reflectance (0–1) of the surface a pixel sees at local (u, v) of `class` in `season`,
/// before the shared shading and the sensor noise: the class's table value, mixed with
/// the neighbouring sward (meadow transition, willow gaps) and varied within the class.
pub fn surface_reflectance(class: CoverClass, season: Season, u: f64, v: f64) -> [f64; 5] {
    let mix = |a: [f64; 5], b: [f64; 5], f: f64| -> [f64; 5] {
        std::array::from_fn(|k| f * a[k] + (1.0 - f) * b[k])
    };
    let wet = reflectance(CoverClass::WetMeadow, season);
    let mut r = match class {
        CoverClass::WetMeadow | CoverClass::DryMeadow => mix(
            wet,
            reflectance(CoverClass::DryMeadow, season),
            cover::wet_fraction(u, v),
        ),
        CoverClass::WillowScrub => {
            let f = (canopy_cover(season) + 0.2 * fbm(u, v, 0.9, 2, 0x6A95)).clamp(0.3, 1.0);
            mix(reflectance(class, season), wet, f)
        }
        _ => reflectance(class, season),
    };
    let vigour = fbm(u, v, 4.0, 3, 0x1A7E);
    match class {
        CoverClass::WetMeadow | CoverClass::DryMeadow | CoverClass::WillowScrub => {
            r[2] *= 1.0 - 0.16 * vigour;
            r[3] *= 1.0 + 0.06 * vigour;
            r[4] *= 1.0 + 0.12 * vigour;
        }
        CoverClass::GravelBar | CoverClass::FarmTrack => {
            for x in r.iter_mut() {
                *x *= 1.0 + 0.10 * vigour;
            }
        }
        CoverClass::OpenWater => {}
    }
    for (b, x) in r.iter_mut().enumerate() {
        *x *= 1.0 + 0.04 * fbm(u, v, 2.5, 2, 0xB0 + b as u64);
    }
    r
}

/// The five stored values (reflectance × [`super::REFLECTANCE_SCALE`], at least 1 so that
/// 0 stays nodata) of an orthomosaic pixel whose centre sees local (u, v) of `class` in `season`. `col`, `row`
/// and `seed` pick the pixel's own sensor noise.
pub fn pixel_values(
    class: CoverClass,
    season: Season,
    u: f64,
    v: f64,
    col: i64,
    row: i64,
    seed: u64,
) -> [u16; 5] {
    let base = surface_reflectance(class, season, u, v);
    let (spatial, pixel) = texture_strength(class);
    let shade = 1.0 + spatial * fbm(u, v, 1.6, 4, 0x7E47);
    let mut out = [0u16; 5];
    for (b, value) in out.iter_mut().enumerate() {
        let noise = 1.0 + pixel * gaussian_at(col, row, seed.wrapping_add(b as u64 * 0x1F3));
        let r = (base[b] * shade * noise).max(0.0);
        *value = (r * super::REFLECTANCE_SCALE)
            .round()
            .clamp(1.0, u16::MAX as f64) as u16;
    }
    out
}

/// Normalised difference (a − b)/(a + b).
#[cfg(test)]
fn nd(a: f64, b: f64) -> f64 {
    (a - b) / (a + b)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn vegetation_green_water_dark() {
        // NDVI = (nir − red)/(nir + red) (Rouse et al. 1974): green vegetation well above
        // 0.5, bare surfaces near 0.1, water negative (common practice).
        for s in [Season::Spring, Season::Summer, Season::Autumn] {
            for c in [
                CoverClass::WetMeadow,
                CoverClass::DryMeadow,
                CoverClass::WillowScrub,
            ] {
                let r = reflectance(c, s);
                assert!(nd(r[4], r[2]) > 0.4, "{c:?} {s:?}");
            }
            for c in [CoverClass::GravelBar, CoverClass::FarmTrack] {
                let r = reflectance(c, s);
                let v = nd(r[4], r[2]);
                assert!((0.0..0.15).contains(&v), "{c:?} {s:?}: {v}");
            }
            let w = reflectance(CoverClass::OpenWater, s);
            assert!(nd(w[4], w[2]) < 0.0);
        }
        // Willow in autumn is weaker in the near infrared than in summer.
        let su = reflectance(CoverClass::WillowScrub, Season::Summer);
        let au = reflectance(CoverClass::WillowScrub, Season::Autumn);
        assert!(au[4] < 0.6 * su[4]);
    }

    #[test]
    fn look_alike_pairs_by_design() {
        // Gravel bar and farm track: the same surface everywhere (one table row, one
        // variation), so only elevation can tell them apart.
        for s in [Season::Spring, Season::Summer, Season::Autumn] {
            for (u, v) in [(3.0, 4.0), (47.5, 12.25), (70.0, 55.0)] {
                assert_eq!(
                    surface_reflectance(CoverClass::GravelBar, s, u, v),
                    surface_reflectance(CoverClass::FarmTrack, s, u, v)
                );
            }
        }
        // Willow and wet meadow in spring and summer: every band within 8 % (table
        // values), far less than the ±12–16 % vigour variation within each class; in
        // autumn the willow's near infrared falls more than 20 % below the meadow's.
        for s in [Season::Spring, Season::Summer] {
            let (w, m) = (
                reflectance(CoverClass::WillowScrub, s),
                reflectance(CoverClass::WetMeadow, s),
            );
            for b in 0..5 {
                assert!((w[b] / m[b] - 1.0).abs() < 0.08, "{s:?} band {b}");
            }
        }
        let (w, m) = (
            reflectance(CoverClass::WillowScrub, Season::Autumn),
            reflectance(CoverClass::WetMeadow, Season::Autumn),
        );
        assert!(w[4] < 0.8 * m[4]);
        // Wet and dry meadow: NDVI closer in spring than in summer (phenology).
        let ndvi = |c, s| {
            let r = reflectance(c, s);
            nd(r[4], r[2])
        };
        let gap = |s| ndvi(CoverClass::WetMeadow, s) - ndvi(CoverClass::DryMeadow, s);
        assert!(gap(Season::Spring) < 0.06 && gap(Season::Summer) > 0.1);
    }

    #[test]
    fn pixel_values_scaled_and_never_nodata() {
        let mut sum = [0.0f64; 5];
        let n = 4000;
        for k in 0..n {
            let p = pixel_values(
                CoverClass::FarmTrack,
                Season::Summer,
                k as f64 * 0.37,
                k as f64 * 0.11,
                k,
                3,
                9,
            );
            for b in 0..5 {
                assert!(p[b] >= 1);
                sum[b] += p[b] as f64;
            }
        }
        // The texture has zero mean, so the mean stored value is the table value × 10000
        // within a few percent.
        let base = reflectance(CoverClass::FarmTrack, Season::Summer);
        for b in 0..5 {
            let mean = sum[b] / n as f64;
            assert!(
                (mean / (base[b] * 10_000.0) - 1.0).abs() < 0.03,
                "band {b}: {mean}"
            );
        }
    }
}

//! Storage precision against truncation error: which one limits curvature for a given
//! cell size and site elevation.
//!
//! A sphere cap z = √(R² − x² − y²) + E (R = 37 m, the docs/methods.md worked surface; mean
//! curvature 1/R everywhere) is sampled at 3x3 windows around fixed points 3–20 m from the
//! top, at several cell sizes h and site elevations E, and its Evans–Young mean curvature
//! is computed three ways:
//! - the truncation error: the estimator's formula on the exact f64 samples without E,
//!   minus 1/R (the method's own error, second order in h);
//! - the DSM stored as float64 with E added, through the kernels: it must show exactly
//!   the truncation error (up to f64 rounding at E and the f32 output's rounding);
//! - the DSM stored as float32 with E added: its RMS error, next to the storage noise
//!   floor ([`crate::terrain::precision`]: std(r) = 0.408·ulp(z)/h², so std(H) = that/√2
//!   since Evans–Young r and t are uncorrelated). Where the floor is ten times the
//!   truncation error or more, the measured RMS must lie within a factor 2 of it.

use ndarray::Array2;
use serde::Serialize;

use crate::grid::CellSizes;
use crate::terrain::derivatives::pqrst_3x3;
use crate::terrain::precision::second_derivative_floor;
use crate::terrain::{
    compute, curvature, DsmSample, Quantity, SlopeMethod, TerrainFeature, TerrainParams,
};

/// Sphere radius, metres (docs/methods.md worked surface).
pub const R: f64 = 37.0;

/// One line of the precision table.
#[derive(Clone, Debug, Serialize)]
pub struct PrecisionRow {
    pub surface: String,
    pub quantity: String,
    pub method: String,
    /// Site elevation E added to the surface, metres.
    pub elevation_m: f64,
    /// Cell size, metres.
    pub cell_size_m: f64,
    /// Largest |truncation error| over the points, 1/m.
    pub truncation_error: f64,
    /// Largest |error| of the float64 DSM through the kernels, 1/m.
    pub f64_error: f64,
    /// RMS error of the float32 DSM through the kernels, 1/m.
    pub f32_rms_error: f64,
    /// Predicted standard deviation of H from float32 storage, 1/m.
    pub f32_noise_floor: f64,
    /// "truncation" or "storage": the larger of the truncation error and the f32 floor.
    pub f32_dominant: String,
    pub pass: bool,
}

/// Evaluation points (x, y) in metres: radii 3–20 m at spread angles.
fn points() -> Vec<(f64, f64)> {
    (0..120)
        .map(|k| {
            let rho = 3.0 + 17.0 * (k as f64 / 119.0);
            let a = k as f64 * 2.399_963; // the golden angle, radians: spread directions
            (rho * a.cos(), rho * a.sin())
        })
        .collect()
}

/// The 3x3 windows around every point, side by side in one 3 x 3K array (f64, no E).
fn windows(h: f64) -> Array2<f64> {
    let pts = points();
    let f = |x: f64, y: f64| (R * R - x * x - y * y).sqrt();
    Array2::from_shape_fn((3, 3 * pts.len()), |(i, j)| {
        let (x0, y0) = pts[j / 3];
        f(x0 + (j % 3) as f64 * h - h, y0 - i as f64 * h + h)
    })
}

/// Mean curvature at the window centres (output columns 3k) through the kernels.
fn through_kernels<T: DsmSample>(z: &Array2<T>, h: f64, reference_z: f64) -> Vec<f64> {
    let f = TerrainFeature::derivative(Quantity::MeanCurvature, SlopeMethod::EvansYoung, None);
    let out = compute(
        std::slice::from_ref(&f),
        z.view(),
        &CellSizes::uniform(h, h, 3),
        1,
        reference_z,
        &TerrainParams::default(),
    );
    (0..points().len())
        .map(|k| out[0][[0, 3 * k]] as f64)
        .collect()
}

fn one(elevation: f64, h: f64) -> PrecisionRow {
    let w = windows(h);
    let exact = 1.0 / R;
    let truncation: Vec<f64> = (0..points().len())
        .map(|k| {
            let mut v = [0.0; 9];
            for (m, x) in v.iter_mut().enumerate() {
                *x = w[[m / 3, 3 * k + m % 3]];
            }
            let d = pqrst_3x3(&v, h, h, SlopeMethod::EvansYoung).expect("finite samples");
            curvature::mean(&d) - exact
        })
        .collect();
    let z64 = w.mapv(|v| v + elevation);
    let z32 = z64.mapv(|v| v as f32);
    let e64: Vec<f64> = through_kernels(&z64, h, elevation.round())
        .iter()
        .map(|v| v - exact)
        .collect();
    let e32: Vec<f64> = through_kernels(&z32, h, elevation.round())
        .iter()
        .map(|v| v - exact)
        .collect();
    let top = elevation + R;
    let floor = second_derivative_floor(
        SlopeMethod::EvansYoung,
        None,
        <f32 as DsmSample>::spacing_at(top),
        h,
        h,
    ) / 2f64.sqrt();
    // f64 rounding at E (0.408·ulp/h²·a few) plus the f32 output's rounding of 1/R.
    let f64_slack = 4.0 * <f64 as DsmSample>::spacing_at(top) / (h * h) + 4e-9;
    let max = |v: &[f64]| v.iter().fold(0.0f64, |a, x| a.max(x.abs()));
    let trunc_max = max(&truncation);
    let f64_ok = truncation
        .iter()
        .zip(&e64)
        .all(|(t, e)| (t - e).abs() <= f64_slack);
    let rms32 = (e32.iter().map(|e| e * e).sum::<f64>() / e32.len() as f64).sqrt();
    let f32_ok = if floor >= 10.0 * trunc_max {
        (0.5..2.0).contains(&(rms32 / floor))
    } else {
        max(&e32) <= trunc_max + 6.0 * floor + 4e-9
    };
    PrecisionRow {
        surface: "sphere_cap".into(),
        quantity: "mean".into(),
        method: "evans_young".into(),
        elevation_m: elevation,
        cell_size_m: h,
        truncation_error: trunc_max,
        f64_error: max(&e64),
        f32_rms_error: rms32,
        f32_noise_floor: floor,
        f32_dominant: if floor > trunc_max {
            "storage".into()
        } else {
            "truncation".into()
        },
        pass: f64_ok && f32_ok,
    }
}

/// Every precision case: elevations 0 and 1500 m, cell sizes 1 m to 5 cm.
pub fn run() -> Vec<PrecisionRow> {
    let mut rows = Vec::new();
    for elevation in [0.0, 1500.0] {
        for h in [1.0, 0.5, 0.2, 0.1, 0.05] {
            rows.push(one(elevation, h));
        }
    }
    rows
}

/// The precision rows as a fixed-width table.
pub fn table(rows: &[PrecisionRow]) -> String {
    let mut s = String::from(
        "\nStorage precision against truncation (sphere cap R = 37 m raised by E, mean curvature, Evans–Young, 1/m):\n",
    );
    s.push_str(&format!(
        "{:>7} {:>6} {:>11} {:>11} {:>11} {:>11}  {:<10}  {}\n",
        "E (m)",
        "h (m)",
        "truncation",
        "f64 DSM",
        "f32 DSM rms",
        "f32 floor",
        "f32 limit",
        "result"
    ));
    for r in rows {
        s.push_str(&format!(
            "{:>7} {:>6} {:>11.3e} {:>11.3e} {:>11.3e} {:>11.3e}  {:<10}  {}\n",
            r.elevation_m,
            r.cell_size_m,
            r.truncation_error,
            r.f64_error,
            r.f32_rms_error,
            r.f32_noise_floor,
            r.f32_dominant,
            if r.pass { "pass" } else { "FAIL" }
        ));
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn f64_cases_show_the_truncation_error_and_f32_the_floor() {
        let rows = run();
        for r in &rows {
            assert!(r.pass, "{}", table(&rows));
        }
        // At 5 cm cells 1500 m up the f32 floor dominates by orders of magnitude, while
        // the f64 DSM keeps the method's own error.
        let r = rows
            .iter()
            .find(|r| r.elevation_m == 1500.0 && r.cell_size_m == 0.05)
            .unwrap();
        assert_eq!(r.f32_dominant, "storage");
        assert!(
            r.f32_rms_error > 100.0 * r.truncation_error,
            "{}",
            table(&rows)
        );
        assert!(
            r.f64_error < 2.0 * r.truncation_error + 1e-8,
            "{}",
            table(&rows)
        );
    }
}

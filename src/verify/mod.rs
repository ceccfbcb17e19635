//! Verification of terrain formulas against closed-form surfaces.
//!
//! Each surface z(x, y) has exact partial derivatives p, q, r, s, t, hence exact slope,
//! aspect and curvatures (docs/methods.md formulas). Each surface is sampled as f32 at several
//! cell sizes, each half the previous; every estimator's output is compared with the exact
//! values over the interior, giving the maximum and RMS error per cell size and the
//! observed order of convergence log2(e(h)/e(h/2)) of the maximum error. A check passes
//! when its error at the finest cell size is within its stated tolerance and, for
//! convergence checks, the observed order of the first halving is at least 1.5 (all 3x3
//! estimators are second order: Florinsky 1998, Int. J. GIS 12(1), 47–61, doi:10.1080/136588198242003; docs/methods.md
//! "Order of accuracy"). Exactness checks (quadratic surfaces, planes) need only the
//! tolerance, which then covers f32 rounding of the sampled elevations.
//!
//! Also checked: the multi-scale quadratic fit recovers a paraboloid exactly at several
//! radii; a plane has TPI 0, detrended roughness 0 and VRM 0 (disc and square windows).
//!
//! Aspect and the slope-line curvatures (kn, kt, kc) are compared only where the exact
//! slope is at least 2°, since they are undefined on flat ground.
//!
//! [`precision`] adds float64 cases: the same kernels on a sphere cap raised to a site
//! elevation, stored as f64 (must show the truncation error alone) and as f32 (its error
//! next to the storage noise floor), so the table shows which limits a given cell size
//! and elevation.

pub mod precision;

use ndarray::Array2;
use serde::Serialize;

use crate::grid::CellSizes;
use crate::terrain::derivatives::{Pointwise, Pqrst};
use crate::terrain::{compute, table, SlopeMethod, TerrainFeature, TerrainParams, WindowShape};

/// A closed-form test surface.
pub struct Surface {
    pub name: &'static str,
    /// The formula, for the report.
    pub formula: &'static str,
    /// Elevation at (x east, y north), metres.
    pub z: fn(f64, f64) -> f64,
    /// Exact partial derivatives at (x, y).
    pub d: fn(f64, f64) -> Pqrst,
    /// Half-width of the sampled square, metres.
    pub half_extent: f64,
    /// Coarsest east-west cell size, metres; halved twice.
    pub h0: f64,
    /// hy / hx.
    pub aspect_ratio: f64,
    /// True when every 3x3 estimator is exact on it (quadratic surfaces).
    pub quadratic: bool,
}

fn pqrst(p: f64, q: f64, r: f64, s: f64, t: f64) -> Pqrst {
    Pqrst { p, q, r, s, t }
}

const SPHERE_R: f64 = 60.0;
const HILL_A: f64 = 100.0;
const HILL_S: f64 = 50.0;
const SIN_A: f64 = 5.0;
const SIN_KX: f64 = std::f64::consts::TAU / 40.0;
const SIN_KY: f64 = std::f64::consts::TAU / 50.0;

/// The closed-form surfaces of `terrastack verify`.
pub fn surfaces() -> Vec<Surface> {
    vec![
        Surface {
            name: "plane",
            formula: "z = 0.3x + 0.4y + 10",
            z: |x, y| 0.3 * x + 0.4 * y + 10.0,
            d: |_, _| pqrst(0.3, 0.4, 0.0, 0.0, 0.0),
            half_extent: 20.0,
            h0: 2.0,
            aspect_ratio: 1.0,
            quadratic: true,
        },
        Surface {
            name: "paraboloid",
            formula: "z = (x² + y²)/200",
            z: |x, y| (x * x + y * y) / 200.0,
            d: |x, y| pqrst(x / 100.0, y / 100.0, 0.01, 0.0, 0.01),
            half_extent: 40.0,
            h0: 2.0,
            aspect_ratio: 1.0,
            quadratic: true,
        },
        Surface {
            name: "saddle",
            formula: "z = xy/20 + x/2 (hy = 1.5 hx)",
            z: |x, y| x * y / 20.0 + x / 2.0,
            d: |x, y| pqrst(y / 20.0 + 0.5, x / 20.0, 0.0, 0.05, 0.0),
            half_extent: 20.0,
            h0: 2.0,
            aspect_ratio: 1.5,
            quadratic: true,
        },
        Surface {
            name: "sphere_cap",
            formula: "z = √(60² − x² − y²) − 60",
            z: |x, y| (SPHERE_R * SPHERE_R - x * x - y * y).sqrt() - SPHERE_R,
            d: |x, y| {
                let w = (SPHERE_R * SPHERE_R - x * x - y * y).sqrt();
                pqrst(
                    -x / w,
                    -y / w,
                    -(SPHERE_R * SPHERE_R - y * y) / w.powi(3),
                    -x * y / w.powi(3),
                    -(SPHERE_R * SPHERE_R - x * x) / w.powi(3),
                )
            },
            half_extent: 30.0,
            h0: 4.0,
            aspect_ratio: 1.0,
            quadratic: false,
        },
        Surface {
            name: "gaussian_hill",
            formula: "z = 100·exp(−(x² + y²)/(2·50²))",
            z: |x, y| HILL_A * (-(x * x + y * y) / (2.0 * HILL_S * HILL_S)).exp(),
            d: |x, y| {
                let s2 = HILL_S * HILL_S;
                let e = HILL_A * (-(x * x + y * y) / (2.0 * s2)).exp();
                pqrst(
                    -x / s2 * e,
                    -y / s2 * e,
                    (x * x / (s2 * s2) - 1.0 / s2) * e,
                    x * y / (s2 * s2) * e,
                    (y * y / (s2 * s2) - 1.0 / s2) * e,
                )
            },
            half_extent: 100.0,
            h0: 10.0,
            aspect_ratio: 1.0,
            quadratic: false,
        },
        Surface {
            name: "sinusoid",
            formula: "z = 5·sin(2πx/40 + 0.3)·cos(2πy/50 − 0.2)",
            z: |x, y| SIN_A * (SIN_KX * x + 0.3).sin() * (SIN_KY * y - 0.2).cos(),
            d: |x, y| {
                let (sx, cx) = (SIN_KX * x + 0.3).sin_cos();
                let (sy, cy) = (SIN_KY * y - 0.2).sin_cos();
                pqrst(
                    SIN_A * SIN_KX * cx * cy,
                    -SIN_A * SIN_KY * sx * sy,
                    -SIN_A * SIN_KX * SIN_KX * sx * cy,
                    -SIN_A * SIN_KX * SIN_KY * cx * sy,
                    -SIN_A * SIN_KY * SIN_KY * sx * cy,
                )
            },
            half_extent: 40.0,
            h0: 2.0,
            aspect_ratio: 1.0,
            quadratic: false,
        },
    ]
}

/// What a check expects.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Expectation {
    /// Exact up to f32 rounding of the input.
    Exact,
    /// Second-order convergence as the cell size halves.
    SecondOrder,
}

/// One line of the error table.
#[derive(Clone, Debug, Serialize)]
pub struct CheckRow {
    pub surface: String,
    pub quantity: String,
    pub method: String,
    pub units: String,
    /// East-west cell sizes, metres.
    pub cell_sizes: Vec<f64>,
    pub max_error: Vec<f64>,
    pub rms_error: Vec<f64>,
    /// log2 of successive max-error ratios.
    pub order: Vec<Option<f64>>,
    pub expectation: Expectation,
    /// Largest max error allowed at the finest cell size.
    pub tolerance: f64,
    pub pass: bool,
}

/// The whole verification.
#[derive(Clone, Debug, Serialize)]
pub struct Report {
    pub checks: Vec<CheckRow>,
    /// Storage precision against truncation error (float64 and float32 DSMs).
    pub precision: Vec<precision::PrecisionRow>,
}

impl Report {
    /// True when every check passed.
    pub fn passed(&self) -> bool {
        self.failures() == 0
    }

    /// Number of failed checks (error table and precision table).
    pub fn failures(&self) -> usize {
        self.checks.iter().filter(|c| !c.pass).count()
            + self.precision.iter().filter(|c| !c.pass).count()
    }

    /// Number of checks (error table and precision table).
    pub fn len(&self) -> usize {
        self.checks.len() + self.precision.len()
    }

    /// True when there is no check at all.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// A fixed-width table for people.
    pub fn to_table(&self) -> String {
        let mut s = String::new();
        s.push_str(&format!(
            "{:<14} {:<19} {:<19} {:>7} {:>10} {:>10} {:>6} {:>10}  {}\n",
            "surface",
            "quantity",
            "method",
            "h (m)",
            "max err",
            "rms err",
            "order",
            "tolerance",
            "result"
        ));
        for c in &self.checks {
            for (k, h) in c.cell_sizes.iter().enumerate() {
                let last = k + 1 == c.cell_sizes.len();
                let order = match c.order.get(k.wrapping_sub(1)) {
                    Some(Some(o)) if k > 0 => format!("{o:.2}"),
                    _ => "-".into(),
                };
                s.push_str(&format!(
                    "{:<14} {:<19} {:<19} {:>7} {:>10.3e} {:>10.3e} {:>6} {:>10}  {}\n",
                    if k == 0 { c.surface.as_str() } else { "" },
                    if k == 0 { c.quantity.as_str() } else { "" },
                    if k == 0 { c.method.as_str() } else { "" },
                    format!("{h}"),
                    c.max_error[k],
                    c.rms_error[k],
                    order,
                    if last {
                        format!("{:.1e}", c.tolerance)
                    } else {
                        String::new()
                    },
                    if last {
                        if c.pass {
                            "pass"
                        } else {
                            "FAIL"
                        }
                    } else {
                        ""
                    },
                ));
            }
        }
        s.push_str(&precision::table(&self.precision));
        s.push_str(&format!(
            "{} checks, {} failed. Outputs are analysis aids, not engineering assessments.\n",
            self.len(),
            self.failures()
        ));
        s
    }
}

/// A quantity computed from derivatives, as the feature table gives it: its report name
/// (the table's word without "_curvature"), units, closed-form value of the exact
/// derivatives ([`Pointwise::eval`]) and output feature.
struct Quantity {
    name: &'static str,
    quantity: table::Quantity,
    units: &'static str,
    pointwise: Pointwise,
}

impl Quantity {
    fn exact(&self, d: &Pqrst) -> f64 {
        self.pointwise.eval(d)
    }

    fn feature(&self, method: SlopeMethod, scale_m: Option<f64>) -> TerrainFeature {
        TerrainFeature::derivative(self.quantity, method, scale_m)
    }

    /// Compared only where the exact slope is at least 2° (aspect, kn, kt, kc).
    fn needs_slope(&self) -> bool {
        self.pointwise.undefined_where_flat()
    }

    /// An angle compared modulo 360° (aspect).
    fn angle(&self) -> bool {
        self.quantity == table::Quantity::Aspect
    }

    fn second_order(&self) -> bool {
        self.pointwise.second_order()
    }
}

/// The derivative quantities verified (northness and eastness are cos and sin of the
/// verified aspect).
const VERIFIED: [table::Quantity; 7] = [
    table::Quantity::Slope,
    table::Quantity::Aspect,
    table::Quantity::ProfileCurvature,
    table::Quantity::PlanCurvature,
    table::Quantity::TangentialCurvature,
    table::Quantity::MeanCurvature,
    table::Quantity::GaussianCurvature,
];

fn quantities() -> Vec<Quantity> {
    VERIFIED
        .iter()
        .filter_map(|&q| {
            let row = q.row();
            let table::Kernel::Derivative(pointwise) = row.kernel else {
                return None;
            };
            Some(Quantity {
                name: row.word.trim_end_matches("_curvature"),
                quantity: q,
                units: row.units,
                pointwise,
            })
        })
        .collect()
}

/// A sampled surface: f32 elevations, cell sizes, and cell-centre coordinates.
struct Sampled {
    z: Array2<f32>,
    hx: f64,
    hy: f64,
    n: usize,
}

fn sample(s: &Surface, hx: f64) -> Sampled {
    let hy = hx * s.aspect_ratio;
    let kx = (s.half_extent / hx).round() as usize;
    let ky = (s.half_extent / hy).round() as usize;
    let n = 2 * kx.max(ky) + 1;
    let c = (n / 2) as f64;
    let z = Array2::from_shape_fn((n, n), |(i, j)| {
        ((s.z)((j as f64 - c) * hx, -(i as f64 - c) * hy)) as f32
    });
    Sampled { z, hx, hy, n }
}

/// Errors of `got` (interior output of a block with `halo`) against the exact quantity,
/// at the cell centres shared by every cell size (multiples of `coarse_hx`, `coarse_hy`),
/// so that successive errors compare the same points. Returns (max, RMS, max |exact|).
fn errors(
    s: &Surface,
    smp: &Sampled,
    halo: usize,
    got: &Array2<f32>,
    q: &Quantity,
    coarse: (f64, f64),
) -> (f64, f64, f64) {
    let c = (smp.n / 2) as f64;
    let (mut max, mut sum, mut count, mut scale) = (0.0f64, 0.0, 0usize, 0.0f64);
    let min_slope = 2f64.to_radians().tan();
    let stride_x = (coarse.0 / smp.hx).round() as i64;
    let stride_y = (coarse.1 / smp.hy).round() as i64;
    for ((i, j), v) in got.indexed_iter() {
        let (ci, cj) = (
            i as i64 + halo as i64 - c as i64,
            j as i64 + halo as i64 - c as i64,
        );
        if ci.rem_euclid(stride_y.max(1)) != 0 || cj.rem_euclid(stride_x.max(1)) != 0 {
            continue;
        }
        let x = cj as f64 * smp.hx;
        let y = -(ci as f64) * smp.hy;
        if x.abs() > s.half_extent || y.abs() > s.half_extent {
            continue;
        }
        let d = (s.d)(x, y);
        if q.needs_slope() && d.p.hypot(d.q) < min_slope {
            continue;
        }
        let exact = q.exact(&d);
        scale = scale.max(exact.abs());
        let mut e = (*v as f64 - exact).abs();
        if q.angle() {
            e = e.min(360.0 - e);
        }
        if !e.is_finite() {
            e = f64::INFINITY;
        }
        max = max.max(e);
        sum += e * e;
        count += 1;
    }
    (
        max,
        if count > 0 {
            (sum / count as f64).sqrt()
        } else {
            0.0
        },
        scale,
    )
}

/// Tolerance at the finest cell size: exact checks allow for f32 input rounding; second
/// order checks allow a few per cent of the quantity's magnitude on that surface.
fn tolerance(s: &Surface, q: &Quantity, exact: bool, h: f64, magnitude: f64) -> f64 {
    // f32 has a relative spacing of 2⁻²³ ≈ 1.2e-7; a 3x3 estimate of p divides a
    // difference of rounded elevations by ~h, of r by ~h², so the rounding noise scales
    // with |z|·1.2e-7/h (first derivatives) and /h² (second).
    let mut zmax = 1.0f64;
    for a in 0..=16 {
        for b in 0..=16 {
            let x = s.half_extent * (a as f64 / 8.0 - 1.0);
            let y = s.half_extent * (b as f64 / 8.0 - 1.0);
            zmax = zmax.max((s.z)(x, y).abs());
        }
    }
    let noise1 = 8.0 * zmax * 1.2e-7 / h;
    let noise2 = 8.0 * zmax * 1.2e-7 / (h * h);
    match (exact, q.name) {
        (true, "slope") | (true, "aspect") => noise1.to_degrees() * 4.0 + 1e-4,
        (true, _) => noise2 * 4.0 + 1e-8,
        (false, "slope") | (false, "aspect") => 0.5,
        // Curvatures: 5 % of the largest exact value over the compared points.
        (false, _) => 0.05 * magnitude,
    }
}

fn order_of(errs: &[f64]) -> Vec<Option<f64>> {
    errs.windows(2)
        .map(|w| {
            (w[0] > 0.0 && w[1] > 0.0 && w[0].is_finite() && w[1].is_finite())
                .then(|| (w[0] / w[1]).log2())
        })
        .collect()
}

fn run_surface(s: &Surface, rows: &mut Vec<CheckRow>) {
    let methods: [(SlopeMethod, &str, Option<f64>); 4] = [
        (SlopeMethod::Horn, "horn", None),
        (SlopeMethod::ZevenbergenThorne, "zevenbergen_thorne", None),
        (SlopeMethod::EvansYoung, "evans_young", None),
        // Wood fit over 5 x 5 cells (radius 2 cells), scaled with h.
        (SlopeMethod::Quadratic, "quadratic_5x5", Some(2.0)),
    ];
    let hs = [s.h0, s.h0 / 2.0, s.h0 / 4.0];
    let samples: Vec<Sampled> = hs.iter().map(|&h| sample(s, h)).collect();
    for q in quantities() {
        for (m, label, scale_cells) in methods {
            // Horn gives first derivatives only.
            if m == SlopeMethod::Horn && q.second_order() {
                continue;
            }
            let mut maxe = Vec::new();
            let mut rmse = Vec::new();
            let mut magnitude = 0.0f64;
            let coarse = (samples[0].hx, samples[0].hy);
            for smp in &samples {
                let scale = scale_cells.map(|k| k * smp.hx.max(smp.hy));
                let f = q.feature(m, scale);
                let halo = f.halo_px(smp.hx, smp.hy);
                let cells = CellSizes::uniform(smp.hx, smp.hy, smp.n);
                let out = compute(
                    std::slice::from_ref(&f),
                    smp.z.view(),
                    &cells,
                    halo,
                    0.0,
                    &TerrainParams::default(),
                );
                let (mx, rms, mag) = errors(s, smp, halo, &out[0], &q, coarse);
                magnitude = magnitude.max(mag);
                maxe.push(mx);
                rmse.push(rms);
            }
            let exact = s.quadratic;
            let tol = tolerance(
                s,
                &q,
                exact,
                *hs.last().expect("three cell sizes"),
                magnitude,
            );
            let order = order_of(&maxe);
            let finest_ok = maxe.last().is_some_and(|e| *e <= tol);
            let order_ok = exact || order.first().copied().flatten().is_some_and(|o| o >= 1.5)
                // Already at the rounding floor at the coarsest size: nothing to converge.
                || maxe[0] <= tol / 10.0;
            rows.push(CheckRow {
                surface: s.name.into(),
                quantity: q.name.into(),
                method: label.into(),
                units: q.units.into(),
                cell_sizes: hs.to_vec(),
                max_error: maxe,
                rms_error: rmse,
                order,
                expectation: if exact {
                    Expectation::Exact
                } else {
                    Expectation::SecondOrder
                },
                tolerance: tol,
                pass: finest_ok && order_ok,
            });
        }
    }
}

fn single(
    surface: &str,
    quantity: &str,
    method: &str,
    units: &str,
    h: f64,
    errs: (f64, f64),
    tol: f64,
) -> CheckRow {
    CheckRow {
        surface: surface.into(),
        quantity: quantity.into(),
        method: method.into(),
        units: units.into(),
        cell_sizes: vec![h],
        max_error: vec![errs.0],
        rms_error: vec![errs.1],
        order: vec![],
        expectation: Expectation::Exact,
        tolerance: tol,
        pass: errs.0 <= tol,
    }
}

fn max_rms(a: &Array2<f32>, exact: impl Fn(usize, usize) -> f64) -> (f64, f64) {
    let (mut mx, mut sum, mut n) = (0.0f64, 0.0, 0usize);
    for ((i, j), v) in a.indexed_iter() {
        let mut e = (*v as f64 - exact(i, j)).abs();
        if !e.is_finite() {
            e = f64::INFINITY;
        }
        mx = mx.max(e);
        sum += e * e;
        n += 1;
    }
    (mx, if n > 0 { (sum / n as f64).sqrt() } else { 0.0 })
}

fn run_multiscale(rows: &mut Vec<CheckRow>) {
    // The multi-scale fit is exact on a paraboloid at every radius (closed form:
    // z = (x² + y²)/200 + 0.1x has p = x/100 + 0.1, q = y/100, r = t = 0.01, s = 0).
    let h = 0.5;
    let s = Surface {
        name: "paraboloid",
        formula: "z = (x² + y²)/200 + 0.1x",
        z: |x, y| (x * x + y * y) / 200.0 + 0.1 * x,
        d: |x, y| pqrst(x / 100.0 + 0.1, y / 100.0, 0.01, 0.0, 0.01),
        half_extent: 12.0,
        h0: h,
        aspect_ratio: 1.0,
        quadratic: true,
    };
    let smp = sample(&s, h);
    for r in [1.0, 3.0, 8.0] {
        for q in quantities() {
            let f = q.feature(SlopeMethod::Quadratic, Some(r));
            let halo = f.halo_px(h, h);
            let cells = CellSizes::uniform(h, h, smp.n);
            let out = compute(
                std::slice::from_ref(&f),
                smp.z.view(),
                &cells,
                halo,
                0.0,
                &TerrainParams::default(),
            );
            let (mx, rms, _) = errors(&s, &smp, halo, &out[0], &q, (h, h));
            let errs = (mx, rms);
            let tol = match q.name {
                "slope" | "aspect" => 1e-3,
                "gaussian" => 1e-7,
                _ => 1e-5,
            };
            rows.push(single(
                s.name,
                q.name,
                &format!("quadratic_r{r}m"),
                q.units,
                h,
                errs,
                tol,
            ));
        }
    }
}

fn run_plane_windows(rows: &mut Vec<CheckRow>) {
    // A plane has TPI 0 (symmetric window), detrended roughness 0 and VRM 0 (all normals
    // parallel; Sappington et al. 2007) — closed forms. Errors come only from the 2⁻²⁰ m
    // quantisation of window sums (≤ 4.8e-7 m) and f32 rounding of the input elevations
    // (half a spacing at |z| < 64 m is 1.9e-6 m), hence 8e-6 m.
    let h = 0.5;
    let n = 61;
    let z = Array2::from_shape_fn((n, n), |(i, j)| {
        (0.6 * (j as f64 * h) - 0.45 * (-(i as f64) * h) + 20.0) as f32
    });
    let cells = CellSizes::uniform(h, h, n);
    for shape in [WindowShape::Disc, WindowShape::Square] {
        let params = TerrainParams {
            shape,
            ..TerrainParams::default()
        };
        for r in [1.0, 5.0] {
            let feats = [
                TerrainFeature::windowed(table::Quantity::Tpi, r),
                TerrainFeature::windowed(table::Quantity::RoughnessDetrended, r),
                TerrainFeature::windowed(table::Quantity::Vrm, r),
            ];
            let halo = feats.iter().map(|f| f.halo_px(h, h)).max().unwrap_or(0);
            let out = compute(&feats, z.view(), &cells, halo, 20.0, &params);
            let method = format!("{}_r{r}m", shape.name());
            rows.push(single(
                "plane",
                "tpi",
                &method,
                "metres",
                h,
                max_rms(&out[0], |_, _| 0.0),
                2e-6,
            ));
            rows.push(single(
                "plane",
                "roughness_detrended",
                &method,
                "metres",
                h,
                max_rms(&out[1], |_, _| 0.0),
                2e-6,
            ));
            rows.push(single(
                "plane",
                "vrm",
                &method,
                "unitless",
                h,
                max_rms(&out[2], |_, _| 0.0),
                1e-7,
            ));
        }
    }
}

/// Runs every check.
pub fn run() -> Report {
    let mut checks = Vec::new();
    for s in surfaces() {
        run_surface(&s, &mut checks);
    }
    run_multiscale(&mut checks);
    run_plane_windows(&mut checks);
    Report {
        checks,
        precision: precision::run(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::terrain::{curvature, slope};
    use approx::assert_relative_eq;

    #[test]
    fn surfaces_match_methods_worked_values() {
        // docs/methods.md worked values through the exact derivatives of the surfaces: the
        // Gaussian hill at (50, 0): slope 50.4992°, aspect 90°, kt = 0.0154323.
        let hill = surfaces()
            .into_iter()
            .find(|s| s.name == "gaussian_hill")
            .unwrap();
        let d = (hill.d)(50.0, 0.0);
        assert_relative_eq!(slope::slope_deg(&d), 50.4992, epsilon = 1e-4);
        assert_relative_eq!(slope::aspect_deg(&d), 90.0, epsilon = 1e-9);
        assert_relative_eq!(curvature::tangential(&d), 0.0154323, epsilon = 1e-7);
        // Paraboloid at (30, 40) with R = 100: slope 26.5651°, kn = −0.0071554.
        let bowl = surfaces()
            .into_iter()
            .find(|s| s.name == "paraboloid")
            .unwrap();
        let d = (bowl.d)(30.0, 40.0);
        assert_relative_eq!(slope::slope_deg(&d), 26.5651, epsilon = 1e-4);
        assert_relative_eq!(curvature::profile(&d), -0.0071554, epsilon = 1e-7);
    }

    #[test]
    fn exact_derivatives_agree_with_finite_differences_of_z() {
        // Guards the hand-written derivative formulas: central differences of z with a
        // small step (independent of the kernels) must agree.
        let e = 1e-4;
        for s in surfaces() {
            for (x, y) in [(3.0, 4.0), (-7.0, 2.5), (11.0, -9.0)] {
                let d = (s.d)(x, y);
                let z = s.z;
                let p = (z(x + e, y) - z(x - e, y)) / (2.0 * e);
                let q = (z(x, y + e) - z(x, y - e)) / (2.0 * e);
                let r = (z(x + e, y) - 2.0 * z(x, y) + z(x - e, y)) / (e * e);
                let t = (z(x, y + e) - 2.0 * z(x, y) + z(x, y - e)) / (e * e);
                let sxy = (z(x + e, y + e) - z(x + e, y - e) - z(x - e, y + e) + z(x - e, y - e))
                    / (4.0 * e * e);
                assert_relative_eq!(d.p, p, epsilon = 1e-6);
                assert_relative_eq!(d.q, q, epsilon = 1e-6);
                assert_relative_eq!(d.r, r, epsilon = 1e-3);
                assert_relative_eq!(d.t, t, epsilon = 1e-3);
                assert_relative_eq!(d.s, sxy, epsilon = 1e-3);
            }
        }
    }

    #[test]
    fn every_check_passes() {
        let report = run();
        assert!(report.passed(), "{}", report.to_table());
        assert!(report.checks.len() > 100);
    }
}

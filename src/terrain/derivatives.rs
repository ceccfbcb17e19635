//! First and second partial derivatives of elevation from a 3x3 window.
//!
//! p = ∂z/∂x, q = ∂z/∂y, r = ∂²z/∂x², s = ∂²z/∂x∂y, t = ∂²z/∂y², with x east and y north
//! (rows increase southward, so y = −row·hy). The window is numbered from the north-west:
//!
//! ```text
//! z1 z2 z3
//! z4 z5 z6
//! z7 z8 z9
//! ```
//!
//! Estimators (formulas as in docs/methods.md):
//! - Horn 1981 (Proc. IEEE 69(1), doi:10.1109/PROC.1981.11918): p, q from weighted differences. Horn gives
//!   no second derivatives; a Horn set carries the Evans–Young r, s, t.
//! - Zevenbergen & Thorne 1987 (Earth Surf. Process. Landforms 12, doi:10.1002/esp.3290120107): partial
//!   quartic through the nine points.
//! - Evans 1979 / Young 1978 (see Florinsky 2016): least-squares quadratic on the nine points.
//!
//! Cell sizes are those of the centre row (hx east-west, hy north-south, metres), so
//! geographic grids are handled row by row. All nine cells must be valid, else every
//! derivative is NaN. Cost: O(1) per cell; rows run in parallel (rayon); each value is a
//! pointwise function of nine cells, so results do not depend on block or thread count.

use ndarray::{Array2, ArrayView2, Zip};
use rayon::prelude::*;

use super::arctan::select;
pub use super::pqrst::Pqrst;
use super::{curvature, slope, DsmSample, RowSizes, SlopeMethod};
use crate::terrain::roughness::tri_3x3;

/// Partial derivatives over a region, one array each (NaN where unavailable), and the
/// squared gradient below which the slope direction is undefined at each cell
/// (`g_min`, see [`curvature::GRADIENT_SIGNIFICANCE`]).
#[derive(Clone, Debug)]
pub struct Derivatives {
    pub p: Array2<f64>,
    pub q: Array2<f64>,
    pub r: Array2<f64>,
    pub s: Array2<f64>,
    pub t: Array2<f64>,
    pub g_min: Array2<f64>,
}

impl Derivatives {
    /// NaN-filled arrays of shape `dim`.
    pub fn nan(dim: (usize, usize)) -> Derivatives {
        Derivatives {
            p: Array2::from_elem(dim, f64::NAN),
            q: Array2::from_elem(dim, f64::NAN),
            r: Array2::from_elem(dim, f64::NAN),
            s: Array2::from_elem(dim, f64::NAN),
            t: Array2::from_elem(dim, f64::NAN),
            g_min: Array2::from_elem(dim, f64::NAN),
        }
    }

    /// The derivatives at (row, col).
    pub fn at(&self, row: usize, col: usize) -> Pqrst {
        Pqrst {
            p: self.p[[row, col]],
            q: self.q[[row, col]],
            r: self.r[[row, col]],
            s: self.s[[row, col]],
            t: self.t[[row, col]],
        }
    }
}

/// Derivatives from the nine elevations `w` (metres, row-major from the north-west) and
/// cell sizes `hx`, `hy` (metres). `None` when any cell is not finite.
///
/// Every estimator is exact on a plane: z = 0.3x + 0.4y sampled at 2 m cells (x east,
/// y north, so the north row is 0.8 m higher than the centre row) gives p = 0.3,
/// q = 0.4 and no second derivatives:
///
/// ```
/// use terrastack::terrain::derivatives::pqrst_3x3;
/// use terrastack::terrain::SlopeMethod;
///
/// let h = 2.0;
/// let z = |col: f64, row: f64| 0.3 * (col - 1.0) * h - 0.4 * (row - 1.0) * h;
/// let w: [f64; 9] = std::array::from_fn(|k| z((k % 3) as f64, (k / 3) as f64));
/// for m in [SlopeMethod::Horn, SlopeMethod::ZevenbergenThorne, SlopeMethod::EvansYoung] {
///     let d = pqrst_3x3(&w, h, h, m).unwrap();
///     assert!((d.p - 0.3).abs() < 1e-12 && (d.q - 0.4).abs() < 1e-12, "{m:?}");
///     assert!(d.r.abs() < 1e-12 && d.s.abs() < 1e-12 && d.t.abs() < 1e-12, "{m:?}");
/// }
/// let mut hole = w;
/// hole[4] = f64::NAN;
/// assert!(pqrst_3x3(&hole, h, h, SlopeMethod::Horn).is_none());
/// ```
pub fn pqrst_3x3(w: &[f64; 9], hx: f64, hy: f64, method: SlopeMethod) -> Option<Pqrst> {
    if w.iter().any(|v| !v.is_finite()) {
        return None;
    }
    let [z1, z2, z3, z4, z5, z6, z7, z8, z9] = *w;
    Some(pqrst_unchecked(
        z1, z2, z3, z4, z5, z6, z7, z8, z9, hx, hy, method,
    ))
}

/// The squared gradient g = p² + q² below which the slope direction at the centre of the
/// nine elevations `w` is undefined for `method`: g_min = k²·σ̂²·(v/hx² + v/hy²)/2, where
/// σ̂² = RSS/3 is the elevation noise left by the least-squares quadratic through the nine
/// cells (9 cells, 6 coefficients), v·σ²/h² the variance of the estimator's p per unit
/// elevation noise (Horn 3/16, Zevenbergen–Thorne 1/2, Evans–Young 1/6: sums of squared
/// weights; docs/methods.md's 0.433, 0.707, 0.408 are their roots) and k =
/// [`curvature::GRADIENT_SIGNIFICANCE`]. NaN when a cell is not finite.
pub fn gradient_floor_3x3(w: &[f64; 9], hx: f64, hy: f64, method: SlopeMethod) -> f64 {
    let [z1, z2, z3, z4, z5, z6, z7, z8, z9] = *w;
    rss_3x3(z1, z2, z3, z4, z5, z6, z7, z8, z9) * floor_factor(hx, hy, method)
}

/// g_min per unit residual sum of squares: k²·v·(1/hx² + 1/hy²)/(2·3).
#[inline(always)]
fn floor_factor(hx: f64, hy: f64, method: SlopeMethod) -> f64 {
    let v = match method {
        SlopeMethod::Horn => 3.0 / 16.0,
        SlopeMethod::ZevenbergenThorne => 0.5,
        SlopeMethod::EvansYoung | SlopeMethod::Quadratic => 1.0 / 6.0,
    };
    let k = curvature::GRADIENT_SIGNIFICANCE;
    k * k * v * (1.0 / (hx * hx) + 1.0 / (hy * hy)) / 6.0
}

/// Residual sum of squares (m²) of the least-squares quadratic a·i² + b·j² + c·ij + d·i +
/// e·j + f through the nine cells, from the orthogonal basis 1, i, j, i² − 2/3, j² − 2/3,
/// ij of the 3x3 grid (norms 9, 6, 6, 2, 2, 4), on differences from the centre so that
/// high elevations lose nothing. Never negative; NaN when a cell is not finite.
#[allow(clippy::too_many_arguments)]
#[inline(always)]
fn rss_3x3(z1: f64, z2: f64, z3: f64, z4: f64, z5: f64, z6: f64, z7: f64, z8: f64, z9: f64) -> f64 {
    let (d1, d2, d3, d4, d6, d7, d8, d9) = (
        z1 - z5,
        z2 - z5,
        z3 - z5,
        z4 - z5,
        z6 - z5,
        z7 - z5,
        z8 - z5,
        z9 - z5,
    );
    let s0 = d1 + d2 + d3 + d4 + d6 + d7 + d8 + d9;
    let si = (d3 + d6 + d9) - (d1 + d4 + d7);
    let sj = (d1 + d2 + d3) - (d7 + d8 + d9);
    let sii = (d1 + d3 + d4 + d6 + d7 + d9) - (2.0 / 3.0) * s0;
    let sjj = (d1 + d2 + d3 + d7 + d8 + d9) - (2.0 / 3.0) * s0;
    let sij = d3 + d7 - d1 - d9;
    let ss = d1 * d1 + d2 * d2 + d3 * d3 + d4 * d4 + d6 * d6 + d7 * d7 + d8 * d8 + d9 * d9;
    let rss = ss
        - s0 * s0 / 9.0
        - (si * si + sj * sj) / 6.0
        - (sii * sii + sjj * sjj) / 2.0
        - sij * sij / 4.0;
    select(rss < 0.0, 0.0, rss)
}

/// The estimators' formulas, without the validity check.
#[allow(clippy::too_many_arguments)]
#[inline(always)]
fn pqrst_unchecked(
    z1: f64,
    z2: f64,
    z3: f64,
    z4: f64,
    z5: f64,
    z6: f64,
    z7: f64,
    z8: f64,
    z9: f64,
    hx: f64,
    hy: f64,
    method: SlopeMethod,
) -> Pqrst {
    // Second derivatives of Evans–Young (used by Horn, Evans–Young and the n = 3 fit).
    let ey_r = (z1 + z3 + z4 + z6 + z7 + z9 - 2.0 * (z2 + z5 + z8)) / (3.0 * hx * hx);
    let ey_t = (z1 + z2 + z3 + z7 + z8 + z9 - 2.0 * (z4 + z5 + z6)) / (3.0 * hy * hy);
    let s = (z3 + z7 - z1 - z9) / (4.0 * hx * hy);
    match method {
        SlopeMethod::Horn => Pqrst {
            p: ((z3 + 2.0 * z6 + z9) - (z1 + 2.0 * z4 + z7)) / (8.0 * hx),
            q: ((z1 + 2.0 * z2 + z3) - (z7 + 2.0 * z8 + z9)) / (8.0 * hy),
            r: ey_r,
            s,
            t: ey_t,
        },
        SlopeMethod::ZevenbergenThorne => Pqrst {
            p: (z6 - z4) / (2.0 * hx),
            q: (z2 - z8) / (2.0 * hy),
            r: (z4 - 2.0 * z5 + z6) / (hx * hx),
            s,
            t: (z2 - 2.0 * z5 + z8) / (hy * hy),
        },
        SlopeMethod::EvansYoung | SlopeMethod::Quadratic => Pqrst {
            p: (z3 + z6 + z9 - z1 - z4 - z7) / (6.0 * hx),
            q: (z1 + z2 + z3 - z7 - z8 - z9) / (6.0 * hy),
            r: ey_r,
            s,
            t: ey_t,
        },
    }
}

/// The nine elevations around (row, col), row-major from the north-west; `None` when the
/// window leaves `zs`.
fn window_3x3(zs: &Array2<f64>, row: usize, col: usize) -> Option<[f64; 9]> {
    let (nr, nc) = zs.dim();
    if row == 0 || col == 0 || row + 1 >= nr || col + 1 >= nc {
        return None;
    }
    let mut w = [0.0; 9];
    for (k, v) in w.iter_mut().enumerate() {
        *v = zs[[row + k / 3 - 1, col + k % 3 - 1]];
    }
    Some(w)
}

/// Derivatives for rows `rows` and columns `cols` of `zs` (elevations in metres, NaN =
/// nodata); cells whose 3x3 window leaves `zs` are NaN.
pub fn estimate_region(
    zs: &Array2<f64>,
    sizes: RowSizes,
    rows: std::ops::Range<usize>,
    cols: std::ops::Range<usize>,
    method: SlopeMethod,
) -> Derivatives {
    let dim = (rows.len(), cols.len());
    let mut d = Derivatives::nan(dim);
    let row0 = rows.start;
    let col0 = cols.start;
    let results: Vec<Vec<(Pqrst, f64)>> = (0..dim.0)
        .into_par_iter()
        .map(|i| {
            let row = row0 + i;
            let (hx, hy) = (sizes.hx(row), sizes.hy(row));
            (0..dim.1)
                .map(|j| {
                    let col = col0 + j;
                    window_3x3(zs, row, col)
                        .and_then(|w| {
                            let d = pqrst_3x3(&w, hx, hy, method)?;
                            Some((d, gradient_floor_3x3(&w, hx, hy, method)))
                        })
                        .unwrap_or((Pqrst::NAN, f64::NAN))
                })
                .collect()
        })
        .collect();
    for (i, row) in results.into_iter().enumerate() {
        for (j, (v, g_min)) in row.into_iter().enumerate() {
            d.g_min[[i, j]] = g_min;
            d.p[[i, j]] = v.p;
            d.q[[i, j]] = v.q;
            d.r[[i, j]] = v.r;
            d.s[[i, j]] = v.s;
            d.t[[i, j]] = v.t;
        }
    }
    d
}

/// Derivatives for the interior of `zs` (without `halo` cells on every side).
pub fn estimate(
    zs: &Array2<f64>,
    sizes: RowSizes,
    halo: usize,
    method: SlopeMethod,
) -> Derivatives {
    let (nr, nc) = zs.dim();
    estimate_region(zs, sizes, halo..nr - halo, halo..nc - halo, method)
}

/// Horn p and q only, written into `p` and `q` (shape of the region), faster than a full
/// set: used for VRM normals.
pub fn horn_pq_region(
    zs: &Array2<f64>,
    sizes: RowSizes,
    rows: std::ops::Range<usize>,
    cols: std::ops::Range<usize>,
) -> (Array2<f64>, Array2<f64>) {
    let dim = (rows.len(), cols.len());
    let mut p = Array2::from_elem(dim, f64::NAN);
    let mut q = Array2::from_elem(dim, f64::NAN);
    Zip::indexed(&mut p)
        .and(&mut q)
        .par_for_each(|(i, j), pv, qv| {
            let row = rows.start + i;
            let col = cols.start + j;
            let Some(w) = window_3x3(zs, row, col) else {
                return;
            };
            if let Some(d) = pqrst_3x3(&w, sizes.hx(row), sizes.hy(row), SlopeMethod::Horn) {
                *pv = d.p;
                *qv = d.q;
            }
        });
    (p, q)
}

/// A pointwise function of the partial derivatives (docs/methods.md formulas, in
/// [`super::slope`] and [`super::curvature`]).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Pointwise {
    Slope,
    Aspect,
    Northness,
    Eastness,
    Profile,
    Plan,
    Tangential,
    Mean,
    Gaussian,
}

impl Pointwise {
    /// Whether it needs second derivatives (the curvatures; Horn 1981 gives none).
    pub fn second_order(self) -> bool {
        !matches!(
            self,
            Pointwise::Slope | Pointwise::Aspect | Pointwise::Northness | Pointwise::Eastness
        )
    }

    /// Whether it needs a slope direction (kn, kc, kt): nodata where the gradient is
    /// within [`curvature::GRADIENT_SIGNIFICANCE`] standard errors of zero.
    pub fn needs_direction(self) -> bool {
        matches!(
            self,
            Pointwise::Profile | Pointwise::Plan | Pointwise::Tangential
        )
    }

    /// Whether it is undefined where the surface is flat (aspect, kn, kc, kt).
    pub fn undefined_where_flat(self) -> bool {
        self == Pointwise::Aspect || self.needs_direction()
    }

    /// The value at one cell by the closed-form formula (kn, kt, kc NaN only where g = 0).
    #[inline]
    pub fn eval(self, d: &Pqrst) -> f64 {
        match self {
            Pointwise::Slope => slope::slope_deg(d),
            Pointwise::Aspect => slope::aspect_deg(d),
            Pointwise::Northness => slope::northness(d),
            Pointwise::Eastness => slope::eastness(d),
            Pointwise::Profile => curvature::profile(d),
            Pointwise::Plan => curvature::plan(d),
            Pointwise::Tangential => curvature::tangential(d),
            Pointwise::Mean => curvature::mean(d),
            Pointwise::Gaussian => curvature::gaussian(d),
        }
    }

    /// The value at one cell as a layer carries it: kn, kt and kc are NaN where the
    /// squared gradient is at most `g_min`, the estimator's noise (see
    /// [`curvature::directional`]); every other function is [`Pointwise::eval`].
    #[inline]
    pub fn eval_gated(self, d: &Pqrst, g_min: f64) -> f64 {
        match self {
            Pointwise::Profile => curvature::directional(curvature::profile(d), d, g_min),
            Pointwise::Plan => curvature::directional(curvature::plan(d), d, g_min),
            Pointwise::Tangential => curvature::directional(curvature::tangential(d), d, g_min),
            other => other.eval(d),
        }
    }

    /// Writes the value of every cell of `d` (one chunk of a row) into `out`, one
    /// specialised loop per function so the compiler can vectorise it.
    #[inline(always)]
    fn fill(self, d: &RowDerivs, out: &mut [f32]) {
        #[inline(always)]
        fn each(d: &RowDerivs, out: &mut [f32], f: impl Fn(&Pqrst, f64) -> f64) {
            let n = out.len();
            let (p, q, r, s, t) = (&d.p[..n], &d.q[..n], &d.r[..n], &d.s[..n], &d.t[..n]);
            let g_min = &d.g_min[..n];
            for j in 0..n {
                let v = Pqrst {
                    p: p[j],
                    q: q[j],
                    r: r[j],
                    s: s[j],
                    t: t[j],
                };
                out[j] = f(&v, g_min[j]) as f32;
            }
        }
        use curvature::directional;
        match self {
            Pointwise::Slope => each(d, out, |v, _| slope::slope_deg(v)),
            Pointwise::Aspect => each(d, out, |v, _| slope::aspect_deg(v)),
            Pointwise::Northness => each(d, out, |v, _| slope::northness(v)),
            Pointwise::Eastness => each(d, out, |v, _| slope::eastness(v)),
            Pointwise::Profile => each(d, out, |v, g| directional(curvature::profile(v), v, g)),
            Pointwise::Plan => each(d, out, |v, g| directional(curvature::plan(v), v, g)),
            Pointwise::Tangential => {
                each(d, out, |v, g| directional(curvature::tangential(v), v, g))
            }
            Pointwise::Mean => each(d, out, |v, _| curvature::mean(v)),
            Pointwise::Gaussian => each(d, out, |v, _| curvature::gaussian(v)),
        }
    }
}

/// One output of the fused 3x3 pass.
#[derive(Clone, Copy, Debug)]
pub enum PointJob {
    /// A pointwise function of the derivatives from one estimator.
    Derivative(SlopeMethod, Pointwise),
    /// Riley et al. 1999 TRI.
    Tri,
}

/// Columns per chunk of the fused pass: the derivative rows of a chunk stay in L1/L2.
const CHUNK: usize = 256;

/// Derivatives of one chunk of a row, structure of arrays (NaN where any of the nine
/// cells is missing).
struct RowDerivs {
    p: Vec<f64>,
    q: Vec<f64>,
    r: Vec<f64>,
    s: Vec<f64>,
    t: Vec<f64>,
    g_min: Vec<f64>,
}

impl RowDerivs {
    fn new() -> RowDerivs {
        RowDerivs {
            p: vec![0.0; CHUNK],
            q: vec![0.0; CHUNK],
            r: vec![0.0; CHUNK],
            s: vec![0.0; CHUNK],
            t: vec![0.0; CHUNK],
            g_min: vec![0.0; CHUNK],
        }
    }

    /// Derivatives by `method` for the n cells whose windows are centred on columns
    /// c0 + 1 .. c0 + n + 1 of the three rows `a`, `b`, `c` (north to south). The same
    /// arithmetic as [`pqrst_3x3`], written over slices so it vectorises; the tests check
    /// the two agree bit for bit.
    #[inline(always)]
    fn estimate(&mut self, rows: [&[f64]; 3], n: usize, hx: f64, hy: f64, method: SlopeMethod) {
        // One specialised loop per estimator (the method is a constant inside each).
        match method {
            SlopeMethod::Horn => self.estimate_as(rows, n, hx, hy, SlopeMethod::Horn),
            SlopeMethod::ZevenbergenThorne => {
                self.estimate_as(rows, n, hx, hy, SlopeMethod::ZevenbergenThorne)
            }
            SlopeMethod::EvansYoung | SlopeMethod::Quadratic => {
                self.estimate_as(rows, n, hx, hy, SlopeMethod::EvansYoung)
            }
        }
    }

    #[inline(always)]
    fn estimate_as(&mut self, rows: [&[f64]; 3], n: usize, hx: f64, hy: f64, method: SlopeMethod) {
        let [a, b, c] = rows;
        let (a, b, c) = (&a[..n + 2], &b[..n + 2], &c[..n + 2]);
        let (p, q, r, s, t) = (
            &mut self.p[..n],
            &mut self.q[..n],
            &mut self.r[..n],
            &mut self.s[..n],
            &mut self.t[..n],
        );
        let g_min = &mut self.g_min[..n];
        let floor = floor_factor(hx, hy, method);
        for j in 0..n {
            let (z1, z2, z3) = (a[j], a[j + 1], a[j + 2]);
            let (z4, z5, z6) = (b[j], b[j + 1], b[j + 2]);
            let (z7, z8, z9) = (c[j], c[j + 1], c[j + 2]);
            // Not finite when any cell is NaN or infinite (or, for values no elevation
            // reaches, when the sum overflows: those cells are NaN too).
            let all = z1 + z2 + z3 + z4 + z5 + z6 + z7 + z8 + z9;
            let d = pqrst_unchecked(z1, z2, z3, z4, z5, z6, z7, z8, z9, hx, hy, method);
            let ok = all.is_finite();
            g_min[j] = select(
                ok,
                rss_3x3(z1, z2, z3, z4, z5, z6, z7, z8, z9) * floor,
                f64::NAN,
            );
            p[j] = select(ok, d.p, f64::NAN);
            q[j] = select(ok, d.q, f64::NAN);
            r[j] = select(ok, d.r, f64::NAN);
            s[j] = select(ok, d.s, f64::NAN);
            t[j] = select(ok, d.t, f64::NAN);
        }
    }
}

/// Riley et al. TRI of the n cells centred on columns c0 + 1 .. c0 + n + 1 of three rows;
/// NaN where any cell is missing.
#[inline(always)]
fn tri_row(rows: [&[f64]; 3], n: usize, out: &mut [f32]) {
    let [a, b, c] = rows;
    let (a, b, c) = (&a[..n + 2], &b[..n + 2], &c[..n + 2]);
    for (j, o) in out[..n].iter_mut().enumerate() {
        let w = [
            a[j],
            a[j + 1],
            a[j + 2],
            b[j],
            b[j + 1],
            b[j + 2],
            c[j],
            c[j + 1],
            c[j + 2],
        ];
        let all: f64 = w.iter().sum();
        let v = tri_3x3(&w);
        *o = select(all.is_finite(), v, f64::NAN) as f32;
    }
}

/// Stored elevations (f32 or f64) times the z-factor, as f64: exact widening, one rounding.
fn widen<T: DsmSample>(src: &[T], z_factor: f64, out: &mut [f64]) {
    for (d, &v) in out.iter_mut().zip(src) {
        *d = v.into() * z_factor;
    }
}

/// One output row of the fused pass.
struct RowTask<'a> {
    /// Rows above, at and below the centre, × z-factor (metres).
    lines: [&'a [f64]; 3],
    hx: f64,
    hy: f64,
    halo: usize,
    /// Output columns whose 3x3 window lies inside the block.
    cols: std::ops::Range<usize>,
    methods: &'a [SlopeMethod],
    jobs: &'a [PointJob],
}

impl RowTask<'_> {
    /// Fills `outs` (one row slice per job). `wide` selects the AVX2 build of the same
    /// code: AVX2 only widens the vectors (no fused multiply-add is enabled, and Rust never
    /// contracts a·b + c), so both builds give the same bits.
    fn run(&self, derivs: &mut [RowDerivs], outs: &mut [&mut [f32]], wide: bool) {
        #[cfg(target_arch = "x86_64")]
        if wide {
            // SAFETY: `wide` is true only when the CPU reports AVX2
            // (`wide_vectors_available`).
            unsafe { self.run_avx2(derivs, outs) };
            return;
        }
        let _ = wide;
        self.run_any(derivs, outs);
    }

    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx2")]
    unsafe fn run_avx2(&self, derivs: &mut [RowDerivs], outs: &mut [&mut [f32]]) {
        self.run_any(derivs, outs);
    }

    #[inline(always)]
    fn run_any(&self, derivs: &mut [RowDerivs], outs: &mut [&mut [f32]]) {
        for o in outs.iter_mut() {
            o[..self.cols.start].fill(f32::NAN);
            o[self.cols.end..].fill(f32::NAN);
        }
        let mut j0 = self.cols.start;
        while j0 < self.cols.end {
            let n = (self.cols.end - j0).min(CHUNK);
            // Window of output column j starts at input column halo + j − 1.
            let c0 = self.halo + j0 - 1;
            let three = [
                &self.lines[0][c0..],
                &self.lines[1][c0..],
                &self.lines[2][c0..],
            ];
            for (d, m) in derivs.iter_mut().zip(self.methods.iter()) {
                d.estimate(three, n, self.hx, self.hy, *m);
            }
            for (job, o) in self.jobs.iter().zip(outs.iter_mut()) {
                let out = &mut o[j0..j0 + n];
                match job {
                    PointJob::Derivative(m, f) => {
                        let k = self.methods.iter().position(|x| x == m).unwrap_or(0);
                        f.fill(&derivs[k], out);
                    }
                    PointJob::Tri => tri_row(three, n, out),
                }
            }
            j0 += n;
        }
    }
}

/// Whether the running CPU has AVX2 (x86-64 only).
pub(crate) fn wide_vectors_available() -> bool {
    #[cfg(target_arch = "x86_64")]
    {
        std::arch::is_x86_feature_detected!("avx2")
    }
    #[cfg(not(target_arch = "x86_64"))]
    {
        false
    }
}

/// Evaluates `jobs` for the interior of `z` (elevations × `z_factor`, NaN = nodata; f32 or
/// f64 as stored, widened exactly to f64, so an f64 DSM keeps its precision) in one
/// pass: each row's three input lines are converted once, each needed estimator runs once
/// per chunk of columns, and every requested output is written straight into its array.
/// Rows run in parallel; each value is a pointwise function of nine cells and the centre
/// row's cell sizes, so results do not depend on blocks or threads. Cells whose window
/// leaves `z` are NaN. O(1) per cell.
pub fn fused_3x3<T: DsmSample>(
    z: ArrayView2<T>,
    z_factor: f64,
    sizes: RowSizes,
    halo: usize,
    jobs: &[PointJob],
) -> Vec<Array2<f32>> {
    let (nr, nc) = z.dim();
    let out_r = nr - 2 * halo;
    let out_c = nc - 2 * halo;
    let mut methods: Vec<SlopeMethod> = jobs
        .iter()
        .filter_map(|j| match j {
            PointJob::Derivative(m, _) => Some(*m),
            PointJob::Tri => None,
        })
        .collect();
    methods.sort_unstable();
    methods.dedup();
    let mut outs: Vec<Array2<f32>> = jobs
        .iter()
        .map(|_| Array2::<f32>::zeros((out_r, out_c)))
        .collect();
    let wide = wide_vectors_available();
    // Output columns whose window lies inside z: col = halo + j with 1 <= col <= nc − 2.
    let j_lo = 1usize.saturating_sub(halo).min(out_c);
    let j_hi = (nc.saturating_sub(1).saturating_sub(halo)).clamp(j_lo, out_c);
    {
        let mut rows: Vec<Vec<&mut [f32]>> = (0..out_r).map(|_| Vec::new()).collect();
        for o in outs.iter_mut() {
            let flat = o.as_slice_mut().expect("fresh arrays are contiguous");
            for (i, r) in flat.chunks_mut(out_c.max(1)).enumerate().take(out_r) {
                rows[i].push(r);
            }
        }
        rows.into_par_iter()
            .enumerate()
            .with_min_len(4)
            .for_each_init(
                || {
                    let derivs: Vec<RowDerivs> = methods.iter().map(|_| RowDerivs::new()).collect();
                    (vec![vec![0.0f64; nc]; 3], derivs)
                },
                |(lines, derivs), (i, mut orow)| {
                    let row = halo + i;
                    if row == 0 || row + 1 >= nr {
                        for o in orow.iter_mut() {
                            o.fill(f32::NAN);
                        }
                        return;
                    }
                    for (line, r) in lines.iter_mut().zip(row - 1..=row + 1) {
                        let src = z.row(r);
                        match src.as_slice() {
                            Some(src) => widen(src, z_factor, line),
                            None => {
                                for (d, &v) in line.iter_mut().zip(src.iter()) {
                                    *d = v.into() * z_factor;
                                }
                            }
                        }
                    }
                    let task = RowTask {
                        lines: [&lines[0], &lines[1], &lines[2]],
                        hx: sizes.hx(row),
                        hy: sizes.hy(row),
                        halo,
                        cols: j_lo..j_hi,
                        methods: &methods,
                        jobs,
                    };
                    task.run(derivs, &mut orow, wide);
                },
            );
    }
    outs
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    fn window(f: impl Fn(f64, f64) -> f64, x0: f64, y0: f64, hx: f64, hy: f64) -> [f64; 9] {
        let mut w = [0.0; 9];
        for (k, v) in w.iter_mut().enumerate() {
            let (i, j) = ((k / 3) as f64 - 1.0, (k % 3) as f64 - 1.0);
            *v = f(x0 + j * hx, y0 - i * hy);
        }
        w
    }

    #[test]
    fn plane_is_exact_for_every_estimator() {
        // Closed form: z = 0.3x + 0.4y has p = 0.3, q = 0.4, r = s = t = 0 (docs/methods.md).
        for m in [
            SlopeMethod::Horn,
            SlopeMethod::ZevenbergenThorne,
            SlopeMethod::EvansYoung,
        ] {
            let w = window(|x, y| 0.3 * x + 0.4 * y, 5.0, -2.0, 2.0, 3.0);
            let d = pqrst_3x3(&w, 2.0, 3.0, m).unwrap();
            assert_relative_eq!(d.p, 0.3, epsilon = 1e-12);
            assert_relative_eq!(d.q, 0.4, epsilon = 1e-12);
            assert_relative_eq!(d.r, 0.0, epsilon = 1e-12);
            assert_relative_eq!(d.s, 0.0, epsilon = 1e-12);
            assert_relative_eq!(d.t, 0.0, epsilon = 1e-12);
        }
    }

    #[test]
    fn quadratic_surface_is_exact_for_zt_and_ey() {
        // Closed form: z = a x² + b y² + c xy + d x + e y: p = 2a x0 + c y0 + d,
        // q = 2b y0 + c x0 + e, r = 2a, t = 2b, s = c. Both ZT and EY are exact on
        // quadratics (docs/methods.md: an exactness test); unequal hx, hy catch axis mix-ups.
        let (a, b, c, d, e) = (0.02, -0.03, 0.05, 0.3, -0.7);
        let f = |x: f64, y: f64| a * x * x + b * y * y + c * x * y + d * x + e * y;
        let (x0, y0, hx, hy) = (3.0, 4.0, 0.7, 1.3);
        for m in [SlopeMethod::ZevenbergenThorne, SlopeMethod::EvansYoung] {
            let v = pqrst_3x3(&window(f, x0, y0, hx, hy), hx, hy, m).unwrap();
            assert_relative_eq!(v.p, 2.0 * a * x0 + c * y0 + d, epsilon = 1e-12);
            assert_relative_eq!(v.q, 2.0 * b * y0 + c * x0 + e, epsilon = 1e-12);
            assert_relative_eq!(v.r, 2.0 * a, epsilon = 1e-12);
            assert_relative_eq!(v.t, 2.0 * b, epsilon = 1e-12);
            assert_relative_eq!(v.s, c, epsilon = 1e-12);
        }
        // Horn p on a quadratic: exact as well (its error term h²(z_xxx/6 + z_xyy/4) vanishes).
        let v = pqrst_3x3(&window(f, x0, y0, hx, hy), hx, hy, SlopeMethod::Horn).unwrap();
        assert_relative_eq!(v.p, 2.0 * a * x0 + c * y0 + d, epsilon = 1e-12);
    }

    #[test]
    fn horn_weights_match_hand_computation() {
        // Hand computation from Horn's formula (docs/methods.md) on a 3x3 of integers 1..9:
        // p = ((3 + 12 + 9) − (1 + 8 + 7)) / 8 = 1, q = ((1 + 4 + 3) − (7 + 16 + 9)) / 8 = −3.
        let w = [1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0, 9.0];
        let d = pqrst_3x3(&w, 1.0, 1.0, SlopeMethod::Horn).unwrap();
        assert_eq!(d.p, 1.0);
        assert_eq!(d.q, -3.0);
    }

    #[test]
    fn one_missing_cell_gives_nothing() {
        let mut w = [1.0; 9];
        w[8] = f64::NAN;
        assert!(pqrst_3x3(&w, 1.0, 1.0, SlopeMethod::Horn).is_none());
    }

    #[test]
    fn fused_pass_equals_cell_by_cell_evaluation() {
        // Reference: pqrst_3x3, gradient_floor_3x3 and the pointwise functions cell by cell
        // (the scalar form of the docs/methods.md formulas); the row loops (the AVX2 build on a
        // CPU that has it) must give the same bits, NaN included, on a random surface with
        // holes, infinities, a z-factor and geographic rows.
        use crate::terrain::test_support::{random_dem, SplitMix64};
        let mut rng = SplitMix64::new(17);
        let mut z = random_dem(&mut rng, 37, 300, 0.03);
        z[[5, 7]] = f32::INFINITY;
        z[[9, 290]] = f32::NEG_INFINITY;
        fused_matches_reference(z.view());
    }

    #[test]
    fn fused_pass_on_f64_elevations_equals_cell_by_cell_evaluation() {
        // The same bit-for-bit check on an f64 DSM at a high elevation with detail far
        // below f32's spacing there (1500 m: 1.2e-4 m), so the f64 path is the one tested.
        use crate::terrain::test_support::{random_dem, SplitMix64};
        let mut rng = SplitMix64::new(23);
        let base = random_dem(&mut rng, 37, 300, 0.03);
        let mut z = base.mapv(|v| 1400.0 + v as f64 + 1e-7 * rng.next_f64());
        z[[5, 7]] = f64::INFINITY;
        z[[9, 290]] = f64::NEG_INFINITY;
        fused_matches_reference(z.view());
    }

    fn fused_matches_reference<T: DsmSample>(z: ArrayView2<T>) {
        let fns = [
            Pointwise::Slope,
            Pointwise::Aspect,
            Pointwise::Northness,
            Pointwise::Eastness,
            Pointwise::Profile,
            Pointwise::Plan,
            Pointwise::Tangential,
            Pointwise::Mean,
            Pointwise::Gaussian,
        ];
        let mut jobs = vec![PointJob::Tri];
        for m in [
            SlopeMethod::Horn,
            SlopeMethod::ZevenbergenThorne,
            SlopeMethod::EvansYoung,
        ] {
            jobs.extend(fns.iter().map(|f| PointJob::Derivative(m, *f)));
        }
        let zf = 0.3048;
        let cells = crate::grid::CellSizes {
            hx: (0..37).map(|i| 2.0 + 0.01 * i as f64).collect(),
            hy: vec![2.5; 37],
        };
        for halo in [0usize, 1, 3] {
            let got = fused_3x3(z, zf, RowSizes::new(&cells), halo, &jobs);
            let (nr, nc) = z.dim();
            for i in 0..nr - 2 * halo {
                for j in 0..nc - 2 * halo {
                    let (row, col) = (i + halo, j + halo);
                    let w = (row >= 1 && col >= 1 && row + 1 < nr && col + 1 < nc).then(|| {
                        let mut w = [0.0; 9];
                        for (k, v) in w.iter_mut().enumerate() {
                            *v = z[[row + k / 3 - 1, col + k % 3 - 1]].into() * zf;
                        }
                        w
                    });
                    let sizes = RowSizes::new(&cells);
                    for (job, out) in jobs.iter().zip(got.iter()) {
                        let want = match (job, w) {
                            (_, None) => f32::NAN,
                            (PointJob::Tri, Some(w)) => {
                                if w.iter().all(|v| v.is_finite()) {
                                    tri_3x3(&w) as f32
                                } else {
                                    f32::NAN
                                }
                            }
                            (PointJob::Derivative(m, f), Some(w)) => {
                                let (hx, hy) = (sizes.hx(row), sizes.hy(row));
                                let g_min = gradient_floor_3x3(&w, hx, hy, *m);
                                pqrst_3x3(&w, hx, hy, *m)
                                    .map_or(f64::NAN, |d| f.eval_gated(&d, g_min))
                                    as f32
                            }
                        };
                        let v = out[[i, j]];
                        assert!(
                            v.to_bits() == want.to_bits() || (v.is_nan() && want.is_nan()),
                            "{job:?} at ({row}, {col}), halo {halo}: {v} != {want}"
                        );
                    }
                }
            }
        }
    }

    #[test]
    fn region_ring_is_nan() {
        let zs = Array2::from_shape_fn((4, 5), |(i, j)| (i * 5 + j) as f64);
        let sizes_v = crate::grid::CellSizes::uniform(1.0, 1.0, 4);
        let d = estimate_region(&zs, RowSizes::new(&sizes_v), 0..4, 0..5, SlopeMethod::Horn);
        assert!(d.p[[0, 2]].is_nan());
        // z = 5·row + col: x = col so p = 1; y = −row so q = −5 (closed form).
        assert_relative_eq!(d.p[[1, 2]], 1.0, epsilon = 1e-12);
        assert_relative_eq!(d.q[[1, 2]], -5.0, epsilon = 1e-12);
    }
}

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
//! Estimators (formulas as in METHODS.md):
//! - Horn 1981 (Proc. IEEE 69(1), from memory): p, q from weighted differences. Horn gives
//!   no second derivatives; a Horn set carries the Evans–Young r, s, t.
//! - Zevenbergen & Thorne 1987 (Earth Surf. Process. Landforms 12, from memory): partial
//!   quartic through the nine points.
//! - Evans 1979 / Young 1978 (see Florinsky 2016): least-squares quadratic on the nine points.
//!
//! Cell sizes are those of the centre row (hx east-west, hy north-south, metres), so
//! geographic grids are handled row by row. All nine cells must be valid, else every
//! derivative is NaN. Cost: O(1) per cell; rows run in parallel (rayon); each value is a
//! pointwise function of nine cells, so results do not depend on block or thread count.

use ndarray::{Array2, Array3, ArrayView2, Axis, Zip};
use rayon::prelude::*;

use super::{RowSizes, SlopeMethod};
use crate::terrain::roughness::tri_3x3;

/// Partial derivatives at one cell (units: p, q unitless; r, s, t in 1/m).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Pqrst {
    pub p: f64,
    pub q: f64,
    pub r: f64,
    pub s: f64,
    pub t: f64,
}

impl Pqrst {
    /// All NaN.
    pub const NAN: Pqrst = Pqrst {
        p: f64::NAN,
        q: f64::NAN,
        r: f64::NAN,
        s: f64::NAN,
        t: f64::NAN,
    };
}

/// Partial derivatives over a region, one array each (NaN where unavailable).
#[derive(Clone, Debug)]
pub struct Derivatives {
    pub p: Array2<f64>,
    pub q: Array2<f64>,
    pub r: Array2<f64>,
    pub s: Array2<f64>,
    pub t: Array2<f64>,
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
pub fn pqrst_3x3(w: &[f64; 9], hx: f64, hy: f64, method: SlopeMethod) -> Option<Pqrst> {
    if w.iter().any(|v| !v.is_finite()) {
        return None;
    }
    let [z1, z2, z3, z4, z5, z6, z7, z8, z9] = *w;
    // Second derivatives of Evans–Young (used by Horn, Evans–Young and the n = 3 fit).
    let ey_r = (z1 + z3 + z4 + z6 + z7 + z9 - 2.0 * (z2 + z5 + z8)) / (3.0 * hx * hx);
    let ey_t = (z1 + z2 + z3 + z7 + z8 + z9 - 2.0 * (z4 + z5 + z6)) / (3.0 * hy * hy);
    let s = (z3 + z7 - z1 - z9) / (4.0 * hx * hy);
    Some(match method {
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
    })
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
    let (nr, nc) = zs.dim();
    let dim = (rows.len(), cols.len());
    let mut d = Derivatives::nan(dim);
    let row0 = rows.start;
    let col0 = cols.start;
    let results: Vec<Vec<Pqrst>> = (0..dim.0)
        .into_par_iter()
        .map(|i| {
            let row = row0 + i;
            let (hx, hy) = (sizes.hx(row), sizes.hy(row));
            (0..dim.1)
                .map(|j| {
                    let col = col0 + j;
                    if row == 0 || col == 0 || row + 1 >= nr || col + 1 >= nc {
                        return Pqrst::NAN;
                    }
                    let w = [
                        zs[[row - 1, col - 1]],
                        zs[[row - 1, col]],
                        zs[[row - 1, col + 1]],
                        zs[[row, col - 1]],
                        zs[[row, col]],
                        zs[[row, col + 1]],
                        zs[[row + 1, col - 1]],
                        zs[[row + 1, col]],
                        zs[[row + 1, col + 1]],
                    ];
                    pqrst_3x3(&w, hx, hy, method).unwrap_or(Pqrst::NAN)
                })
                .collect()
        })
        .collect();
    for (i, row) in results.into_iter().enumerate() {
        for (j, v) in row.into_iter().enumerate() {
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
    let (nr, nc) = zs.dim();
    let dim = (rows.len(), cols.len());
    let mut p = Array2::from_elem(dim, f64::NAN);
    let mut q = Array2::from_elem(dim, f64::NAN);
    Zip::indexed(&mut p)
        .and(&mut q)
        .par_for_each(|(i, j), pv, qv| {
            let row = rows.start + i;
            let col = cols.start + j;
            if row == 0 || col == 0 || row + 1 >= nr || col + 1 >= nc {
                return;
            }
            let w = [
                zs[[row - 1, col - 1]],
                zs[[row - 1, col]],
                zs[[row - 1, col + 1]],
                zs[[row, col - 1]],
                zs[[row, col]],
                zs[[row, col + 1]],
                zs[[row + 1, col - 1]],
                zs[[row + 1, col]],
                zs[[row + 1, col + 1]],
            ];
            if let Some(d) = pqrst_3x3(&w, sizes.hx(row), sizes.hy(row), SlopeMethod::Horn) {
                *pv = d.p;
                *qv = d.q;
            }
        });
    (p, q)
}

/// One output of the fused 3x3 pass.
#[derive(Clone, Copy)]
pub enum PointJob {
    /// A pointwise function of the derivatives from one estimator.
    Derivative(SlopeMethod, fn(&Pqrst) -> f64),
    /// Riley et al. 1999 TRI.
    Tri,
}

/// Evaluates `jobs` for the interior of `z` (elevations × `z_factor`, NaN = nodata) in one
/// pass: each cell's nine elevations are read once, each needed estimator runs once, and
/// every requested output is written. Rows run in parallel; each value is a pointwise
/// function of nine cells and the centre row's cell sizes. O(1) per cell.
pub fn fused_3x3(
    z: ArrayView2<f32>,
    z_factor: f64,
    sizes: RowSizes,
    halo: usize,
    jobs: &[PointJob],
) -> Vec<Array2<f32>> {
    let (nr, nc) = z.dim();
    let out_r = nr - 2 * halo;
    let out_c = nc - 2 * halo;
    let k = jobs.len();
    let mut methods: Vec<SlopeMethod> = jobs
        .iter()
        .filter_map(|j| match j {
            PointJob::Derivative(m, _) => Some(*m),
            PointJob::Tri => None,
        })
        .collect();
    methods.sort_unstable();
    methods.dedup();
    let slot: Vec<usize> = jobs
        .iter()
        .map(|j| match j {
            PointJob::Derivative(m, _) => methods.iter().position(|x| x == m).unwrap_or(0),
            PointJob::Tri => 0,
        })
        .collect();
    let mut buf = Array3::<f32>::from_elem((out_r, k, out_c), f32::NAN);
    buf.axis_iter_mut(Axis(0))
        .into_par_iter()
        .enumerate()
        .for_each(|(i, mut orow)| {
            let row = halo + i;
            if row == 0 || row + 1 >= nr {
                return;
            }
            let (hx, hy) = (sizes.hx(row), sizes.hy(row));
            let lines: Vec<Vec<f64>> = (row - 1..=row + 1)
                .map(|r| z.row(r).iter().map(|&v| v as f64 * z_factor).collect())
                .collect();
            let (a, b, c) = (&lines[0], &lines[1], &lines[2]);
            let mut d = [Pqrst::NAN; 3];
            for j in 0..out_c {
                let col = halo + j;
                if col == 0 || col + 1 >= nc {
                    continue;
                }
                let w = [
                    a[col - 1],
                    a[col],
                    a[col + 1],
                    b[col - 1],
                    b[col],
                    b[col + 1],
                    c[col - 1],
                    c[col],
                    c[col + 1],
                ];
                if w.iter().any(|v| v.is_nan()) {
                    continue;
                }
                for (dk, m) in d.iter_mut().zip(methods.iter()) {
                    *dk = pqrst_3x3(&w, hx, hy, *m).unwrap_or(Pqrst::NAN);
                }
                for (f, job) in jobs.iter().enumerate() {
                    let v = match job {
                        PointJob::Derivative(_, func) => func(&d[slot[f]]),
                        PointJob::Tri => tri_3x3(&w),
                    };
                    orow[[f, j]] = v as f32;
                }
            }
        });
    (0..k)
        .map(|f| buf.index_axis(Axis(1), f).to_owned())
        .collect()
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
        // Closed form: z = 0.3x + 0.4y has p = 0.3, q = 0.4, r = s = t = 0 (METHODS.md).
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
        // quadratics (METHODS.md: an exactness test); unequal hx, hy catch axis mix-ups.
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
        // Hand computation from Horn's formula (METHODS.md) on a 3x3 of integers 1..9:
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

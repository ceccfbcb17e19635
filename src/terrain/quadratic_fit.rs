//! Multi-scale derivatives from a least-squares quadratic fitted over an n x n window
//! (Wood 1996, PhD thesis, University of Leicester).
//!
//! Fit z = A·i² + B·j² + C·i·j + D·i + E·j + F over the (2kx+1) x (2ky+1) cells around the
//! centre, i = column offset (east), j = row offset (south), with kx = ⌊r/hx⌋ and
//! ky = ⌊r/hy⌋ (at least 1) at the centre row. On the symmetric window the normal equations
//! split (docs/methods.md): D = Σi·z/Σi², E = Σj·z/Σj², C = Σij·z/Σi²j², and A, B, F solve
//! [[Σi⁴, Σi²j², Σi²], [Σi²j², Σj⁴, Σj²], [Σi², Σj², N]]·[A, B, F] = [Σi²z, Σj²z, Σz],
//! where the coordinate sums are closed forms (Σ_{−k..k} i² = k(k+1)(2k+1)/3,
//! Σ i⁴ = k(k+1)(2k+1)(3k²+3k−1)/15). With x = i·hx and y = −j·hy (y north):
//! p = D/hx, q = −E/hy, r = 2A/hx², t = 2B/hy², s = −C/(hx·hy).
//!
//! The z moments come from exact integer window sums of quantised elevations (see
//! [`super::window_sums`]): horizontal row-prefix differences, then vertical prefix
//! differences, so the cost per cell is O(1) whatever n, and results do not depend on the
//! block layout. Every cell of the window must be valid, else NaN. With n = 3 the fit
//! reproduces Evans–Young.
//!
//! Precision: elevations enter the sums quantised to 2⁻²⁰ m relative to the block
//! reference (error ≤ 0.48 µm per cell, whatever the DSM's storage type), so an f64 DSM
//! keeps its precision down to that quantum. The quantum adds to r a noise of standard
//! deviation 2σq/(√qx·hx²), σq = 2⁻²⁰/√12 m = 2.75·10⁻⁷ m, qx = Σ(i² − mean i²)² over
//! the window: 1.6·10⁻⁴ 1/m at n = 3 and h = 5 cm, falling about as n⁻³ for larger
//! windows, and below the f32 storage floor of any site higher than 16 m.
//!
//! The fit also gives the residual sum of squares RSS (from Σz², exact in integers), and so
//! the elevation noise σ̂² = RSS/(N − 6) and the squared gradient below which the slope
//! direction is noise: g_min = k²·σ̂²·(1/(Σi²·hx²) + 1/(Σj²·hy²))/2 (see
//! [`super::curvature::directional`]).

use ndarray::Array2;
use rayon::prelude::*;

use super::derivatives::Derivatives;
use super::window_sums::{quantise, Z_QUANTUM_M};
use super::{radius_cells, RowSizes};

fn sum_i2(k: usize) -> f64 {
    let k = k as f64;
    k * (k + 1.0) * (2.0 * k + 1.0) / 3.0
}

fn sum_i4(k: usize) -> f64 {
    let k = k as f64;
    k * (k + 1.0) * (2.0 * k + 1.0) * (3.0 * k * k + 3.0 * k - 1.0) / 15.0
}

fn det3(a: [[f64; 3]; 3]) -> f64 {
    a[0][0] * (a[1][1] * a[2][2] - a[1][2] * a[2][1])
        - a[0][1] * (a[1][0] * a[2][2] - a[1][2] * a[2][0])
        + a[0][2] * (a[1][0] * a[2][1] - a[1][1] * a[2][0])
}

/// Half-widths (kx, ky) of the fit window for radius `r` at a centre row's cell sizes.
pub fn fit_half_widths(r: f64, hx: f64, hy: f64) -> (usize, usize) {
    (radius_cells(r, hx).max(1), radius_cells(r, hy).max(1))
}

/// Derivatives for the interior of `zs` (metres, NaN = nodata) from the quadratic fitted
/// over the window of radius `r` metres.
pub fn fit(
    zs: &Array2<f64>,
    sizes: RowSizes,
    halo: usize,
    r: f64,
    reference_z: f64,
) -> Derivatives {
    let (nr, nc) = zs.dim();
    let out_r = nr - 2 * halo;
    let out_c = nc - 2 * halo;
    let mut d = Derivatives::nan((out_r, out_c));
    let q: Array2<Option<i64>> = zs.mapv(|v| quantise(v - reference_z));
    let ks: Vec<(usize, usize)> = (0..out_r)
        .map(|i| fit_half_widths(r, sizes.hx(halo + i), sizes.hy(halo + i)))
        .collect();
    let mut kxs: Vec<usize> = ks.iter().map(|k| k.0).collect();
    kxs.sort_unstable();
    kxs.dedup();
    for kx in kxs {
        // Horizontal sums per row over output columns: count, Σz, Σi·z, Σi²·z, Σz² (exact:
        // |z| ≤ 2³⁶ quanta, so z² ≤ 2⁷² and a row's prefix of z² stays far below 2¹²⁷).
        let horiz: Vec<[Vec<i128>; 5]> = (0..nr)
            .into_par_iter()
            .map(|row| {
                let mut pm = vec![0i128; nc + 1];
                let mut pz = vec![0i128; nc + 1];
                let mut pcz = vec![0i128; nc + 1];
                let mut pc2z = vec![0i128; nc + 1];
                let mut pz2 = vec![0i128; nc + 1];
                for c in 0..nc {
                    let (m, v) = match q[[row, c]] {
                        Some(v) => (1, i128::from(v)),
                        None => (0, 0),
                    };
                    let ci = c as i128;
                    pm[c + 1] = pm[c] + m;
                    pz[c + 1] = pz[c] + v;
                    pcz[c + 1] = pcz[c] + ci * v;
                    pc2z[c + 1] = pc2z[c] + ci * ci * v;
                    pz2[c + 1] = pz2[c] + v * v;
                }
                let mut out: [Vec<i128>; 5] = Default::default();
                for o in out.iter_mut() {
                    o.reserve(out_c);
                }
                for j in 0..out_c {
                    let c0 = (halo + j) as i128;
                    let a = (halo + j).saturating_sub(kx);
                    let b = (halo + j + kx + 1).min(nc);
                    let m = pm[b] - pm[a];
                    let z = pz[b] - pz[a];
                    let cz = pcz[b] - pcz[a];
                    let c2z = pc2z[b] - pc2z[a];
                    out[0].push(m);
                    out[1].push(z);
                    out[2].push(cz - c0 * z);
                    out[3].push(c2z - 2 * c0 * cz + c0 * c0 * z);
                    out[4].push(pz2[b] - pz2[a]);
                }
                out
            })
            .collect();
        // Vertical prefix tables: m, z, ρz, ρ²z, iz, ρ·iz, i²z, z².
        let mut tabs: Vec<Array2<i128>> = (0..8).map(|_| Array2::zeros((nr + 1, out_c))).collect();
        tabs.par_iter_mut().enumerate().for_each(|(k, t)| {
            for (row, h) in horiz.iter().enumerate() {
                let rho = row as i128;
                for j in 0..out_c {
                    let v = match k {
                        0 => h[0][j],
                        1 => h[1][j],
                        2 => rho * h[1][j],
                        3 => rho * rho * h[1][j],
                        4 => h[2][j],
                        5 => rho * h[2][j],
                        6 => h[3][j],
                        _ => h[4][j],
                    };
                    t[[row + 1, j]] = t[[row, j]] + v;
                }
            }
        });
        let rows: Vec<usize> = (0..out_r).filter(|&i| ks[i].0 == kx).collect();
        let results: Vec<(usize, Vec<[f64; 6]>)> = rows
            .into_par_iter()
            .map(|i| {
                let ky = ks[i].1;
                let centre = halo + i;
                let (hx, hy) = (sizes.hx(centre), sizes.hy(centre));
                let nan = [f64::NAN; 6];
                if centre < ky || centre + ky >= nr {
                    return (i, vec![nan; out_c]);
                }
                let (top, bottom) = (centre - ky, centre + ky + 1);
                let r0 = centre as i128;
                let (nxw, nyw) = (2 * kx + 1, 2 * ky + 1);
                let full = (nxw * nyw) as i128;
                let (si2x, si2y) = (sum_i2(kx), sum_i2(ky));
                let (si4x, si4y) = (sum_i4(kx), sum_i4(ky));
                let (nxf, nyf) = (nxw as f64, nyw as f64);
                let x2 = si2x * nyf;
                let y2 = si2y * nxf;
                let x4 = si4x * nyf;
                let y4 = si4y * nxf;
                let x2y2 = si2x * si2y;
                let n = nxf * nyf;
                let mat = [[x4, x2y2, x2], [x2y2, y4, y2], [x2, y2, n]];
                let det = det3(mat);
                // The orthogonal basis 1, i, j, ij, i² − mx, j² − my of the window, for the
                // residual: mx = Σi²/nx per row, norms x2, y2, x2y2, qx, qy.
                let (mx, my) = (si2x / nxf, si2y / nyf);
                let qx = nyf * (si4x - si2x * si2x / nxf);
                let qy = nxf * (si4y - si2y * si2y / nyf);
                let k = super::curvature::GRADIENT_SIGNIFICANCE;
                let floor =
                    k * k * (1.0 / (x2 * hx * hx) + 1.0 / (y2 * hy * hy)) / (2.0 * (n - 6.0));
                let row: Vec<[f64; 6]> = (0..out_c)
                    .map(|j| {
                        let dlt = |k: usize| tabs[k][[bottom, j]] - tabs[k][[top, j]];
                        if dlt(0) != full {
                            return nan;
                        }
                        let sz = dlt(1);
                        let sy = dlt(2) - r0 * sz;
                        let syy = dlt(3) - 2 * r0 * dlt(2) + r0 * r0 * sz;
                        let sx = dlt(4);
                        let sxy = dlt(5) - r0 * sx;
                        let sxx = dlt(6);
                        let m = |v: i128| v as f64 * Z_QUANTUM_M;
                        let dcoef = m(sx) / x2;
                        let ecoef = m(sy) / y2;
                        let ccoef = m(sxy) / x2y2;
                        let rhs = [m(sxx), m(syy), m(sz)];
                        let solve = |col: usize| {
                            let mut a = mat;
                            for (rr, v) in rhs.iter().enumerate() {
                                a[rr][col] = *v;
                            }
                            det3(a) / det
                        };
                        let (acoef, bcoef) = (solve(0), solve(1));
                        // RSS = Σ(z − z̄)² − the squared projections on i, j, ij, i² − mx,
                        // j² − my; the centred sum of squares is exact in integers
                        // (full·Σz² ≤ 2²⁶·2²⁶·2⁷² = 2¹²⁴).
                        let centred = (full * dlt(7) - sz * sz) as f64 / n;
                        let (fx, fy, fxy) = (sx as f64, sy as f64, sxy as f64);
                        let fii = sxx as f64 - mx * sz as f64;
                        let fjj = syy as f64 - my * sz as f64;
                        let rss = centred
                            - fx * fx / x2
                            - fy * fy / y2
                            - fxy * fxy / x2y2
                            - fii * fii / qx
                            - fjj * fjj / qy;
                        let rss = rss.max(0.0) * Z_QUANTUM_M * Z_QUANTUM_M;
                        [
                            dcoef / hx,
                            -ecoef / hy,
                            2.0 * acoef / (hx * hx),
                            -ccoef / (hx * hy),
                            2.0 * bcoef / (hy * hy),
                            rss * floor,
                        ]
                    })
                    .collect();
                (i, row)
            })
            .collect();
        for (i, row) in results {
            for (j, v) in row.into_iter().enumerate() {
                d.p[[i, j]] = v[0];
                d.q[[i, j]] = v[1];
                d.r[[i, j]] = v[2];
                d.s[[i, j]] = v[3];
                d.t[[i, j]] = v[4];
                d.g_min[[i, j]] = v[5];
            }
        }
    }
    d
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::grid::CellSizes;
    use crate::terrain::derivatives::estimate;
    use crate::terrain::test_support::{random_dem, sample, SplitMix64};
    use crate::terrain::SlopeMethod;
    use approx::assert_relative_eq;

    #[test]
    fn coordinate_sums_closed_form() {
        // Direct sums against the closed forms.
        for k in 0..12usize {
            let s2: f64 = (-(k as i64)..=k as i64).map(|i| (i * i) as f64).sum();
            let s4: f64 = (-(k as i64)..=k as i64)
                .map(|i| (i * i * i * i) as f64)
                .sum();
            assert_eq!(sum_i2(k), s2);
            assert_relative_eq!(sum_i4(k), s4, epsilon = 1e-9);
        }
    }

    #[test]
    fn paraboloid_is_recovered_exactly_at_every_scale() {
        // A quadratic surface is its own least-squares quadratic (closed form): p, q, r,
        // s, t exact at the centre of every window size, with unequal hx, hy.
        let (a, b, c, dd, e) = (0.01, 0.02, -0.015, 0.2, -0.1);
        let (hx, hy) = (0.5, 0.8);
        let z = sample(41, 41, hx, hy, |x, y| {
            a * x * x + b * y * y + c * x * y + dd * x + e * y + 50.0
        });
        for r in [0.8, 2.0, 5.0] {
            let halo = 14;
            let cells = CellSizes::uniform(hx, hy, 41);
            let zs = z.mapv(|v| v as f64);
            let d = fit(&zs, RowSizes::new(&cells), halo, r, 50.0);
            // Output centre (6, 6) is block (20, 20), the origin of the sampled surface.
            let v = d.at(6, 6);
            assert_relative_eq!(v.p, dd, epsilon = 2e-5);
            assert_relative_eq!(v.q, e, epsilon = 2e-5);
            assert_relative_eq!(v.r, 2.0 * a, epsilon = 2e-5);
            assert_relative_eq!(v.t, 2.0 * b, epsilon = 2e-5);
            assert_relative_eq!(v.s, c, epsilon = 2e-5);
        }
    }

    #[test]
    fn three_by_three_fit_is_evans_young() {
        // docs/methods.md: with n = 3 the fit reproduces Evans–Young.
        let mut rng = SplitMix64::new(21);
        let dem = random_dem(&mut rng, 12, 12, 0.0).mapv(|v| v as f64);
        let cells = CellSizes::uniform(1.3, 0.7, 12);
        let sizes = RowSizes::new(&cells);
        let f = fit(&dem, sizes, 1, 1.3, 100.0);
        let ey = estimate(&dem, sizes, 1, SlopeMethod::EvansYoung);
        for (a, b) in [
            (&f.p, &ey.p),
            (&f.q, &ey.q),
            (&f.r, &ey.r),
            (&f.s, &ey.s),
            (&f.t, &ey.t),
        ] {
            for (x, y) in a.iter().zip(b.iter()) {
                assert_relative_eq!(*x, *y, epsilon = 1e-5, max_relative = 1e-5);
            }
        }
    }
}

//! The scheduler: evaluates a list of [`TerrainFeature`]s over one block in one call,
//! running one pass per [`Kernel`] kind and sharing intermediates within it (one set of
//! partial derivatives per estimator and fit radius, one set of exact window sums or
//! extrema per radius).
//!
//! [`compute`] knows no quantity: it runs every pass of [`passes`] in turn, and each pass
//! takes the features whose kernel is its own. A new kind of kernel is a [`Kernel`]
//! variant, a pass function here and its line in [`passes`]; a new quantity of an
//! existing kind is only a row of the feature table and its kernel function.

use std::cell::OnceCell;
use std::collections::BTreeMap;

use ndarray::{s, Array2, ArrayView2, Zip};

use super::block::{DsmSample, RowSizes};
use super::derivatives::{self, Derivatives, PointJob};
use super::feature::TerrainFeature;
use super::params::{SlopeMethod, TerrainParams};
use super::quadratic_fit;
use super::running_extrema::Extrema;
use super::table::Kernel;
use super::vrm;
use super::window_sums::{self, CellStat, CellSums, Layout, QuantisedField, SumOptions};
use crate::grid::CellSizes;

/// One padded block as every pass sees it.
pub struct Block<'a, T> {
    /// Stored elevations with `halo` cells of context on every side (NaN = nodata).
    pub z: ArrayView2<'a, T>,
    /// Cell sizes (metres) per row of `z`.
    pub sizes: RowSizes<'a>,
    pub halo: usize,
    /// Output rows and columns (`z` without its halo).
    pub out_r: usize,
    pub out_c: usize,
    /// Global elevation offset of the window sums (see [`compute`]).
    pub reference_z: f64,
    pub params: &'a TerrainParams,
    metres: OnceCell<Array2<f64>>,
}

impl<T: DsmSample> Block<'_, T> {
    /// Elevations × z-factor in metres (f64, NaN = nodata), computed on first use.
    pub fn metres(&self) -> &Array2<f64> {
        self.metres.get_or_init(|| {
            let zf = self.params.z_factor;
            self.z.mapv(|v| v.into() * zf)
        })
    }

    /// The block's window layout for radius `r` metres.
    pub fn layout(&self, r: f64) -> Layout {
        Layout::new(self.params.shape, r, self.sizes, self.halo, self.out_r)
    }
}

/// A pass: computes, into `out[k]`, every feature `features[k]` whose kernel is its own.
pub type Pass<T> = fn(&Block<'_, T>, &[TerrainFeature], &mut [Option<Array2<f32>>]);

/// Every pass, in the order they run (the order changes no value).
pub fn passes<T: DsmSample>() -> [Pass<T>; 6] {
    [
        fused_3x3,
        fitted_derivatives,
        window_moments,
        window_extrema,
        vector_ruggedness,
        elevation,
    ]
}

/// Computes `features` for the interior of `z` (z includes `halo` cells on every side);
/// `cells` has one entry per row of `z` (metres). Returns one array per feature, each of
/// shape (z.nrows() − 2·halo, z.ncols() − 2·halo) (empty when z is smaller than its halo).
/// `reference_z` is a global elevation offset chosen by the caller, the same for every
/// block of a raster (e.g. a round number near the raster's median elevation): window sums
/// quantise z·z_factor − reference_z exactly (see [`window_sums`]).
///
/// The block's halo must be at least [`TerrainFeature::halo_px`] of every feature for the
/// interior to be complete; cells the window would need beyond the array count as nodata.
///
/// On the plane z = 0.3x + 0.4y + 100 at 1 m cells (closed forms): slope atan(0.5); TPI 0;
/// and over a square window of radius 2 m (5 x 5 cells), local relief
/// 2·2 m·(0.3 + 0.4) = 2.8 m and relative elevation half of it:
///
/// ```
/// use ndarray::Array2;
/// use terrastack::grid::CellSizes;
/// use terrastack::terrain::{compute, expand, TerrainParams, WindowShape};
///
/// let words: Vec<String> = ["slope", "tpi@2", "local_relief@2", "relative_elevation@2"]
///     .iter()
///     .map(|w| w.to_string())
///     .collect();
/// let features = expand(&words, &[]).unwrap();
/// let halo = features.iter().map(|f| f.halo_px(1.0, 1.0)).max().unwrap();
/// // Row i lies at y = −i (rows run south), column j at x = j.
/// let z = Array2::from_shape_fn((9, 9), |(i, j)| 0.3 * j as f32 - 0.4 * i as f32 + 100.0);
/// let params = TerrainParams { shape: WindowShape::Square, ..TerrainParams::default() };
/// let out = compute(&features, z.view(), &CellSizes::uniform(1.0, 1.0, 9), halo, 100.0, &params);
/// let centre = |k: usize| out[k][[2, 2]] as f64;
/// assert!((centre(0) - 0.5f64.atan().to_degrees()).abs() < 1e-4);
/// assert!(centre(1).abs() < 1e-5);
/// assert!((centre(2) - 2.8).abs() < 1e-4);
/// assert!((centre(3) - 1.4).abs() < 1e-4);
/// ```
pub fn compute<T: DsmSample>(
    features: &[TerrainFeature],
    z: ArrayView2<T>,
    cells: &CellSizes,
    halo: usize,
    reference_z: f64,
    params: &TerrainParams,
) -> Vec<Array2<f32>> {
    let (nr, nc) = z.dim();
    let out_r = nr.saturating_sub(2 * halo);
    let out_c = nc.saturating_sub(2 * halo);
    if out_r == 0 || out_c == 0 {
        return features
            .iter()
            .map(|_| Array2::zeros((out_r, out_c)))
            .collect();
    }
    let block = Block {
        z,
        sizes: RowSizes::new(cells),
        halo,
        out_r,
        out_c,
        reference_z,
        params,
        metres: OnceCell::new(),
    };
    let mut outputs: Vec<Option<Array2<f32>>> = vec![None; features.len()];
    for pass in passes::<T>() {
        if outputs.iter().all(Option::is_some) {
            break;
        }
        pass(&block, features, &mut outputs);
    }
    outputs
        .into_iter()
        .map(|o| o.expect("every kernel has a pass"))
        .collect()
}

/// Distinct values of `radius` over the features `keep` selects, in first-seen order.
fn radii_of(features: &[TerrainFeature], keep: impl Fn(&TerrainFeature) -> bool) -> Vec<f64> {
    let mut radii: Vec<f64> = Vec::new();
    for f in features.iter().filter(|f| keep(f)) {
        if let Some(r) = f.scale_m() {
            if !radii.iter().any(|x| x.to_bits() == r.to_bits()) {
                radii.push(r);
            }
        }
    }
    radii
}

/// 3x3 derivative estimators and 3x3 indices, in one fused pass over the stored values.
fn fused_3x3<T: DsmSample>(
    b: &Block<'_, T>,
    features: &[TerrainFeature],
    out: &mut [Option<Array2<f32>>],
) {
    let mut jobs: Vec<(usize, PointJob)> = Vec::new();
    for (k, f) in features.iter().enumerate() {
        match f.kernel() {
            Kernel::Index3x3(job) => jobs.push((k, job)),
            Kernel::Derivative(func) if !f.is_fitted() => {
                // `:quadratic` without a radius is the 3x3 quadratic, Evans–Young.
                let method = match f.estimator() {
                    Some(SlopeMethod::Quadratic) | None => SlopeMethod::EvansYoung,
                    Some(m) => m,
                };
                jobs.push((k, PointJob::Derivative(method, func)));
            }
            _ => {}
        }
    }
    if jobs.is_empty() {
        return;
    }
    let list: Vec<PointJob> = jobs.iter().map(|(_, j)| *j).collect();
    let res = derivatives::fused_3x3(b.z, b.params.z_factor, b.sizes, b.halo, &list);
    for ((k, _), a) in jobs.iter().zip(res) {
        out[*k] = Some(a);
    }
}

/// Key of a set of first and second derivatives: the estimator and the fit radius.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord)]
struct DerivKey {
    method: SlopeMethod,
    scale_bits: u64,
}

/// Derivatives of the multi-scale quadratic fit, one fit per radius.
fn fitted_derivatives<T: DsmSample>(
    b: &Block<'_, T>,
    features: &[TerrainFeature],
    out: &mut [Option<Array2<f32>>],
) {
    let mut derivs: BTreeMap<DerivKey, Derivatives> = BTreeMap::new();
    for (k, f) in features.iter().enumerate() {
        let (Kernel::Derivative(pointwise), true) = (f.kernel(), f.is_fitted()) else {
            continue;
        };
        let (Some(method), Some(r)) = (f.estimator(), f.scale_m()) else {
            continue;
        };
        let key = DerivKey {
            method,
            scale_bits: r.to_bits(),
        };
        let dv = derivs
            .entry(key)
            .or_insert_with(|| quadratic_fit::fit(b.metres(), b.sizes, b.halo, r, b.reference_z));
        let mut o = Array2::<f32>::zeros((b.out_r, b.out_c));
        Zip::indexed(&mut o).par_for_each(|(i, j), o| {
            *o = pointwise.eval_gated(&dv.at(i, j), dv.g_min[[i, j]]) as f32;
        });
        out[k] = Some(o);
    }
}

/// Statistics of exact window sums: one pass over the block per radius, for every
/// moment statistic of that radius together.
fn window_moments<T: DsmSample>(
    b: &Block<'_, T>,
    features: &[TerrainFeature],
    out: &mut [Option<Array2<f32>>],
) {
    let is_moment = |f: &TerrainFeature| matches!(f.kernel(), Kernel::Moments { .. });
    let radii = radii_of(features, is_moment);
    if radii.is_empty() {
        return;
    }
    let (halo, frac) = (b.halo, b.params.min_valid_fraction);
    let field = QuantisedField::new(b.metres(), b.reference_z);
    let centre = |i: usize, j: usize| -> Option<i64> {
        field.valid[[halo + i, halo + j]].then(|| field.values[0][[halo + i, halo + j]])
    };
    for r in radii {
        let mut idx: Vec<usize> = Vec::new();
        let mut opt = SumOptions {
            squares: false,
            plane: false,
        };
        let mut fns = Vec::new();
        for (k, f) in features.iter().enumerate() {
            let Kernel::Moments { sums, stat } = f.kernel() else {
                continue;
            };
            if f.scale_m().map(f64::to_bits) != Some(r.to_bits()) {
                continue;
            }
            opt.squares |= sums.squares;
            opt.plane |= sums.plane;
            idx.push(k);
            fns.push(move |i: usize, j: usize, cells: u64, s: &CellSums| {
                stat(centre(i, j), cells, s, frac)
            });
        }
        let stats: Vec<CellStat> = fns.iter().map(|f| f as CellStat).collect();
        let layout = b.layout(r);
        let sums = window_sums::WindowSums::new(&field, &layout, halo, b.out_c, opt);
        for (k, a) in idx.iter().zip(sums.map(&stats)) {
            out[*k] = Some(a.mapv(|v| v as f32));
        }
    }
}

/// Statistics of the window's exact extrema, with its valid-cell counts, per radius.
fn window_extrema<T: DsmSample>(
    b: &Block<'_, T>,
    features: &[TerrainFeature],
    out: &mut [Option<Array2<f32>>],
) {
    let is_extrema = |f: &TerrainFeature| matches!(f.kernel(), Kernel::Extrema(_));
    let radii = radii_of(features, is_extrema);
    if radii.is_empty() {
        return;
    }
    let (halo, frac) = (b.halo, b.params.min_valid_fraction);
    let zs = b.metres();
    let mask_field = QuantisedField {
        valid: zs.mapv(f64::is_finite),
        values: Vec::new(),
    };
    for r in radii {
        let layout = b.layout(r);
        let ex = Extrema::compute(zs, &layout, halo, b.out_c);
        let counts = window_sums::WindowSums::new(
            &mask_field,
            &layout,
            halo,
            b.out_c,
            SumOptions {
                squares: false,
                plane: false,
            },
        );
        let mut idx: Vec<usize> = Vec::new();
        let mut fns = Vec::new();
        for (k, f) in features.iter().enumerate() {
            let Kernel::Extrema(stat) = f.kernel() else {
                continue;
            };
            if f.scale_m().map(f64::to_bits) != Some(r.to_bits()) {
                continue;
            }
            idx.push(k);
            let ex = &ex;
            fns.push(move |i: usize, j: usize, cells: u64, s: &CellSums| {
                stat(zs[[halo + i, halo + j]], ex, i, j, cells, s.n, frac)
            });
        }
        let stats: Vec<CellStat> = fns.iter().map(|f| f as CellStat).collect();
        for (k, a) in idx.iter().zip(counts.map(&stats)) {
            out[*k] = Some(a.mapv(|v| v as f32));
        }
    }
}

/// The vector ruggedness measure, per feature.
fn vector_ruggedness<T: DsmSample>(
    b: &Block<'_, T>,
    features: &[TerrainFeature],
    out: &mut [Option<Array2<f32>>],
) {
    for (k, f) in features.iter().enumerate() {
        let (Kernel::Vrm, Some(r)) = (f.kernel(), f.scale_m()) else {
            continue;
        };
        let layout = b.layout(r);
        let v = vrm::vrm(
            b.metres(),
            b.sizes,
            &layout,
            b.halo,
            b.out_c,
            b.params.min_valid_fraction,
        );
        out[k] = Some(v.mapv(|x| x as f32));
    }
}

/// Elevation × z-factor over the block's interior.
fn elevation<T: DsmSample>(
    b: &Block<'_, T>,
    features: &[TerrainFeature],
    out: &mut [Option<Array2<f32>>],
) {
    for (k, f) in features.iter().enumerate() {
        if matches!(f.kernel(), Kernel::Elevation) {
            let h = b.halo;
            out[k] = Some(
                b.metres()
                    .slice(s![h..h + b.out_r, h..h + b.out_c])
                    .mapv(|v| v as f32),
            );
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::terrain::params::WindowShape;
    use crate::terrain::table::Quantity;
    use crate::terrain::test_support::*;
    use crate::terrain::words::expand;
    use approx::assert_relative_eq;

    fn block_run(
        feats: &[TerrainFeature],
        dem: &Array2<f32>,
        cells: &CellSizes,
        halo: usize,
        params: &TerrainParams,
        block: (usize, usize),
    ) -> Vec<Array2<f32>> {
        // Pads the DEM with a NaN halo, then computes block by block and stitches.
        let (nr, nc) = dem.dim();
        let mut padded = Array2::<f32>::from_elem((nr + 2 * halo, nc + 2 * halo), f32::NAN);
        padded
            .slice_mut(s![halo..halo + nr, halo..halo + nc])
            .assign(dem);
        let pcells = CellSizes {
            hx: (0..nr + 2 * halo)
                .map(|i| cells.hx[i.saturating_sub(halo).min(nr - 1)])
                .collect(),
            hy: (0..nr + 2 * halo)
                .map(|i| cells.hy[i.saturating_sub(halo).min(nr - 1)])
                .collect(),
        };
        let mut out: Vec<Array2<f32>> = feats.iter().map(|_| Array2::zeros((nr, nc))).collect();
        let mut r0 = 0;
        while r0 < nr {
            let h = block.0.min(nr - r0);
            let mut c0 = 0;
            while c0 < nc {
                let w = block.1.min(nc - c0);
                let view = padded.slice(s![r0..r0 + h + 2 * halo, c0..c0 + w + 2 * halo]);
                let bc = CellSizes {
                    hx: pcells.hx[r0..r0 + h + 2 * halo].to_vec(),
                    hy: pcells.hy[r0..r0 + h + 2 * halo].to_vec(),
                };
                let res = compute(feats, view, &bc, halo, 100.0, params);
                for (o, r) in out.iter_mut().zip(res) {
                    o.slice_mut(s![r0..r0 + h, c0..c0 + w]).assign(&r);
                }
                c0 += w;
            }
            r0 += h;
        }
        out
    }

    fn bits_equal(a: &Array2<f32>, b: &Array2<f32>) -> bool {
        a.dim() == b.dim()
            && a.iter()
                .zip(b.iter())
                .all(|(x, y)| x.to_bits() == y.to_bits())
    }

    #[test]
    fn blocks_and_threads_give_identical_bits() {
        // Determinism requirement: the same raster as one block and as several blocks
        // with halos, and on one thread versus several, must agree bit for bit.
        let mut rng = SplitMix64::new(7);
        let dem = random_dem(&mut rng, 37, 41, 0.05);
        // Geographic-like rows: cell widths shrink northward (row 0 is north).
        let cells = CellSizes {
            hx: (0..37).map(|i| 0.9 + 0.001 * i as f64).collect(),
            hy: vec![1.1; 37],
        };
        for shape in [WindowShape::Disc, WindowShape::Square] {
            let params = TerrainParams {
                shape,
                ..TerrainParams::default()
            };
            let feats = all_features(3.3);
            let halo = feats.iter().map(|f| f.halo_px(0.9, 1.1)).max().unwrap();
            let whole = block_run(&feats, &dem, &cells, halo, &params, (37, 41));
            let tiled = block_run(&feats, &dem, &cells, halo, &params, (10, 7));
            let pool = rayon::ThreadPoolBuilder::new()
                .num_threads(1)
                .build()
                .unwrap();
            let serial = pool.install(|| block_run(&feats, &dem, &cells, halo, &params, (13, 41)));
            for (k, f) in feats.iter().enumerate() {
                assert!(
                    bits_equal(&whole[k], &tiled[k]),
                    "{} differs between block sizes ({shape:?})",
                    f.band_name()
                );
                assert!(
                    bits_equal(&whole[k], &serial[k]),
                    "{} differs with one thread ({shape:?})",
                    f.band_name()
                );
                assert!(
                    whole[k].iter().any(|v| v.is_finite()),
                    "{} all NaN",
                    f.band_name()
                );
            }
        }
    }

    #[test]
    fn one_cell_raster() {
        // Degenerate input: a single valid cell with no neighbours.
        let z = Array2::from_elem((1, 1), 5.0f32);
        let feats = all_features(1.0);
        let mut padded = Array2::from_elem((7, 7), f32::NAN);
        padded[[3, 3]] = 5.0;
        let out = compute(
            &feats,
            padded.view(),
            &CellSizes::uniform(1.0, 1.0, 7),
            3,
            0.0,
            &TerrainParams::default(),
        );
        for (f, o) in feats.iter().zip(&out) {
            assert_eq!(o.dim(), (1, 1));
            if f.quantity() == Quantity::Elevation {
                assert_eq!(o[[0, 0]], 5.0);
            } else {
                assert!(o[[0, 0]].is_nan(), "{} should be NaN", f.band_name());
            }
        }
        // A block smaller than its halo gives empty outputs, not a panic.
        let out = compute(
            &feats,
            z.view(),
            &CellSizes::uniform(1.0, 1.0, 1),
            3,
            0.0,
            &TerrainParams::default(),
        );
        assert!(out.iter().all(|o| o.is_empty()));
    }

    #[test]
    fn all_nodata() {
        let z = Array2::from_elem((12, 12), f32::NAN);
        let feats = all_features(2.0);
        let out = compute(
            &feats,
            z.view(),
            &CellSizes::uniform(1.0, 1.0, 12),
            3,
            0.0,
            &TerrainParams::default(),
        );
        for (f, o) in feats.iter().zip(&out) {
            assert!(o.iter().all(|v| v.is_nan()), "{}", f.band_name());
        }
    }

    #[test]
    fn flat_surface() {
        // A flat surface: slope 0, aspect NaN, northness = eastness = 0, curvatures 0 or
        // NaN (kn, kt, kc undefined where the gradient vanishes), TPI, roughness, TRI,
        // VRM, relative elevation and local relief 0, DEV 0 (documented rule); relief
        // position NaN (a flat window has no position, documented rule).
        let z = Array2::from_elem((15, 15), 42.0f32);
        let feats = all_features(2.0);
        let out = compute(
            &feats,
            z.view(),
            &CellSizes::uniform(0.5, 0.5, 15),
            4,
            40.0,
            &TerrainParams::default(),
        );
        for (f, o) in feats.iter().zip(&out) {
            let v = o[[3, 3]];
            match f.quantity() {
                Quantity::Elevation => assert_eq!(v, 42.0),
                Quantity::Aspect
                | Quantity::ProfileCurvature
                | Quantity::PlanCurvature
                | Quantity::TangentialCurvature
                | Quantity::ReliefPosition => {
                    assert!(v.is_nan(), "{} = {v}", f.band_name())
                }
                _ => assert_eq!(v, 0.0, "{}", f.band_name()),
            }
        }
    }

    #[test]
    fn z_factor_scales_heights() {
        // Plane z = 0.3x + 0.4y in feet with z_factor 1 ft = 0.3048 m (international foot):
        // slope = atan(0.3048·0.5) (closed form), elevation in metres.
        let z = sample(9, 9, 1.0, 1.0, |x, y| 0.3 * x + 0.4 * y + 10.0);
        let feats = expand(&["slope".into(), "elevation".into()], &[]).unwrap();
        let p = TerrainParams {
            z_factor: 0.3048,
            ..TerrainParams::default()
        };
        let out = compute(
            &feats,
            z.view(),
            &CellSizes::uniform(1.0, 1.0, 9),
            1,
            0.0,
            &p,
        );
        assert_relative_eq!(
            out[0][[3, 3]] as f64,
            (0.3048f64 * 0.5).atan().to_degrees(),
            epsilon = 1e-4
        );
        assert_relative_eq!(out[1][[3, 3]] as f64, 10.0 * 0.3048, epsilon = 1e-5);
    }
}

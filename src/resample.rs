//! Resampling kernels: one band of any source onto a window of the target grid
//! ([`crate::target_grid`]).
//!
//! [`resample_window`] brings one band of any source onto a window of that grid. Inputs in
//! the target's CRS are resampled here in pure Rust; other CRSs go through GDAL's warper
//! (cargo feature `gdal`). The weights of a target cell are computed from that cell's
//! absolute position in the target grid, never from its place in the window, so a cell has
//! bit-for-bit the same value whichever block or thread produced it.
//!
//! Source positions: a target cell centre (x, y) falls at fractional source position
//! u = (x − x₀)/Δx, v = (y − y₀)/Δy measured from the source's corner (cell k spans
//! [k, k + 1)). Kernels and their nodata rules:
//!
//! | method | cells used | NaN (nodata or outside the source) |
//! | --- | --- | --- |
//! | nearest | the cell containing the centre: ⌊u⌋, ⌊v⌋ | that cell's value (NaN stays NaN) |
//! | bilinear | 2x2 centres around (u − ½, v − ½), linear weights | NaN if any cell with non-zero weight is NaN |
//! | cubic | 4x4 centres, Keys (1981) cubic convolution, a = −0.5 | NaN if any cell with non-zero weight is NaN |
//! | average | every cell the target cell's footprint overlaps, weighted by overlapped area | mean of the valid cells, NaN if they cover less than half the footprint |
//!
//! Bilinear and cubic interpolate with the plain (unstretched) kernel whatever the ratio of
//! cell sizes; for going coarser, `average` is the method that uses every source cell.
//! Near the source's edges the kernels of bilinear (½ cell) and cubic (1½ cells) reach
//! outside it and those target cells are NaN: no value is made up from outside the data.
//! Target cells outside the target grid (a block's halo) get values wherever the source
//! has data there. Accumulation is in f64, rounded once to f32. Cost per target cell: 1,
//! 4, 16 reads, or the number of overlapped cells for `average`.

use ndarray::{Array2, ArrayView2};
use rayon::prelude::*;

use crate::error::Result;
use crate::grid::{Grid, Window};
use crate::raster::reproject::read_reprojected;
use crate::raster::{check_band, RasterSource, Resampling};

/// Keys (1981) cubic convolution kernel with a = −0.5 (IEEE Trans. ASSP 29(6), eq. 15).
fn keys_cubic(d: f64) -> f64 {
    const A: f64 = -0.5;
    let d = d.abs();
    if d <= 1.0 {
        ((A + 2.0) * d - (A + 3.0)) * d * d + 1.0
    } else if d < 2.0 {
        ((A * d - 5.0 * A) * d + 8.0 * A) * d - 4.0 * A
    } else {
        0.0
    }
}

/// The source cells and weights for every target index along one axis.
struct AxisTaps {
    /// First source index of each target index.
    start: Vec<i64>,
    /// Number of taps of each target index.
    len: Vec<usize>,
    /// Weights, `stride` per target index.
    weights: Vec<f64>,
    stride: usize,
}

impl AxisTaps {
    /// Taps for target indices `first .. first + count` along an axis whose target cell
    /// `i` spans [t_origin + i·t_step, t_origin + (i + 1)·t_step] and whose source cell `k`
    /// spans [s_origin + k·s_step, …].
    fn new(
        method: Resampling,
        first: i64,
        count: usize,
        t_origin: f64,
        t_step: f64,
        s_origin: f64,
        s_step: f64,
    ) -> AxisTaps {
        let stride = match method {
            Resampling::Nearest => 1,
            Resampling::Bilinear => 2,
            Resampling::Cubic => 4,
            Resampling::Average => (t_step.abs() / s_step.abs()).ceil() as usize + 2,
        };
        let mut taps = AxisTaps {
            start: Vec::with_capacity(count),
            len: Vec::with_capacity(count),
            weights: vec![0.0; count * stride],
            stride,
        };
        for k in 0..count {
            let i = first + k as i64;
            let w = &mut taps.weights[k * stride..(k + 1) * stride];
            let centre = t_origin + (i as f64 + 0.5) * t_step;
            let u = (centre - s_origin) / s_step;
            let (start, len) = match method {
                Resampling::Nearest => {
                    w[0] = 1.0;
                    (u.floor() as i64, 1)
                }
                Resampling::Bilinear => {
                    let f = u - 0.5;
                    let i0 = f.floor();
                    let frac = f - i0;
                    w[0] = 1.0 - frac;
                    w[1] = frac;
                    (i0 as i64, 2)
                }
                Resampling::Cubic => {
                    let f = u - 0.5;
                    let i0 = f.floor();
                    let frac = f - i0;
                    w[0] = keys_cubic(1.0 + frac);
                    w[1] = keys_cubic(frac);
                    w[2] = keys_cubic(1.0 - frac);
                    w[3] = keys_cubic(2.0 - frac);
                    (i0 as i64 - 1, 4)
                }
                Resampling::Average => {
                    let ua = (t_origin + i as f64 * t_step - s_origin) / s_step;
                    let ub = (t_origin + (i as f64 + 1.0) * t_step - s_origin) / s_step;
                    let (lo, hi) = (ua.min(ub), ua.max(ub));
                    // Overlaps thinner than 1e-9 of a cell are rounding noise, not coverage.
                    let k0 = (lo + 1e-9).floor();
                    let k1 = (hi - 1e-9).ceil();
                    let n = ((k1 - k0) as usize).clamp(1, stride);
                    for (j, wj) in w.iter_mut().take(n).enumerate() {
                        let a = k0 + j as f64;
                        *wj = ((a + 1.0).min(hi) - a.max(lo)).max(0.0);
                    }
                    (k0 as i64, n)
                }
            };
            taps.start.push(start);
            taps.len.push(len);
        }
        taps
    }

    /// The range of source indices all taps touch, as (first, count).
    fn span(&self) -> (i64, usize) {
        let lo = self.start.iter().copied().min().unwrap_or(0);
        let hi = self
            .start
            .iter()
            .zip(&self.len)
            .map(|(s, l)| s + *l as i64)
            .max()
            .unwrap_or(0);
        (lo, (hi - lo).max(0) as usize)
    }

    fn weights(&self, k: usize) -> &[f64] {
        &self.weights[k * self.stride..k * self.stride + self.len[k]]
    }
}

/// Band `band` of `source` resampled onto `window` of `target` (see the module
/// documentation for the kernels and the nodata rule). Reads only the source cells the
/// window needs, plus the kernel's margin; NaN for nodata and outside the source.
///
/// When the source's grid is the target grid, the source's values are returned exactly.
/// A source in another CRS is warped by GDAL with the `gdal` feature and refused without
/// it, naming both CRSs.
pub fn resample_window(
    source: &dyn RasterSource,
    band: usize,
    target: &Grid,
    window: Window,
    method: Resampling,
) -> Result<Array2<f32>> {
    resample_with(source, band, target, window, method)
}

/// [`resample_window`] at float64 precision, for DSMs stored as float64 or 32-bit integers:
/// the same taps and weights, the source read with `read_window_f64`, and the result kept
/// in f64, so no elevation is rounded to float32 before the terrain kernels. Reprojection
/// through GDAL's warper (another CRS, feature `gdal`) still passes through float32.
pub fn resample_window_f64(
    source: &dyn RasterSource,
    band: usize,
    target: &Grid,
    window: Window,
    method: Resampling,
) -> Result<Array2<f64>> {
    resample_with(source, band, target, window, method)
}

/// The resampler at the precision of `T` (f32 or f64).
fn resample_with<T: Sample>(
    source: &dyn RasterSource,
    band: usize,
    target: &Grid,
    window: Window,
    method: Resampling,
) -> Result<Array2<T>> {
    check_band(source, band)?;
    let sg = source.grid();
    if !sg.crs.same_as(&target.crs) {
        return Ok(
            read_reprojected(source, band, target, window, method)?.mapv(|v| T::from_f64(v as f64))
        );
    }
    let tol = 1e-9 * target.res_x().min(target.res_y());
    if sg.same_geometry(target, tol) {
        return T::read(source, band, window);
    }
    if window.is_empty() {
        return Ok(Array2::from_elem((window.height, window.width), T::NAN));
    }
    let (tt, st) = (target.transform, sg.transform);
    let cols = AxisTaps::new(method, window.col, window.width, tt[0], tt[1], st[0], st[1]);
    let rows = AxisTaps::new(
        method,
        window.row,
        window.height,
        tt[3],
        tt[5],
        st[3],
        st[5],
    );
    let (c0, nc) = cols.span();
    let (r0, nr) = rows.span();
    let src = T::read(source, band, Window::new(c0, r0, nc, nr))?;
    Ok(apply_taps(src.view(), c0, r0, &cols, &rows, method))
}

/// A sample precision the resampler works in: taps and sums are f64 either way, and the
/// result is rounded once to `Self`.
trait Sample: Copy + Send + Sync + 'static {
    const NAN: Self;
    fn to_f64(self) -> f64;
    fn from_f64(v: f64) -> Self;
    fn read(source: &dyn RasterSource, band: usize, window: Window) -> Result<Array2<Self>>;
}

impl Sample for f32 {
    const NAN: f32 = f32::NAN;
    fn to_f64(self) -> f64 {
        self as f64
    }
    fn from_f64(v: f64) -> f32 {
        v as f32
    }
    fn read(source: &dyn RasterSource, band: usize, window: Window) -> Result<Array2<f32>> {
        source.read_window(band, window)
    }
}

impl Sample for f64 {
    const NAN: f64 = f64::NAN;
    fn to_f64(self) -> f64 {
        self
    }
    fn from_f64(v: f64) -> f64 {
        v
    }
    fn read(source: &dyn RasterSource, band: usize, window: Window) -> Result<Array2<f64>> {
        source.read_window_f64(band, window)
    }
}

fn apply_taps<T: Sample>(
    src: ArrayView2<T>,
    c0: i64,
    r0: i64,
    cols: &AxisTaps,
    rows: &AxisTaps,
    method: Resampling,
) -> Array2<T> {
    let src = src.as_standard_layout();
    let stride = src.ncols();
    let s = src.as_slice().expect("standard layout");
    let (h, w) = (rows.start.len(), cols.start.len());
    let mut out = Array2::<T>::from_elem((h, w), T::NAN);
    out.axis_iter_mut(ndarray::Axis(0))
        .into_par_iter()
        .enumerate()
        .for_each(|(ti, mut line)| {
            let wy = rows.weights(ti);
            let base = (rows.start[ti] - r0) as usize * stride;
            for (tj, o) in line.iter_mut().enumerate() {
                let wx = cols.weights(tj);
                let p = base + (cols.start[tj] - c0) as usize;
                *o = match method {
                    Resampling::Nearest => s[p],
                    Resampling::Bilinear => interpolate::<T, 2>(s, p, stride, wx, wy),
                    Resampling::Cubic => interpolate::<T, 4>(s, p, stride, wx, wy),
                    Resampling::Average => area_mean(s, p, stride, wx, wy),
                };
            }
        });
    out
}

/// Separable interpolation over a K x K neighbourhood whose north-west cell is `s[p]`.
/// The branch-free sum is used when finite; otherwise the sum is redone skipping
/// zero-weight cells, and is NaN if a cell with non-zero weight is NaN. Both sums add the
/// same terms in the same order, so a finite result is the same either way.
#[inline]
fn interpolate<T: Sample, const K: usize>(
    s: &[T],
    p: usize,
    stride: usize,
    wx: &[f64],
    wy: &[f64],
) -> T {
    let wx: &[f64; K] = wx.try_into().expect("K taps");
    let wy: &[f64; K] = wy.try_into().expect("K taps");
    let mut sum = 0.0f64;
    for (a, wa) in wy.iter().enumerate() {
        let row = &s[p + a * stride..p + a * stride + K];
        let mut row_sum = 0.0f64;
        for (wb, v) in wx.iter().zip(row) {
            row_sum += wb * v.to_f64();
        }
        sum += wa * row_sum;
    }
    if !sum.is_nan() {
        return T::from_f64(sum);
    }
    let mut sum = 0.0f64;
    for (a, &wa) in wy.iter().enumerate() {
        if wa == 0.0 {
            continue;
        }
        let mut row_sum = 0.0f64;
        for (b, &wb) in wx.iter().enumerate() {
            if wb == 0.0 {
                continue;
            }
            let v = s[p + a * stride + b].to_f64();
            if v.is_nan() {
                return T::NAN;
            }
            row_sum += wb * v;
        }
        sum += wa * row_sum;
    }
    T::from_f64(sum)
}

/// Area-weighted mean of the valid cells under a footprint; NaN when they cover less than
/// half of it.
#[inline]
fn area_mean<T: Sample>(s: &[T], p: usize, stride: usize, wx: &[f64], wy: &[f64]) -> T {
    let (mut sum, mut area, mut total) = (0.0f64, 0.0f64, 0.0f64);
    for (a, &wa) in wy.iter().enumerate() {
        let row = &s[p + a * stride..p + a * stride + wx.len()];
        for (&wb, &v) in wx.iter().zip(row) {
            let wgt = wa * wb;
            total += wgt;
            let v = v.to_f64();
            if !v.is_nan() {
                sum += wgt * v;
                area += wgt;
            }
        }
    }
    if area > 0.0 && area >= 0.5 * total {
        T::from_f64(sum / area)
    } else {
        T::NAN
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::grid::Crs;
    use crate::raster::MemoryRaster;

    fn utm_grid(w: usize, h: usize, x0: f64, y0: f64, res: f64) -> Grid {
        Grid::new(w, h, [x0, res, 0.0, y0, 0.0, -res], Crs::from_epsg(32633)).unwrap()
    }

    #[test]
    fn float64_dsm_is_resampled_without_rounding_to_float32() {
        // Closed form: bilinear interpolation reproduces a plane exactly, so resampling a
        // float64 plane at 1500 m onto a grid offset by a third of a cell must give the
        // plane to f64 rounding. Through float32 the same cells would be off by up to
        // ulp(1500)/2 = 6.1e-5 m.
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("dsm64.tif");
        let src_grid = utm_grid(40, 30, 500_000.0, 4_000_000.0, 0.05);
        let plane = |x: f64, y: f64| {
            1500.0 + 0.123456789 * (x - 500_000.0) - 0.0987654321 * (y - 4_000_000.0)
        };
        let data = Array2::from_shape_fn((30, 40), |(r, c)| {
            let (x, y) = src_grid.cell_centre(c as f64, r as f64);
            plane(x, y)
        });
        crate::raster::geotiff::write_geotiff(
            &path,
            &src_grid,
            &[data.view()],
            &["elevation"],
            &crate::raster::geotiff::WriteOptions {
                sample_type: crate::raster::SampleType::F64,
                ..Default::default()
            },
        )
        .unwrap();
        let source = crate::raster::open(&path).unwrap();
        let target = utm_grid(
            30,
            20,
            500_000.0 + 0.05 / 3.0,
            4_000_000.0 - 0.05 / 3.0,
            0.05,
        );
        let w = Window::new(0, 0, 30, 20);
        let z64 =
            resample_window_f64(source.as_ref(), 1, &target, w, Resampling::Bilinear).unwrap();
        let z32 = resample_window(source.as_ref(), 1, &target, w, Resampling::Bilinear).unwrap();
        let (mut worst64, mut worst32) = (0.0f64, 0.0f64);
        for ((r, c), &v) in z64.indexed_iter() {
            let (x, y) = target.cell_centre(c as f64, r as f64);
            if v.is_nan() {
                continue;
            }
            worst64 = worst64.max((v - plane(x, y)).abs());
            worst32 = worst32.max((z32[[r, c]] as f64 - plane(x, y)).abs());
        }
        assert!(worst64 < 1e-9, "f64 resampling error {worst64}");
        assert!(
            worst32 > 1e-6,
            "the f32 path rounds ({worst32}), or the test proves nothing"
        );
    }

    /// A source whose value at cell centre (x, y) is the plane 2x + 3y + 5.
    fn plane_source(grid: &Grid) -> MemoryRaster {
        let data = Array2::from_shape_fn((grid.height, grid.width), |(r, c)| {
            let (x, y) = grid.cell_centre(c as f64, r as f64);
            (2.0 * (x - 500_000.0) + 3.0 * (y - 4_000_000.0) + 5.0) as f32
        });
        MemoryRaster::new("plane.tif", grid.clone(), vec![data]).unwrap()
    }

    fn plane_at(x: f64, y: f64) -> f64 {
        2.0 * (x - 500_000.0) + 3.0 * (y - 4_000_000.0) + 5.0
    }

    #[test]
    fn keys_kernel_partition_of_unity() {
        // Keys 1981: the kernel interpolates (1 at 0, 0 at ±1, ±2) and its taps sum to 1.
        assert_eq!(keys_cubic(0.0), 1.0);
        assert_eq!(keys_cubic(1.0), 0.0);
        assert_eq!(keys_cubic(2.0), 0.0);
        for f in [0.1, 0.25, 0.5, 0.9] {
            let s = keys_cubic(1.0 + f) + keys_cubic(f) + keys_cubic(1.0 - f) + keys_cubic(2.0 - f);
            assert!((s - 1.0).abs() < 1e-15);
        }
        // Worked by hand at d = 0.5: (1.5·0.5 − 2.5)·0.25 + 1 = 0.5625; d = 1.5: −0.0625.
        assert!((keys_cubic(0.5) - 0.5625).abs() < 1e-15);
        assert!((keys_cubic(1.5) + 0.0625).abs() < 1e-15);
    }

    #[test]
    fn identical_grid_returns_source_exactly() {
        let g = utm_grid(20, 15, 500_000.0, 4_000_015.0, 1.0);
        let data = Array2::from_shape_fn((15, 20), |(r, c)| ((r * 31 + c * 7) % 13) as f32 * 0.37);
        let src = MemoryRaster::new("a.tif", g.clone(), vec![data.clone()]).unwrap();
        for m in [
            Resampling::Nearest,
            Resampling::Bilinear,
            Resampling::Cubic,
            Resampling::Average,
        ] {
            let out = resample_window(&src, 1, &g, Window::full(&g), m).unwrap();
            assert_eq!(out, data, "{m:?}");
        }
    }

    #[test]
    fn linear_methods_reproduce_a_plane() {
        // Bilinear and cubic convolution reproduce linear functions exactly (Keys 1981,
        // §III); the area mean of a plane over a cell is its value at the cell centre.
        let src_grid = utm_grid(60, 60, 500_000.0, 4_000_060.0, 1.0);
        let src = plane_source(&src_grid);
        let target = utm_grid(30, 30, 500_010.3, 4_000_049.7, 1.25);
        // Average: footprints aligned on whole source cells (2 and 3 cells wide), so the
        // area mean of cell-centre values of a plane is the plane at the footprint centre.
        let aligned2 = utm_grid(20, 20, 500_004.0, 4_000_056.0, 2.0);
        let aligned3 = utm_grid(15, 15, 500_006.0, 4_000_054.0, 3.0);
        for (m, target) in [
            (Resampling::Bilinear, &target),
            (Resampling::Cubic, &target),
            (Resampling::Average, &aligned2),
            (Resampling::Average, &aligned3),
        ] {
            let out = resample_window(&src, 1, target, Window::full(target), m).unwrap();
            for ((r, c), v) in out.indexed_iter() {
                let (x, y) = target.cell_centre(c as f64, r as f64);
                assert!(
                    (*v as f64 - plane_at(x, y)).abs() < 1e-3,
                    "{m:?} at {r},{c}: {v}"
                );
            }
        }
    }

    #[test]
    fn nearest_picks_containing_cell() {
        let src_grid = utm_grid(10, 10, 0.0, 10.0, 1.0);
        let data = Array2::from_shape_fn((10, 10), |(r, c)| (r * 10 + c) as f32);
        let src = MemoryRaster::new("n.tif", src_grid, vec![data]).unwrap();
        // Target cells of 0.8 shifted by 0.13: centre of target col 3 is 0.13 + 3.5·0.8 = 2.93 → source col 2.
        let target = utm_grid(11, 11, 0.13, 9.87, 0.8);
        let out =
            resample_window(&src, 1, &target, Window::full(&target), Resampling::Nearest).unwrap();
        assert_eq!(out[[0, 3]], 2.0);
        // Row 4: centre y = 9.87 − 4.5·0.8 = 6.27 → source row floor((10 − 6.27)/1) = 3.
        assert_eq!(out[[4, 3]], 32.0);
    }

    #[test]
    fn average_of_two_by_two_blocks() {
        // Target cells of 2 m aligned on 1 m source cells: the mean of four values (by hand).
        let src_grid = utm_grid(4, 4, 0.0, 4.0, 1.0);
        let data = Array2::from_shape_fn((4, 4), |(r, c)| (r * 4 + c) as f32);
        let src = MemoryRaster::new("a.tif", src_grid, vec![data]).unwrap();
        let target = utm_grid(2, 2, 0.0, 4.0, 2.0);
        let out =
            resample_window(&src, 1, &target, Window::full(&target), Resampling::Average).unwrap();
        assert_eq!(out, ndarray::array![[2.5f32, 4.5], [10.5, 12.5]]);
        // A 1.5 m target cell at the origin covers source (0,0) fully, (0,1) and (1,0) half,
        // (1,1) a quarter: (0·1 + 1·.5 + 4·.5 + 5·.25)/2.25 = 3.75/2.25 (by hand).
        let t2 = utm_grid(2, 2, 0.0, 4.0, 1.5);
        let out = resample_window(&src, 1, &t2, Window::full(&t2), Resampling::Average).unwrap();
        assert!((out[[0, 0]] as f64 - 3.75 / 2.25).abs() < 1e-6);
    }

    #[test]
    fn nodata_rules() {
        let src_grid = utm_grid(6, 6, 0.0, 6.0, 1.0).with_nodata(Some(-9999.0));
        let mut data = Array2::from_elem((6, 6), 1.0f32);
        data[[2, 2]] = -9999.0;
        let src = MemoryRaster::new("h.tif", src_grid, vec![data]).unwrap();
        // Half-cell shift: every target centre lies between four source centres.
        let target = utm_grid(5, 5, 0.5, 5.5, 1.0);
        let bil = resample_window(
            &src,
            1,
            &target,
            Window::full(&target),
            Resampling::Bilinear,
        )
        .unwrap();
        // The hole at source (2,2) poisons the four target cells around it, nothing else.
        assert_eq!(bil.iter().filter(|v| v.is_nan()).count(), 4);
        assert!(bil[[1, 1]].is_nan() && bil[[2, 2]].is_nan() && bil[[0, 0]] == 1.0);
        // Average over 2x2 source cells: a quarter missing keeps the mean of the rest.
        let t2 = utm_grid(3, 3, 0.0, 6.0, 2.0);
        let avg = resample_window(&src, 1, &t2, Window::full(&t2), Resampling::Average).unwrap();
        assert_eq!(avg[[1, 1]], 1.0);
        // The edge: a half-shifted target's last column reaches outside the source.
        let t3 = utm_grid(6, 6, 0.4, 6.0, 1.0);
        let bil = resample_window(&src, 1, &t3, Window::full(&t3), Resampling::Bilinear).unwrap();
        assert!(bil[[0, 5]].is_nan() && bil[[0, 4]] == 1.0);
        let near = resample_window(&src, 1, &t3, Window::full(&t3), Resampling::Nearest).unwrap();
        assert!(near[[0, 5]] == 1.0 && near[[2, 2]].is_nan() && near[[2, 1]] == 1.0);
    }

    #[test]
    fn zero_weight_neighbours_do_not_poison() {
        // A target on the source's lattice but shifted by one cell: every centre coincides
        // with a source centre, so each value is that cell's own (weights 1 and 0), even
        // beside a NaN column or the source's edge.
        let src_grid = utm_grid(6, 6, 0.0, 6.0, 1.0);
        let mut data = Array2::from_shape_fn((6, 6), |(r, c)| (r * 6 + c) as f32 + 0.25);
        data.column_mut(3).fill(f32::NAN);
        let src = MemoryRaster::new("z.tif", src_grid, vec![data.clone()]).unwrap();
        let target = utm_grid(5, 5, 1.0, 5.0, 1.0);
        for m in [
            Resampling::Bilinear,
            Resampling::Cubic,
            Resampling::Nearest,
            Resampling::Average,
        ] {
            let out = resample_window(&src, 1, &target, Window::full(&target), m).unwrap();
            for ((r, c), v) in out.indexed_iter() {
                let want = data[[r + 1, c + 1]];
                assert!(
                    v.to_bits() == want.to_bits(),
                    "{m:?} at {r},{c}: {v} vs {want}"
                );
            }
        }
    }

    #[test]
    fn values_do_not_depend_on_the_window() {
        let src_grid = utm_grid(50, 40, 500_000.0, 4_000_040.0, 1.0);
        let data = Array2::from_shape_fn((40, 50), |(r, c)| {
            ((r as f32 * 0.7).sin() + (c as f32 * 0.3).cos()) * 10.0
        });
        let src = MemoryRaster::new("w.tif", src_grid, vec![data]).unwrap();
        let target = utm_grid(37, 29, 500_001.13, 4_000_038.9, 1.27);
        for m in [
            Resampling::Nearest,
            Resampling::Bilinear,
            Resampling::Cubic,
            Resampling::Average,
        ] {
            let full = resample_window(&src, 1, &target, Window::full(&target), m).unwrap();
            for (bw, bh) in [(7usize, 5usize), (16, 16), (37, 1)] {
                let mut r = 0;
                while r < target.height {
                    let mut c = 0;
                    while c < target.width {
                        let w = Window::new(
                            c as i64,
                            r as i64,
                            bw.min(target.width - c),
                            bh.min(target.height - r),
                        );
                        let part = resample_window(&src, 1, &target, w, m).unwrap();
                        for ((i, j), v) in part.indexed_iter() {
                            let f = full[[r + i, c + j]];
                            assert_eq!(v.to_bits(), f.to_bits(), "{m:?} block {bw}x{bh}");
                        }
                        c += bw;
                    }
                    r += bh;
                }
            }
            // A halo window reaching outside the target grid gives the same inner values.
            let halo = resample_window(&src, 1, &target, Window::full(&target).grow(2), m).unwrap();
            assert_eq!(halo.slice(ndarray::s![2..31, 2..39]), full.view());
        }
    }

    #[test]
    fn values_do_not_depend_on_the_thread_count() {
        let src_grid = utm_grid(80, 70, 500_000.0, 4_000_070.0, 1.0);
        let data = Array2::from_shape_fn((70, 80), |(r, c)| ((r * 17 + c * 29) % 23) as f32 * 1.7);
        let src = MemoryRaster::new("t.tif", src_grid, vec![data]).unwrap();
        let target = utm_grid(60, 50, 500_002.2, 4_000_067.6, 1.3);
        let one = rayon::ThreadPoolBuilder::new()
            .num_threads(1)
            .build()
            .unwrap();
        let three = rayon::ThreadPoolBuilder::new()
            .num_threads(3)
            .build()
            .unwrap();
        for m in [
            Resampling::Nearest,
            Resampling::Bilinear,
            Resampling::Cubic,
            Resampling::Average,
        ] {
            let run = || resample_window(&src, 1, &target, Window::full(&target), m).unwrap();
            let (a, b) = (one.install(run), three.install(run));
            assert!(
                a.iter()
                    .zip(b.iter())
                    .all(|(x, y)| x.to_bits() == y.to_bits()),
                "{m:?}"
            );
        }
    }

    #[test]
    fn other_crs_refused_without_gdal() {
        let src = plane_source(&utm_grid(4, 4, 500_000.0, 4_000_004.0, 1.0));
        let target = Grid::new(
            4,
            4,
            [15.0, 1e-5, 0.0, 36.0, 0.0, -1e-5],
            Crs::from_epsg(4326),
        )
        .unwrap();
        let r = resample_window(
            &src,
            1,
            &target,
            Window::full(&target),
            Resampling::Bilinear,
        );
        if cfg!(not(feature = "gdal")) {
            let e = r.unwrap_err().to_string();
            assert!(
                e.contains("plane.tif") && e.contains("EPSG:32633") && e.contains("EPSG:4326"),
                "{e}"
            );
            assert!(e.contains("--features gdal"), "{e}");
        }
    }

    #[test]
    fn missing_band_refused() {
        let src = plane_source(&utm_grid(4, 4, 500_000.0, 4_000_004.0, 1.0));
        let g = src.grid().clone();
        let e = resample_window(&src, 2, &g, Window::full(&g), Resampling::Nearest).unwrap_err();
        assert!(e.to_string().contains("band 2"));
    }
}

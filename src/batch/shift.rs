//! Horizontal offsets between flights, by phase correlation.
//!
//! Two co-located rasters of the same site (a terrain layer or the near-infrared band of
//! two flights, sampled onto the same cells) differ mostly by a translation when the
//! flights' georeferencing disagrees. Phase correlation (Kuglin & Hines 1975, "The phase
//! correlation image alignment method", Proc. IEEE Int. Conf. on Cybernetics and Society,
//! pp. 163–165; from memory) finds it: the normalised cross-power spectrum
//! `R = F_m · conj(F_r) / |F_m · conj(F_r)|` of the moving and reference images is a pure
//! phase ramp, whose inverse transform is a peak at the displacement. Before the transform
//! each image has its mean removed and is tapered by a 2-D Hann window, which suppresses
//! the false peak at zero that the images' periodic wrap-around would create (common
//! practice).
//!
//! The whitened spectrum gives every frequency the same weight, including those where
//! neither image holds signal and the taper's edges dominate; a Gaussian weight
//! `W(f) = exp(−|f|²/(2σ²))`, σ = [`WEIGHT_SIGMA`] cycles per cell, keeps the informative
//! low and middle frequencies (a low-pass weighting of the cross-power spectrum as in
//! Stone, Orchard, Chang & Martucci 2001, IEEE Trans. Geosci. Remote Sens. 39(10); from
//! memory). For a pure translation `d` the weighted correlation
//! `C(y) = Σ_f W(f) R(f) e^{2πi f·y}` is largest exactly at `y = d` for any symmetric
//! `W ≥ 0`, so the sub-cell offset is found by evaluating `C` on a fine lattice around the
//! integer peak with the matrix-multiply DFT of Guizar-Sicairos, Thurman & Fienup 2008,
//! "Efficient subpixel image registration algorithms", Optics Letters 33(2), 156–158
//! (from memory): first in steps of 1/20 cell over ±1 cell, then 1/500 cell over ±1/20.
//!
//! Sign convention: an estimated shift (`dcol`, `drow`) in cells means the moving image
//! shows at cell (r + drow, c + dcol) what the reference shows at (r, c); in ground terms
//! the moving flight places features `dx = dcol · cell width` east and
//! `dy = −drow · cell height` north of the reference.
//!
//! Cost: four 2-D FFTs of the window (O(n log n) in the window's cell count n); memory
//! about 48 bytes per cell.
//!
//! Whether to apply a shift ([`AlignMode`]): by default (`auto`) a flight is built on the
//! common grid moved by its shift when the shift is larger than [`MIN_APPLIED_SHIFT_CELLS`]
//! and the estimate is confident: its peak is at least [`CONFIDENCE_FACTOR`] times the
//! height the largest peak reaches by chance between unrelated images
//! ([`chance_peak`]). For unrelated images the whitened spectrum has random phases, so
//! each value of `C` is a sum of many independent terms with standard deviation
//! `s = √(Σ W²) / Σ W`, and the largest of the `N` cells of the window is about
//! `s·√(2 ln N)` (the expected maximum of N independent normal values; common practice).

use std::path::Path;

use ndarray::ArrayView2;
use rustfft::num_complex::Complex;
use rustfft::FftPlanner;

use crate::align::{resample_window, Resampling};
use crate::error::{Error, Result};
use crate::grid::{Grid, Window};
use crate::raster::RasterSource;

/// Largest side, in cells, of the window phase correlation runs on.
pub const MAX_WINDOW: usize = 1024;

/// Smallest side, in cells, that gives a meaningful correlation.
pub const MIN_WINDOW: usize = 16;

/// A displacement in cells.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct CellShift {
    /// Columns (positive east).
    pub dcol: f64,
    /// Rows (positive south).
    pub drow: f64,
    /// Height of the correlation peak, 0–1: near 1 for a clean translation, near 0 when
    /// the images share nothing.
    pub peak: f64,
}

/// Displacement of `moving` against `reference` (same shape) by phase correlation with
/// sub-cell refinement (see the module doc). NaN cells are replaced by the image's mean.
/// Errors when the shapes differ, a side is under [`MIN_WINDOW`] cells or fewer than
/// half the cells of either image are valid.
pub fn phase_correlation(reference: ArrayView2<f32>, moving: ArrayView2<f32>) -> Result<CellShift> {
    if reference.dim() != moving.dim() {
        return Err(Error::usage(format!(
            "phase correlation needs images of one shape, got {:?} and {:?}",
            reference.dim(),
            moving.dim()
        )));
    }
    let (rows, cols) = reference.dim();
    if rows < MIN_WINDOW || cols < MIN_WINDOW {
        return Err(Error::usage(format!(
            "the overlap of the flights is {cols} x {rows} cells; shift estimation needs at least {MIN_WINDOW} x {MIN_WINDOW}"
        )));
    }
    let fr = spectrum(reference)?;
    let fm = spectrum(moving)?;
    let mut cross: Vec<Complex<f64>> = fm
        .iter()
        .zip(fr.iter())
        .map(|(m, r)| {
            let g = m * r.conj();
            let norm = g.norm();
            if norm > 1e-30 {
                g / norm
            } else {
                Complex::new(0.0, 0.0)
            }
        })
        .collect();
    // Gaussian weight per frequency (see `frequency`).
    let two_s2 = 2.0 * WEIGHT_SIGMA * WEIGHT_SIGMA;
    let mut weight_sum = 0.0;
    for r in 0..rows {
        for c in 0..cols {
            let w = match (frequency(r, rows), frequency(c, cols)) {
                (Some(fr), Some(fc)) => (-(fr * fr + fc * fc) / two_s2).exp(),
                _ => 0.0,
            };
            weight_sum += w;
            cross[r * cols + c] *= w;
        }
    }
    let weighted = cross.clone();
    fft2(&mut cross, rows, cols, true);
    let (imax, _) = cross
        .iter()
        .enumerate()
        .fold((0, f64::NEG_INFINITY), |best, (i, v)| {
            if v.re > best.1 {
                (i, v.re)
            } else {
                best
            }
        });
    let wrap = |i: usize, len: usize| {
        if i > len / 2 {
            i as f64 - len as f64
        } else {
            i as f64
        }
    };
    let mut best = (wrap(imax / cols, rows), wrap(imax % cols, cols));
    let mut peak = 0.0;
    for (half, step) in [(1.0, 0.05), (0.05, 0.002)] {
        let (r, c, v) = refine(&weighted, rows, cols, best, half, step);
        best = (r, c);
        peak = v;
    }
    Ok(CellShift {
        dcol: best.1,
        drow: best.0,
        peak: peak / weight_sum,
    })
}

/// Width σ of the Gaussian frequency weight, in cycles per cell.
pub const WEIGHT_SIGMA: f64 = 0.15;

/// Shifts up to this length, in cells of the common grid, are left unapplied by `auto`
/// alignment. Change detection between co-registered images needs registration better
/// than about a fifth of a cell: Townshend, Justice, Gurney & McManus 1992 (IEEE Trans.
/// Geosci. Remote Sens. 30(5), 1054–1060) found that keeping the error in NDVI change
/// within 10 % needs a registration of 0.2 pixels or better over dense vegetation.
/// Smaller shifts are within the estimate's own error.
pub const MIN_APPLIED_SHIFT_CELLS: f64 = 0.2;

/// A peak this many times [`chance_peak`] is a confident estimate (common practice: a
/// detection threshold of a few times the noise level).
pub const CONFIDENCE_FACTOR: f64 = 3.0;

/// Whether a batch builds flights on the common grid moved by their estimated shifts.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum AlignMode {
    /// Apply a shift larger than [`MIN_APPLIED_SHIFT_CELLS`] when its estimate is
    /// confident; refuse the multi-temporal stack while a flight's shift is larger but
    /// doubtful, or could not be estimated.
    Auto,
    /// Apply every estimated shift (a flight whose shift cannot be estimated fails).
    On,
    /// Apply none: the multi-temporal stack is written as the flights are.
    Off,
}

impl AlignMode {
    /// Parse `auto`, `on` or `off`; `what` names the option in errors.
    pub fn parse(what: &str, text: &str) -> Result<AlignMode> {
        match text.trim().to_ascii_lowercase().as_str() {
            "auto" => Ok(AlignMode::Auto),
            "on" => Ok(AlignMode::On),
            "off" => Ok(AlignMode::Off),
            other => Err(Error::usage(format!("{what} {other:?} is not auto, on or off"))
                .with_fix("auto applies confident shifts larger than 0.2 cell; on applies every estimate; off applies none")),
        }
    }

    pub fn as_str(self) -> &'static str {
        match self {
            AlignMode::Auto => "auto",
            AlignMode::On => "on",
            AlignMode::Off => "off",
        }
    }
}

/// Signed frequency of FFT bin `k` of a side of `len` cells, in cycles per cell; `None`
/// for the Nyquist bin of an even side, which gets no weight so that the weighted
/// spectrum stays Hermitian.
fn frequency(k: usize, len: usize) -> Option<f64> {
    if len.is_multiple_of(2) && k == len / 2 {
        None
    } else if k > len / 2 {
        Some((k as f64 - len as f64) / len as f64)
    } else {
        Some(k as f64 / len as f64)
    }
}

/// Height of the largest correlation peak expected by chance between two unrelated images
/// of `rows` x `cols` cells (see the module doc): `√(Σ W²) / Σ W · √(2 ln N)` over the
/// same frequency weights [`phase_correlation`] uses.
pub fn chance_peak(rows: usize, cols: usize) -> f64 {
    let two_s2 = 2.0 * WEIGHT_SIGMA * WEIGHT_SIGMA;
    let (mut sum, mut sum2) = (0.0f64, 0.0f64);
    for r in 0..rows {
        for c in 0..cols {
            if let (Some(fr), Some(fc)) = (frequency(r, rows), frequency(c, cols)) {
                let w = (-(fr * fr + fc * fc) / two_s2).exp();
                sum += w;
                sum2 += w * w;
            }
        }
    }
    let n = (rows * cols).max(2) as f64;
    if sum == 0.0 {
        return 1.0;
    }
    sum2.sqrt() / sum * (2.0 * n.ln()).sqrt()
}

/// [`chance_peak`] on the window shifts are estimated on for `grid`.
pub fn chance_peak_on(grid: &Grid) -> f64 {
    let w = central_window(grid);
    chance_peak(w.height, w.width)
}

/// The maximum of the real part of `C(y, x) = Σ S(k, l) e^{2πi(k·y/rows + l·x/cols)}` over
/// the lattice `centre ± half` in steps of `step` (rows, cols), as (y, x, value): the
/// matrix-multiply DFT of Guizar-Sicairos et al. 2008. Cost O(n·(rows + cols)·m) for m
/// lattice points per axis.
fn refine(
    spectrum: &[Complex<f64>],
    rows: usize,
    cols: usize,
    centre: (f64, f64),
    half: f64,
    step: f64,
) -> (f64, f64, f64) {
    let m = (2.0 * half / step).round() as usize + 1;
    let ys: Vec<f64> = (0..m).map(|i| centre.0 - half + i as f64 * step).collect();
    let xs: Vec<f64> = (0..m).map(|i| centre.1 - half + i as f64 * step).collect();
    let signed = |k: usize, len: usize| {
        if k > len / 2 {
            k as f64 - len as f64
        } else {
            k as f64
        }
    };
    let tau = 2.0 * std::f64::consts::PI;
    // T[p][l] = Σ_k e^{2πi k y_p / rows} S[k][l]
    let mut t = vec![Complex::new(0.0, 0.0); m * cols];
    for (p, y) in ys.iter().enumerate() {
        let row_t = &mut t[p * cols..(p + 1) * cols];
        for k in 0..rows {
            let e = Complex::from_polar(1.0, tau * signed(k, rows) * y / rows as f64);
            let srow = &spectrum[k * cols..(k + 1) * cols];
            for (acc, s) in row_t.iter_mut().zip(srow) {
                *acc += e * s;
            }
        }
    }
    let ex: Vec<Complex<f64>> = xs
        .iter()
        .flat_map(|x| {
            (0..cols)
                .map(move |l| Complex::from_polar(1.0, tau * signed(l, cols) * x / cols as f64))
        })
        .collect();
    let mut best = (centre.0, centre.1, f64::NEG_INFINITY);
    for (p, y) in ys.iter().enumerate() {
        let row_t = &t[p * cols..(p + 1) * cols];
        for (q, x) in xs.iter().enumerate() {
            let e = &ex[q * cols..(q + 1) * cols];
            let v: f64 = row_t.iter().zip(e).map(|(a, b)| (a * b).re).sum();
            if v > best.2 {
                best = (*y, *x, v);
            }
        }
    }
    best
}

/// Mean-removed, Hann-tapered 2-D spectrum of `image`.
fn spectrum(image: ArrayView2<f32>) -> Result<Vec<Complex<f64>>> {
    let (rows, cols) = image.dim();
    let (sum, count) = image
        .iter()
        .filter(|v| v.is_finite())
        .fold((0.0f64, 0usize), |(s, n), v| (s + *v as f64, n + 1));
    if count * 2 < rows * cols {
        return Err(Error::usage(format!(
            "only {count} of {} cells hold data where the flights overlap; shift estimation needs at least half",
            rows * cols
        )));
    }
    let mean = sum / count as f64;
    let hann = |i: usize, len: usize| {
        0.5 - 0.5 * (2.0 * std::f64::consts::PI * i as f64 / (len - 1) as f64).cos()
    };
    let wr: Vec<f64> = (0..rows).map(|i| hann(i, rows)).collect();
    let wc: Vec<f64> = (0..cols).map(|i| hann(i, cols)).collect();
    let mut data: Vec<Complex<f64>> = Vec::with_capacity(rows * cols);
    for ((r, c), v) in image.indexed_iter() {
        let x = if v.is_finite() { *v as f64 - mean } else { 0.0 };
        data.push(Complex::new(x * wr[r] * wc[c], 0.0));
    }
    fft2(&mut data, rows, cols, false);
    Ok(data)
}

/// In-place 2-D FFT of a row-major `rows` x `cols` buffer (unnormalised; `inverse` for
/// the backward transform).
fn fft2(data: &mut [Complex<f64>], rows: usize, cols: usize, inverse: bool) {
    let mut planner = FftPlanner::<f64>::new();
    let (row_fft, col_fft) = if inverse {
        (
            planner.plan_fft_inverse(cols),
            planner.plan_fft_inverse(rows),
        )
    } else {
        (
            planner.plan_fft_forward(cols),
            planner.plan_fft_forward(rows),
        )
    };
    row_fft.process(data);
    let mut column = vec![Complex::new(0.0, 0.0); rows];
    for c in 0..cols {
        for r in 0..rows {
            column[r] = data[r * cols + c];
        }
        col_fft.process(&mut column);
        for r in 0..rows {
            data[r * cols + c] = column[r];
        }
    }
}

/// The central window of `grid`, at most [`MAX_WINDOW`] cells a side, on which shifts
/// are estimated.
pub fn central_window(grid: &Grid) -> Window {
    let w = grid.width.min(MAX_WINDOW);
    let h = grid.height.min(MAX_WINDOW);
    Window::new(
        ((grid.width - w) / 2) as i64,
        ((grid.height - h) / 2) as i64,
        w,
        h,
    )
}

/// Ground offset (east, north, in CRS units) of band `moving_band` of `moving` against
/// band `reference_band` of `reference`, both resampled bilinearly onto the central window
/// of the common `grid`, and the correlation peak height. Errors name the moving file.
pub fn estimate_ground_shift(
    reference: &dyn RasterSource,
    reference_band: usize,
    moving: &dyn RasterSource,
    moving_band: usize,
    grid: &Grid,
) -> Result<(f64, f64, f64)> {
    let window = central_window(grid);
    let a = resample_window(
        reference,
        reference_band,
        grid,
        window,
        Resampling::Bilinear,
    )?;
    let b = resample_window(moving, moving_band, grid, window, Resampling::Bilinear)?;
    let shift = phase_correlation(a.view(), b.view()).map_err(|e| in_file(e, moving.path()))?;
    Ok((
        shift.dcol * grid.res_x(),
        -shift.drow * grid.res_y(),
        shift.peak,
    ))
}

fn in_file(e: Error, path: &Path) -> Error {
    e.in_file(path)
        .with_fix("check that the flight covers the reference flight's area, or set batch.shift_layer to another layer")
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::Array2;

    /// A textured closed-form surface (micro-relief of many scales, as a DSM of grass and
    /// shrubs has): 200 plane waves with pseudo-random frequencies up to 0.35 cycles per
    /// cell, phases, and amplitudes falling as 1/frequency, so a sub-cell shift can be
    /// sampled exactly.
    fn surface(x: f64, y: f64) -> f64 {
        let mut state = 0x2545_f491_4f6c_dd1du64;
        let mut next = || {
            state ^= state << 13;
            state ^= state >> 7;
            state ^= state << 17;
            (state >> 11) as f64 / (1u64 << 53) as f64
        };
        let mut z = 0.0;
        for _ in 0..200 {
            let u = (next() - 0.5) * 0.7;
            let v = (next() - 0.5) * 0.7;
            let phase = next() * std::f64::consts::TAU;
            let amp = 1.0 / (u * u + v * v).sqrt().max(0.02);
            z += amp * (std::f64::consts::TAU * (u * x + v * y) + phase).cos();
        }
        z * 0.01
    }

    fn sampled(rows: usize, cols: usize, dcol: f64, drow: f64) -> Array2<f32> {
        // moving(r, c) = reference(r − drow, c − dcol): features appear at +drow, +dcol.
        Array2::from_shape_fn((rows, cols), |(r, c)| {
            surface(c as f64 - dcol, r as f64 - drow) as f32
        })
    }

    #[test]
    fn recovers_integer_and_sub_cell_shifts() {
        // Closed-form surface sampled at known offsets (exact by construction).
        let reference = sampled(128, 144, 0.0, 0.0);
        for &(dc, dr) in &[
            (0.0, 0.0),
            (3.0, -5.0),
            (2.4, 1.7),
            (-6.3, -0.45),
            (0.8, 4.2),
            (-1.5, 2.5),
        ] {
            let moving = sampled(128, 144, dc, dr);
            let s = phase_correlation(reference.view(), moving.view()).unwrap();
            assert!((s.dcol - dc).abs() < 0.15, "dcol {} want {dc}", s.dcol);
            assert!((s.drow - dr).abs() < 0.15, "drow {} want {dr}", s.drow);
            assert!(s.peak > 0.1, "peak {}", s.peak);
        }
    }

    #[test]
    fn identical_images_give_zero_and_full_peak() {
        let a = sampled(64, 64, 0.0, 0.0);
        let s = phase_correlation(a.view(), a.view()).unwrap();
        assert_eq!((s.dcol, s.drow), (0.0, 0.0));
        // Unit-modulus cross-power spectrum of identical images: the inverse transform is
        // a unit impulse (Kuglin & Hines 1975).
        assert!((s.peak - 1.0).abs() < 1e-9, "{}", s.peak);
    }

    #[test]
    fn survives_nodata_and_noise() {
        let reference = sampled(96, 96, 0.0, 0.0);
        let mut moving = sampled(96, 96, -2.3, 3.6);
        for ((r, c), v) in moving.indexed_iter_mut() {
            // Deterministic pseudo-noise of ±0.05 and a nodata corner.
            *v += (((r * 31 + c * 17) % 23) as f32 / 23.0 - 0.5) * 0.1;
            if r < 10 && c < 12 {
                *v = f32::NAN;
            }
        }
        let s = phase_correlation(reference.view(), moving.view()).unwrap();
        assert!(
            (s.dcol + 2.3).abs() < 0.25 && (s.drow - 3.6).abs() < 0.25,
            "{s:?}"
        );
    }

    #[test]
    fn chance_peak_bounds_unrelated_images_and_shifted_ones_clear_it() {
        // Unrelated images (independent pseudo-random noise): the peak stays below the
        // chance level times 1.5 in every trial; a shifted copy of the surface clears the
        // confidence threshold by far.
        let (rows, cols) = (96, 96);
        let chance = chance_peak(rows, cols);
        let mut state = 0x1234_5678_9abc_def1u64;
        let mut noise = || {
            Array2::from_shape_fn((rows, cols), |_| {
                state ^= state << 13;
                state ^= state >> 7;
                state ^= state << 17;
                (state >> 40) as f32 / (1u64 << 24) as f32
            })
        };
        for _ in 0..8 {
            let (a, b) = (noise(), noise());
            let s = phase_correlation(a.view(), b.view()).unwrap();
            assert!(s.peak < 1.5 * chance, "peak {} chance {chance}", s.peak);
        }
        let a = sampled(rows, cols, 0.0, 0.0);
        let b = sampled(rows, cols, 1.3, -0.6);
        let s = phase_correlation(a.view(), b.view()).unwrap();
        assert!(
            s.peak > CONFIDENCE_FACTOR * chance,
            "peak {} chance {chance}",
            s.peak
        );
        // The chance level falls as the window grows (about 1/side).
        assert!(chance_peak(512, 512) < chance_peak(64, 64) / 4.0);
        assert_eq!(
            AlignMode::parse("--align", "Auto").unwrap(),
            AlignMode::Auto
        );
        assert!(AlignMode::parse("--align", "yes").is_err());
    }

    #[test]
    fn bad_inputs_are_errors() {
        let a = sampled(32, 32, 0.0, 0.0);
        let b = sampled(32, 40, 0.0, 0.0);
        assert!(phase_correlation(a.view(), b.view())
            .unwrap_err()
            .to_string()
            .contains("one shape"));
        let small = sampled(8, 8, 0.0, 0.0);
        assert!(phase_correlation(small.view(), small.view()).is_err());
        let empty = Array2::from_elem((32, 32), f32::NAN);
        assert!(phase_correlation(a.view(), empty.view())
            .unwrap_err()
            .to_string()
            .contains("at least half"));
    }
}

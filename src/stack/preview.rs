//! `preview.png`: one thumbnail per band with its name, colour ramp and value range, so
//! the analyst can look over a stack before reading numbers.
//!
//! Thumbnails are point samples of the stack (the cell under each thumbnail pixel's
//! centre), filled block by block as the stack is computed, so the preview costs no extra
//! pass. Colours stretch between the 2nd and 98th percentiles of the thumbnail (common
//! practice for display stretches); signed quantities (TPI, curvature, …) use a diverging
//! ramp centred on zero, aspect a cyclic one. Text is drawn with a 5x7 bitmap font.

use std::fs::File;
use std::io::BufWriter;
use std::path::Path;
use std::sync::Mutex;

use ndarray::ArrayView2;

use crate::error::{Error, Result};
use crate::grid::Window;

/// Largest thumbnail side in pixels.
pub const THUMB_MAX: usize = 220;

/// How a band's values map to colours.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum RampKind {
    /// Low to high: dark slate through moss green to pale straw.
    Sequential,
    /// Negative blue, zero near white, positive rust; symmetric around 0.
    Diverging,
    /// Angles 0–360° on a closed loop of hues.
    Cyclic,
}

/// One band's thumbnail.
struct Thumb {
    name: String,
    units: String,
    ramp: RampKind,
    values: Mutex<Vec<f32>>,
}

/// Thumbnails of every band of a stack being built.
pub struct Preview {
    grid_w: usize,
    grid_h: usize,
    tw: usize,
    th: usize,
    thumbs: Vec<Thumb>,
}

impl Preview {
    /// Thumbnails for a `grid_w` x `grid_h` stack; `bands` gives (name, units, ramp).
    pub fn new(grid_w: usize, grid_h: usize, bands: Vec<(String, String, RampKind)>) -> Preview {
        let scale = (THUMB_MAX as f64 / grid_w.max(grid_h) as f64).min(1.0);
        let tw = ((grid_w as f64 * scale).round() as usize).max(1);
        let th = ((grid_h as f64 * scale).round() as usize).max(1);
        let thumbs = bands
            .into_iter()
            .map(|(name, units, ramp)| Thumb {
                name,
                units,
                ramp,
                values: Mutex::new(vec![f32::NAN; tw * th]),
            })
            .collect();
        Preview {
            grid_w,
            grid_h,
            tw,
            th,
            thumbs,
        }
    }

    /// Grid cell sampled by thumbnail pixel (i, j): the cell under the pixel's centre.
    fn source_cell(&self, i: usize, j: usize) -> (usize, usize) {
        let col = ((i as f64 + 0.5) * self.grid_w as f64 / self.tw as f64) as usize;
        let row = ((j as f64 + 0.5) * self.grid_h as f64 / self.th as f64) as usize;
        (col.min(self.grid_w - 1), row.min(self.grid_h - 1))
    }

    /// Record the cells of `window` for band `band_index` (0-based) from `data`.
    pub fn record(&self, band_index: usize, window: Window, data: ArrayView2<f32>) {
        let i_range = self.pixels_covering(window.col as usize, window.width, self.grid_w, self.tw);
        let j_range =
            self.pixels_covering(window.row as usize, window.height, self.grid_h, self.th);
        let mut values = self.thumbs[band_index].values.lock().expect("preview lock");
        for j in j_range.clone() {
            for i in i_range.clone() {
                let (col, row) = self.source_cell(i, j);
                let c = col as i64 - window.col;
                let r = row as i64 - window.row;
                if c >= 0 && r >= 0 && (c as usize) < window.width && (r as usize) < window.height {
                    values[j * self.tw + i] = data[[r as usize, c as usize]];
                }
            }
        }
    }

    /// Thumbnail pixels whose sampled cell may fall in [start, start + len).
    fn pixels_covering(
        &self,
        start: usize,
        len: usize,
        n: usize,
        t: usize,
    ) -> std::ops::Range<usize> {
        let lo = (start as f64 * t as f64 / n as f64).floor() as usize;
        let hi = (((start + len) as f64 * t as f64 / n as f64).ceil() as usize).min(t);
        lo.saturating_sub(1)..hi
    }

    /// Draw the contact sheet and write it as an RGB PNG to `path`.
    pub fn write_png(&self, path: &Path) -> Result<()> {
        let cols = (self.thumbs.len() as f64).sqrt().ceil().max(1.0) as usize;
        let cols = cols.clamp(1, 5);
        let rows = self.thumbs.len().div_ceil(cols).max(1);
        let pad = 10;
        let cell_w = self.tw.max(150) + pad;
        let cell_h = 12 + self.th + 6 + 8 + 12 + pad;
        let width = cols * cell_w + pad;
        let height = rows * cell_h + pad;
        let mut canvas = Canvas::new(width, height, [250, 250, 247]);
        for (k, thumb) in self.thumbs.iter().enumerate() {
            let x0 = pad + (k % cols) * cell_w;
            let y0 = pad + (k / cols) * cell_h;
            let values = thumb.values.lock().expect("preview lock");
            let (lo, hi) = stretch(&values, thumb.ramp);
            canvas.text(x0, y0, &fit_text(&thumb.name, cell_w - pad), [20, 20, 20]);
            let ty = y0 + 12;
            for j in 0..self.th {
                for i in 0..self.tw {
                    let v = values[j * self.tw + i];
                    canvas.put(x0 + i, ty + j, colour(v, lo, hi, thumb.ramp));
                }
            }
            // Colour bar under the thumbnail.
            let by = ty + self.th + 6;
            let bw = self.tw.max(150);
            for i in 0..bw {
                let v = lo + (hi - lo) * (i as f64 + 0.5) / bw as f64;
                for dy in 0..8 {
                    canvas.put(x0 + i, by + dy, colour(v as f32, lo, hi, thumb.ramp));
                }
            }
            let range = if lo.is_finite() && hi.is_finite() {
                format!("{} to {} {}", short(lo), short(hi), thumb.units)
            } else {
                "no valid cells".to_string()
            };
            canvas.text(x0, by + 11, &fit_text(&range, cell_w - pad), [60, 60, 60]);
        }
        let file = File::create(path).map_err(|e| Error::io(path, e))?;
        let mut encoder = png::Encoder::new(BufWriter::new(file), width as u32, height as u32);
        encoder.set_color(png::ColorType::Rgb);
        encoder.set_depth(png::BitDepth::Eight);
        let mut writer = encoder
            .write_header()
            .map_err(|e| Error::file(path, format!("cannot write PNG: {e}")))?;
        writer
            .write_image_data(&canvas.pixels)
            .map_err(|e| Error::file(path, format!("cannot write PNG: {e}")))?;
        writer
            .finish()
            .map_err(|e| Error::file(path, format!("cannot write PNG: {e}")))?;
        Ok(())
    }
}

/// Display range of a thumbnail: 2nd–98th percentile, symmetric for diverging ramps,
/// 0–360 for cyclic ones.
fn stretch(values: &[f32], ramp: RampKind) -> (f64, f64) {
    if ramp == RampKind::Cyclic {
        return (0.0, 360.0);
    }
    let mut v: Vec<f64> = values
        .iter()
        .filter(|x| x.is_finite())
        .map(|&x| x as f64)
        .collect();
    if v.is_empty() {
        return (f64::NAN, f64::NAN);
    }
    v.sort_by(|a, b| a.total_cmp(b));
    let q = |p: f64| v[((v.len() - 1) as f64 * p).round() as usize];
    let (mut lo, mut hi) = (q(0.02), q(0.98));
    if ramp == RampKind::Diverging {
        let m = lo.abs().max(hi.abs());
        lo = -m;
        hi = m;
    }
    if hi <= lo {
        hi = lo + 1e-6_f64.max(lo.abs() * 1e-6);
    }
    (lo, hi)
}

/// Anchor colours of the ramps (our own).
const SEQUENTIAL: [[f64; 3]; 5] = [
    [28.0, 34.0, 56.0],
    [42.0, 92.0, 112.0],
    [78.0, 146.0, 108.0],
    [190.0, 192.0, 98.0],
    [250.0, 238.0, 204.0],
];
const DIVERGING: [[f64; 3]; 5] = [
    [36.0, 68.0, 138.0],
    [138.0, 168.0, 204.0],
    [244.0, 244.0, 238.0],
    [214.0, 150.0, 108.0],
    [148.0, 50.0, 40.0],
];
const CYCLIC: [[f64; 3]; 5] = [
    [70.0, 90.0, 160.0],
    [90.0, 170.0, 150.0],
    [220.0, 200.0, 90.0],
    [200.0, 90.0, 80.0],
    [70.0, 90.0, 160.0],
];
const NODATA_RGB: [u8; 3] = [205, 205, 205];

fn colour(v: f32, lo: f64, hi: f64, ramp: RampKind) -> [u8; 3] {
    if !v.is_finite() || !lo.is_finite() {
        return NODATA_RGB;
    }
    let t = ((v as f64 - lo) / (hi - lo)).clamp(0.0, 1.0);
    let anchors = match ramp {
        RampKind::Sequential => &SEQUENTIAL,
        RampKind::Diverging => &DIVERGING,
        RampKind::Cyclic => &CYCLIC,
    };
    let x = t * (anchors.len() - 1) as f64;
    let k = (x.floor() as usize).min(anchors.len() - 2);
    let f = x - k as f64;
    let mut rgb = [0u8; 3];
    for c in 0..3 {
        rgb[c] = (anchors[k][c] * (1.0 - f) + anchors[k + 1][c] * f).round() as u8;
    }
    rgb
}

/// A number in at most about 8 characters.
fn short(v: f64) -> String {
    let a = v.abs();
    if a != 0.0 && !(1e-3..1e5).contains(&a) {
        format!("{v:.2e}")
    } else if a >= 100.0 {
        format!("{v:.1}")
    } else {
        format!("{v:.3}")
    }
}

/// Cut `text` to what fits in `width` pixels of the 6-pixel-wide font.
fn fit_text(text: &str, width: usize) -> String {
    let max = (width / 6).max(1);
    if text.chars().count() <= max {
        text.to_string()
    } else {
        let mut s: String = text.chars().take(max.saturating_sub(1)).collect();
        s.push('.');
        s
    }
}

struct Canvas {
    width: usize,
    height: usize,
    pixels: Vec<u8>,
}

impl Canvas {
    fn new(width: usize, height: usize, bg: [u8; 3]) -> Canvas {
        let mut pixels = Vec::with_capacity(width * height * 3);
        for _ in 0..width * height {
            pixels.extend_from_slice(&bg);
        }
        Canvas {
            width,
            height,
            pixels,
        }
    }

    fn put(&mut self, x: usize, y: usize, rgb: [u8; 3]) {
        if x < self.width && y < self.height {
            let o = (y * self.width + x) * 3;
            self.pixels[o..o + 3].copy_from_slice(&rgb);
        }
    }

    fn text(&mut self, x: usize, y: usize, text: &str, rgb: [u8; 3]) {
        for (k, ch) in text.chars().enumerate() {
            let rows = glyph(ch);
            for (dy, bits) in rows.iter().enumerate() {
                for dx in 0..5 {
                    if bits & (0b10000 >> dx) != 0 {
                        self.put(x + k * 6 + dx, y + dy, rgb);
                    }
                }
            }
        }
    }
}

/// 5x7 glyphs, one byte per row, bit 4 = left column. Upper-case shapes serve both cases.
fn glyph(c: char) -> [u8; 7] {
    match c.to_ascii_uppercase() {
        'A' => [0x0E, 0x11, 0x11, 0x1F, 0x11, 0x11, 0x11],
        'B' => [0x1E, 0x11, 0x11, 0x1E, 0x11, 0x11, 0x1E],
        'C' => [0x0E, 0x11, 0x10, 0x10, 0x10, 0x11, 0x0E],
        'D' => [0x1E, 0x11, 0x11, 0x11, 0x11, 0x11, 0x1E],
        'E' => [0x1F, 0x10, 0x10, 0x1E, 0x10, 0x10, 0x1F],
        'F' => [0x1F, 0x10, 0x10, 0x1E, 0x10, 0x10, 0x10],
        'G' => [0x0E, 0x11, 0x10, 0x17, 0x11, 0x11, 0x0F],
        'H' => [0x11, 0x11, 0x11, 0x1F, 0x11, 0x11, 0x11],
        'I' => [0x0E, 0x04, 0x04, 0x04, 0x04, 0x04, 0x0E],
        'J' => [0x07, 0x02, 0x02, 0x02, 0x02, 0x12, 0x0C],
        'K' => [0x11, 0x12, 0x14, 0x18, 0x14, 0x12, 0x11],
        'L' => [0x10, 0x10, 0x10, 0x10, 0x10, 0x10, 0x1F],
        'M' => [0x11, 0x1B, 0x15, 0x15, 0x11, 0x11, 0x11],
        'N' => [0x11, 0x11, 0x19, 0x15, 0x13, 0x11, 0x11],
        'O' => [0x0E, 0x11, 0x11, 0x11, 0x11, 0x11, 0x0E],
        'P' => [0x1E, 0x11, 0x11, 0x1E, 0x10, 0x10, 0x10],
        'Q' => [0x0E, 0x11, 0x11, 0x11, 0x15, 0x12, 0x0D],
        'R' => [0x1E, 0x11, 0x11, 0x1E, 0x14, 0x12, 0x11],
        'S' => [0x0F, 0x10, 0x10, 0x0E, 0x01, 0x01, 0x1E],
        'T' => [0x1F, 0x04, 0x04, 0x04, 0x04, 0x04, 0x04],
        'U' => [0x11, 0x11, 0x11, 0x11, 0x11, 0x11, 0x0E],
        'V' => [0x11, 0x11, 0x11, 0x11, 0x11, 0x0A, 0x04],
        'W' => [0x11, 0x11, 0x11, 0x15, 0x15, 0x15, 0x0A],
        'X' => [0x11, 0x11, 0x0A, 0x04, 0x0A, 0x11, 0x11],
        'Y' => [0x11, 0x11, 0x0A, 0x04, 0x04, 0x04, 0x04],
        'Z' => [0x1F, 0x01, 0x02, 0x04, 0x08, 0x10, 0x1F],
        '0' => [0x0E, 0x11, 0x13, 0x15, 0x19, 0x11, 0x0E],
        '1' => [0x04, 0x0C, 0x04, 0x04, 0x04, 0x04, 0x0E],
        '2' => [0x0E, 0x11, 0x01, 0x02, 0x04, 0x08, 0x1F],
        '3' => [0x1F, 0x02, 0x04, 0x02, 0x01, 0x11, 0x0E],
        '4' => [0x02, 0x06, 0x0A, 0x12, 0x1F, 0x02, 0x02],
        '5' => [0x1F, 0x10, 0x1E, 0x01, 0x01, 0x11, 0x0E],
        '6' => [0x06, 0x08, 0x10, 0x1E, 0x11, 0x11, 0x0E],
        '7' => [0x1F, 0x01, 0x02, 0x04, 0x08, 0x08, 0x08],
        '8' => [0x0E, 0x11, 0x11, 0x0E, 0x11, 0x11, 0x0E],
        '9' => [0x0E, 0x11, 0x11, 0x0F, 0x01, 0x02, 0x0C],
        '_' => [0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x1F],
        '.' => [0x00, 0x00, 0x00, 0x00, 0x00, 0x0C, 0x0C],
        ',' => [0x00, 0x00, 0x00, 0x00, 0x0C, 0x04, 0x08],
        '-' => [0x00, 0x00, 0x00, 0x1F, 0x00, 0x00, 0x00],
        '+' => [0x00, 0x04, 0x04, 0x1F, 0x04, 0x04, 0x00],
        '/' => [0x01, 0x01, 0x02, 0x04, 0x08, 0x10, 0x10],
        ':' => [0x00, 0x0C, 0x0C, 0x00, 0x0C, 0x0C, 0x00],
        '(' => [0x02, 0x04, 0x08, 0x08, 0x08, 0x04, 0x02],
        ')' => [0x08, 0x04, 0x02, 0x02, 0x02, 0x04, 0x08],
        '=' => [0x00, 0x00, 0x1F, 0x00, 0x1F, 0x00, 0x00],
        ' ' => [0; 7],
        _ => [0x1F, 0x11, 0x11, 0x11, 0x11, 0x11, 0x1F],
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::Array2;

    #[test]
    fn thumbnail_samples_cell_centres_across_blocks() {
        let p = Preview::new(
            100,
            50,
            vec![("elevation".into(), "metres".into(), RampKind::Sequential)],
        );
        assert_eq!((p.tw, p.th), (100, 50)); // smaller than THUMB_MAX: one pixel per cell
        let data = Array2::from_shape_fn((50, 60), |(r, c)| (r * 1000 + c) as f32);
        p.record(0, Window::new(0, 0, 60, 50), data.view());
        let right = Array2::from_shape_fn((50, 40), |(r, c)| (r * 1000 + c + 60) as f32);
        p.record(0, Window::new(60, 0, 40, 50), right.view());
        let v = p.thumbs[0].values.lock().unwrap();
        assert_eq!(v[7 * 100 + 75], 7075.0);
        assert!(v.iter().all(|x| x.is_finite()));
    }

    #[test]
    fn diverging_stretch_is_symmetric_and_png_is_written() {
        let (lo, hi) = stretch(&[-1.0, 0.5, 2.0, f32::NAN], RampKind::Diverging);
        assert_eq!(lo, -hi);
        let p = Preview::new(
            10,
            10,
            vec![("tpi_r1m".into(), "metres".into(), RampKind::Diverging)],
        );
        let tmp = tempfile::tempdir().unwrap();
        let path = tmp.path().join("p.png");
        p.write_png(&path).unwrap();
        let bytes = std::fs::read(&path).unwrap();
        assert_eq!(&bytes[1..4], b"PNG");
    }

    #[test]
    fn ramp_endpoints() {
        assert_eq!(colour(0.0, 0.0, 1.0, RampKind::Sequential), [28, 34, 56]);
        assert_eq!(colour(1.0, 0.0, 1.0, RampKind::Sequential), [250, 238, 204]);
        assert_eq!(colour(f32::NAN, 0.0, 1.0, RampKind::Sequential), NODATA_RGB);
    }
}

//! `preview.png`: a sheet to look a stack over before reading numbers.
//!
//! The sheet opens with a heading: the flight (named by its output folder; the flight id
//! in a batch) or the multi-temporal stack, the date(s), the ground cell size, the CRS and
//! the grid's size; then a legend row (north arrow, scale bar at the thumbnails' scale,
//! the nodata swatch) and a paragraph that states how colours are stretched. Below it, one
//! tile per band: the band's name exactly as in `stack.json` (wrapped, never cut), its
//! thumbnail, the colour bar with the ends of the stretch, and the band's true minimum and
//! maximum over every valid cell (the statistics `stack.json` records).
//!
//! Thumbnails are point samples of the stack (the cell under each thumbnail pixel's
//! centre), filled block by block as the stack is computed, so the preview costs no extra
//! pass. Colours stretch between the 2nd and 98th percentiles of the thumbnail's valid
//! cells (common practice for display stretches); signed quantities (TPI, curvature, …)
//! use a diverging ramp made symmetric about zero, aspect a cyclic one fixed at 0–360°.
//! Nodata cells take [`NODATA_RGB`], a colour no ramp reaches. Text is drawn with the
//! bitmap font of [`font`].
//!
//! North: every stack grid is north-up (rows run south), so up on the sheet is grid north
//! on a projected CRS and north along the meridians on a geographic one. The scale bar's
//! ground length uses the east-west ground cell size of the centre row
//! ([`Grid::cell_size_m`]); where that size varies from row to row (geographic and Mercator
//! grids) the bar says "approx.".

mod font;

use std::fs::File;
use std::io::BufWriter;
use std::path::Path;
use std::sync::Mutex;

use ndarray::ArrayView2;

use crate::error::{Error, Result};
use crate::grid::{CrsKind, Grid, Window};
use crate::stack::sidecar::BandMetadata;
use font::{text_width, Canvas, ADVANCE, LINE};

/// Largest thumbnail side in pixels.
pub const THUMB_MAX: usize = 220;
/// Largest thumbnail side when a stack has more than [`MANY_BANDS`] bands (multi-temporal
/// stacks), so that the sheet stays a size an image viewer opens.
pub const THUMB_MAX_MANY: usize = 120;
/// Band count above which thumbnails shrink to [`THUMB_MAX_MANY`] and the sheet has ten
/// columns.
pub const MANY_BANDS: usize = 40;
/// Colour of nodata cells (and of the legend's nodata swatch): an orchid pink that none of
/// the ramps comes near (at least 90 apart in RGB from every colour of every ramp; tested).
pub const NODATA_RGB: [u8; 3] = [225, 110, 210];
/// Size of the nodata swatch in the legend, in pixels.
pub const SWATCH: (usize, usize) = (16, 10);

/// Narrowest band tile: room for 30 characters of the tile's text.
const MIN_TILE_W: usize = 180;
/// Narrowest sheet: room for the heading and the legend row.
const MIN_SHEET_W: usize = 600;
const MARGIN: usize = 12;
const GAP: usize = 12;
const BAR_H: usize = 8;
const LEGEND_H: usize = 34;
/// Longest scale bar in pixels.
const SCALE_BAR_MAX: usize = 110;
const BG: [u8; 3] = [250, 250, 247];
const INK: [u8; 3] = [20, 20, 20];
const SOFT: [u8; 3] = [78, 78, 78];
const FRAME: [u8; 3] = [168, 168, 168];

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

impl RampKind {
    /// The ramp of a band of a stack from its `stack.json` record: the feature's ramp
    /// (the same choice the stack plan makes: cyclic for aspect, diverging for signed
    /// terrain quantities, NDWI and band math, sequential otherwise); the spread and
    /// date-of-maximum summaries of a multi-temporal stack are sequential.
    pub fn for_band(band: &BandMetadata) -> RampKind {
        match band.extra.get("summary").and_then(|s| s.as_str()) {
            Some("amplitude" | "std" | "argmax_date") => RampKind::Sequential,
            _ => RampKind::for_feature(&band.feature),
        }
    }

    /// The ramp of a feature key (docs/design.md's keys).
    pub fn for_feature(feature: &str) -> RampKind {
        match feature {
            "aspect" => RampKind::Cyclic,
            "tpi"
            | "dev"
            | "northness"
            | "eastness"
            | "profile_curvature"
            | "plan_curvature"
            | "tangential_curvature"
            | "mean_curvature"
            | "gaussian_curvature"
            | "ndwi"
            | "expression" => RampKind::Diverging,
            _ => RampKind::Sequential,
        }
    }
}

/// What the sheet's heading says about the stack as a whole.
#[derive(Clone, Debug, PartialEq)]
pub struct SheetHeading {
    /// "flight NAME" or "multi-temporal stack of N flights".
    pub title: String,
    /// "date YYYY-MM-DD", "date not stated" or "dates A, B, C".
    pub when: String,
}

impl SheetHeading {
    /// The heading of one flight's stack written to `out` (the flight is named by the
    /// folder, which is the flight id in a batch), flown on `date`.
    pub fn flight(out: &Path, date: Option<&str>) -> SheetHeading {
        let name = out
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_else(|| out.display().to_string());
        SheetHeading {
            title: format!("flight {name}"),
            when: match date {
                Some(d) => format!("date {d}"),
                None => "date not stated".into(),
            },
        }
    }

    /// The heading of a multi-temporal stack of flights flown on `dates` (one per flight).
    pub fn temporal(dates: &[String]) -> SheetHeading {
        let n = dates.len();
        SheetHeading {
            title: format!(
                "multi-temporal stack of {n} flight{}",
                if n == 1 { "" } else { "s" }
            ),
            when: format!("dates {}", dates.join(", ")),
        }
    }
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

/// Where everything goes on the sheet (pixels, origin top-left).
#[derive(Clone, Debug)]
pub struct SheetLayout {
    pub width: usize,
    pub height: usize,
    /// Thumbnail size (width, height); one thumbnail pixel per cell when the grid is no
    /// larger than the thumbnail limit.
    pub thumb_size: (usize, usize),
    /// Top-left pixel of each band's thumbnail, in band order.
    pub thumbs: Vec<(usize, usize)>,
    /// Top-left pixel of the nodata swatch ([`SWATCH`] in size).
    pub swatch: (usize, usize),
    tile_w: usize,
    title: Vec<String>,
    details: Vec<String>,
    details_y: usize,
    legend_y: usize,
    north: Option<&'static str>,
    scale: ScaleBar,
    notes: Vec<String>,
    notes_y: usize,
    rule_y: usize,
    tiles: Vec<TileText>,
}

/// The scale bar, or why there is none.
#[derive(Clone, Debug, PartialEq)]
enum ScaleBar {
    Bar {
        label: String,
        px: usize,
        approx: bool,
    },
    None(&'static str),
}

/// The text of one band tile.
#[derive(Clone, Debug)]
struct TileText {
    /// Tile's top-left pixel.
    origin: (usize, usize),
    title: Vec<String>,
    lo: f64,
    hi: f64,
    ends: Option<(String, Option<String>, String)>,
    notes: Vec<String>,
}

impl Preview {
    /// Thumbnails for a `grid_w` x `grid_h` stack; `bands` gives (name, units, ramp).
    pub fn new(grid_w: usize, grid_h: usize, bands: Vec<(String, String, RampKind)>) -> Preview {
        let limit = if bands.len() > MANY_BANDS {
            THUMB_MAX_MANY
        } else {
            THUMB_MAX
        };
        let scale = (limit as f64 / grid_w.max(grid_h) as f64).min(1.0);
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

    /// The sheet's layout for a stack on `grid` whose bands `stack.json` records as
    /// `bands` (same order as the thumbnails; their statistics give the true ranges).
    pub fn layout(
        &self,
        grid: &Grid,
        heading: &SheetHeading,
        bands: &[BandMetadata],
    ) -> SheetLayout {
        let n = self.thumbs.len();
        let cols = columns(n);
        let rows = n.div_ceil(cols).max(1);
        let tile_w = self.tw.max(MIN_TILE_W);
        let width = (2 * MARGIN + cols * tile_w + (cols - 1) * GAP).max(MIN_SHEET_W);
        let sheet_chars = chars_in(width - 2 * MARGIN);
        let tile_chars = chars_in(tile_w);

        let mut y = MARGIN;
        let title = wrap_words(&heading.title, chars_in((width - 2 * MARGIN) / 2));
        y += title.len() * 2 * LINE;
        let details_y = y;
        let details = wrap_words(
            &format!(
                "{}; cell {}; {}; {} x {} cells, {} band{}",
                heading.when,
                cell_text(grid),
                grid.crs.label(),
                grid.width,
                grid.height,
                n,
                if n == 1 { "" } else { "s" }
            ),
            sheet_chars,
        );
        y += details.len() * LINE + 6;
        let legend_y = y;
        y += LEGEND_H;
        let notes_y = y;
        let notes = wrap_words(&self.notes_text(), sheet_chars);
        y += notes.len() * LINE + 2;
        let rule_y = y;
        y += 1 + GAP;
        let tiles_y = y;

        let north = north_label(grid);
        let scale = match ground_pixel_m(grid, self.tw) {
            Some((m_per_px, approx)) => {
                let max_px = SCALE_BAR_MAX.min(self.tw.max(40));
                match scale_bar_length(m_per_px, max_px) {
                    Some((metres, px)) => ScaleBar::Bar {
                        label: format_length(metres),
                        px,
                        approx,
                    },
                    None => ScaleBar::None("no scale bar: no ground size"),
                }
            }
            None => ScaleBar::None("no scale bar: the CRS gives no ground size"),
        };
        // The swatch's place in the legend row follows the north arrow and the scale bar.
        let mut x = MARGIN;
        if let Some(label) = north {
            x += 16 + text_width(label, 1) + 24;
        }
        x += match &scale {
            ScaleBar::Bar { px, approx, .. } => (*px).max(text_width(scale_caption(*approx), 1)),
            ScaleBar::None(text) => text_width(text, 1),
        } + 24;
        let swatch = (x, legend_y + 12);

        let mut tiles: Vec<TileText> = self
            .thumbs
            .iter()
            .enumerate()
            .map(|(k, thumb)| {
                let values = thumb.values.lock().expect("preview lock");
                let (lo, hi) = stretch(&values, thumb.ramp);
                let any_valid = lo.is_finite() && hi.is_finite();
                let ends = any_valid.then(|| match thumb.ramp {
                    RampKind::Cyclic => ("0".to_string(), None, "360".to_string()),
                    RampKind::Diverging => (num(lo, 4), Some("0".to_string()), num(hi, 4)),
                    RampKind::Sequential => (num(lo, 4), None, num(hi, 4)),
                });
                let mut notes = wrap_words(&stretch_words(thumb.ramp, any_valid), tile_chars);
                let stats = bands.get(k).map(|b| &b.stats);
                notes.extend(wrap_words(
                    &range_words(
                        stats.and_then(|s| s.min),
                        stats.and_then(|s| s.max),
                        &thumb.units,
                    ),
                    tile_chars,
                ));
                TileText {
                    origin: (0, 0),
                    title: wrap_name(&thumb.name, tile_chars),
                    lo,
                    hi,
                    ends,
                    notes,
                }
            })
            .collect();
        let title_rows = tiles.iter().map(|t| t.title.len()).max().unwrap_or(1);
        let note_rows = tiles.iter().map(|t| t.notes.len()).max().unwrap_or(0);
        let tile_h = title_rows * LINE + 2 + self.th + 5 + BAR_H + 3 + LINE + note_rows * LINE;
        let mut thumbs = Vec::with_capacity(n);
        for (k, tile) in tiles.iter_mut().enumerate() {
            let x0 = MARGIN + (k % cols) * (tile_w + GAP);
            let y0 = tiles_y + (k / cols) * (tile_h + GAP);
            tile.origin = (x0, y0);
            thumbs.push((x0, y0 + title_rows * LINE + 2));
        }
        let height = tiles_y + rows * tile_h + (rows - 1) * GAP + MARGIN;
        SheetLayout {
            width,
            height,
            thumb_size: (self.tw, self.th),
            thumbs,
            swatch,
            tile_w,
            title,
            details,
            details_y,
            legend_y,
            north,
            scale,
            notes,
            notes_y,
            rule_y,
            tiles,
        }
    }

    /// The paragraph under the legend: what a thumbnail pixel is and how colours stretch.
    fn notes_text(&self) -> String {
        let mut s = format!(
            "Each thumbnail pixel shows the one cell under its centre ({} x {} px for {} x {} cells). \
             Colour bars span the 2nd to 98th percentile of the thumbnail's valid cells",
            self.tw, self.th, self.grid_w, self.grid_h
        );
        if self.thumbs.iter().any(|t| t.ramp == RampKind::Diverging) {
            s.push_str("; diverging bars are widened to be symmetric about 0");
        }
        if self.thumbs.iter().any(|t| t.ramp == RampKind::Cyclic) {
            s.push_str("; cyclic bars (aspect) are fixed at 0 to 360");
        }
        s.push_str(
            ". Band min and max are over every valid cell of the band, as stack.json records them.",
        );
        s
    }

    /// Draw the sheet (see the module doc) and write it as an RGB PNG to `path`.
    pub fn write_png(
        &self,
        path: &Path,
        grid: &Grid,
        heading: &SheetHeading,
        bands: &[BandMetadata],
    ) -> Result<()> {
        let layout = self.layout(grid, heading, bands);
        let canvas = self.draw(&layout);
        let file = File::create(path).map_err(|e| Error::io(path, e))?;
        let mut encoder = png::Encoder::new(
            BufWriter::new(file),
            canvas.width as u32,
            canvas.height as u32,
        );
        encoder.set_color(png::ColorType::Rgb);
        encoder.set_depth(png::BitDepth::Eight);
        // The sheet is small; a slower, tighter compression costs well under a second.
        encoder.set_compression(png::Compression::High);
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

    fn draw(&self, l: &SheetLayout) -> Canvas {
        let mut c = Canvas::new(l.width, l.height, BG);
        for (i, line) in l.title.iter().enumerate() {
            c.text(MARGIN, MARGIN + i * 2 * LINE, line, INK, 2);
        }
        for (i, line) in l.details.iter().enumerate() {
            c.text(MARGIN, l.details_y + i * LINE, line, INK, 1);
        }
        // Legend row: north arrow, scale bar, nodata swatch.
        let ly = l.legend_y;
        let mut x = MARGIN;
        if let Some(label) = l.north {
            c.text(x + 3, ly, "N", INK, 1);
            for i in 0..6 {
                c.fill(x + 5 - i, ly + 10 + i, 2 * i + 1, 1, INK);
            }
            c.fill(x + 4, ly + 16, 3, 14, INK);
            c.text(x + 16, ly + 16, label, SOFT, 1);
            x += 16 + text_width(label, 1) + 24;
        }
        match &l.scale {
            ScaleBar::Bar { label, px, approx } => {
                let caption = scale_caption(*approx);
                c.text(x, ly, caption, SOFT, 1);
                let by = ly + 12;
                let half = px / 2;
                c.fill(x, by, half, 5, INK);
                c.frame(x + half, by, px - half, 5, INK);
                c.fill(x, by + 5, 1, 2, INK);
                c.fill(x + px - 1, by + 5, 1, 2, INK);
                c.text(x, by + 9, "0", SOFT, 1);
                c.text(
                    x + px - text_width(label, 1).min(*px),
                    by + 9,
                    label,
                    SOFT,
                    1,
                );
                x += (*px).max(text_width(caption, 1)) + 24;
            }
            ScaleBar::None(text) => {
                c.text(x, ly + 12, text, SOFT, 1);
                x += text_width(text, 1) + 24;
            }
        }
        debug_assert_eq!((x, ly + 12), l.swatch);
        let (sx, sy) = l.swatch;
        c.frame(sx - 1, sy - 1, SWATCH.0 + 2, SWATCH.1 + 2, FRAME);
        c.fill(sx, sy, SWATCH.0, SWATCH.1, NODATA_RGB);
        c.text(sx + SWATCH.0 + 6, sy + 1, "no data (NaN)", SOFT, 1);
        for (i, line) in l.notes.iter().enumerate() {
            c.text(MARGIN, l.notes_y + i * LINE, line, SOFT, 1);
        }
        c.fill(MARGIN, l.rule_y, l.width - 2 * MARGIN, 1, FRAME);

        for ((thumb, tile), &(tx, ty)) in self.thumbs.iter().zip(&l.tiles).zip(&l.thumbs) {
            let (x0, y0) = tile.origin;
            for (i, line) in tile.title.iter().enumerate() {
                c.text(x0, y0 + i * LINE, line, INK, 1);
            }
            c.frame(tx - 1, ty - 1, self.tw + 2, self.th + 2, FRAME);
            let values = thumb.values.lock().expect("preview lock");
            for j in 0..self.th {
                for i in 0..self.tw {
                    let v = values[j * self.tw + i];
                    c.put(tx + i, ty + j, colour(v, tile.lo, tile.hi, thumb.ramp));
                }
            }
            let by = ty + self.th + 5;
            if let Some((left, middle, right)) = &tile.ends {
                for i in 0..l.tile_w {
                    let v = tile.lo + (tile.hi - tile.lo) * (i as f64 + 0.5) / l.tile_w as f64;
                    c.fill(
                        x0 + i,
                        by,
                        1,
                        BAR_H,
                        colour(v as f32, tile.lo, tile.hi, thumb.ramp),
                    );
                }
                let ey = by + BAR_H + 3;
                c.text(x0, ey, left, SOFT, 1);
                if let Some(m) = middle {
                    c.text(x0 + (l.tile_w - text_width(m, 1)) / 2, ey, m, SOFT, 1);
                }
                let rw = text_width(right, 1).min(l.tile_w);
                c.text(x0 + l.tile_w - rw, ey, right, SOFT, 1);
            } else {
                c.frame(x0, by, l.tile_w, BAR_H, FRAME);
            }
            let ny = by + BAR_H + 3 + LINE;
            for (i, line) in tile.notes.iter().enumerate() {
                c.text(x0, ny + i * LINE, line, SOFT, 1);
            }
        }
        c
    }
}

/// Columns of band tiles on a sheet of `n` bands.
fn columns(n: usize) -> usize {
    if n > MANY_BANDS {
        10
    } else {
        ((n as f64).sqrt().ceil() as usize).clamp(1, 5)
    }
}

/// Characters of the font that fit in `px` pixels.
fn chars_in(px: usize) -> usize {
    ((px + 1) / ADVANCE).max(1)
}

fn scale_caption(approx: bool) -> &'static str {
    if approx {
        "thumbnail scale, approx."
    } else {
        "thumbnail scale"
    }
}

/// What up on the sheet is: "grid north" on projected CRSs, "north" on geographic ones
/// (a north-up grid's columns follow the meridians); `None` without a CRS or on a grid
/// whose rows run north.
fn north_label(grid: &Grid) -> Option<&'static str> {
    if grid.transform[5] >= 0.0 {
        return None;
    }
    match grid.crs.kind {
        CrsKind::Projected => Some("grid north"),
        CrsKind::Geographic => Some("north"),
        CrsKind::Unknown => None,
    }
}

/// Ground metres spanned east-west by one thumbnail pixel (`thumb_w` pixels across the
/// grid) at the grid's centre row, and whether that size varies from row to row (by more
/// than 0.1 % between the first and last rows). `None` when the grid has no ground size.
fn ground_pixel_m(grid: &Grid, thumb_w: usize) -> Option<(f64, bool)> {
    let mid = (grid.height as f64 - 1.0) / 2.0;
    let (hx, _) = grid.cell_size_m(mid).ok()?;
    let (top, _) = grid.cell_size_m(0.0).ok()?;
    let (bottom, _) = grid.cell_size_m(grid.height as f64 - 1.0).ok()?;
    let varies = (top - bottom).abs() > 1e-3 * hx;
    Some((hx * grid.width as f64 / thumb_w as f64, varies))
}

/// The heading's cell size: ground metres, "approx. … at the centre row" where the size
/// varies by row, or CRS units when the grid has no ground size.
fn cell_text(grid: &Grid) -> String {
    let last = grid.height as f64 - 1.0;
    match grid.cell_size_m(last / 2.0) {
        Ok((hx, hy)) => {
            let size = if (hx - hy).abs() <= 1e-9 * hx.max(hy) {
                format!("{} m", num(hx, 4))
            } else {
                format!("{} x {} m", num(hx, 4), num(hy, 4))
            };
            let ends = (grid.cell_size_m(0.0), grid.cell_size_m(last));
            let varies = match ends {
                (Ok(a), Ok(b)) => (a.0 - b.0).abs() > 1e-3 * hx || (a.1 - b.1).abs() > 1e-3 * hy,
                _ => true,
            };
            if varies {
                format!("approx. {size} at the centre row (varies by row)")
            } else {
                size
            }
        }
        Err(_) => format!(
            "{} x {} CRS units (no ground size known)",
            num(grid.res_x(), 4),
            num(grid.res_y(), 4)
        ),
    }
}

/// The scale bar: the longest round ground length (1, 2 or 5 x 10^k metres) whose bar is
/// at most `max_px` pixels at `m_per_px` metres per pixel, and its length in pixels.
pub fn scale_bar_length(m_per_px: f64, max_px: usize) -> Option<(f64, usize)> {
    if !(m_per_px.is_finite() && m_per_px > 0.0 && max_px > 0) {
        return None;
    }
    let max_m = m_per_px * max_px as f64;
    let k = max_m.log10().floor() as i32;
    let mut best = None;
    for e in [k - 1, k] {
        for m in [1.0, 2.0, 5.0] {
            // 10^e as a decimal literal, so that 0.1, 0.2, 0.5 are the nearest doubles.
            let len: f64 = format!("{m}e{e}").parse().expect("a decimal number");
            if len <= max_m * (1.0 + 1e-12) {
                best = Some(len);
            }
        }
    }
    best.map(|len| (len, ((len / m_per_px).round() as usize).max(1)))
}

/// A round ground length as the scale bar writes it: "500 m", "2 km", "20 cm", "5 mm".
pub fn format_length(metres: f64) -> String {
    if metres >= 1000.0 {
        format!("{} km", num(metres / 1000.0, 6))
    } else if metres >= 1.0 {
        format!("{} m", num(metres, 6))
    } else if metres >= 0.01 {
        format!("{} cm", num(metres * 100.0, 6))
    } else {
        format!("{} mm", num(metres * 1000.0, 6))
    }
}

/// How a tile's colours stretch, as the tile states it.
fn stretch_words(ramp: RampKind, any_valid: bool) -> String {
    if !any_valid {
        return "no valid cell in the thumbnail".into();
    }
    match ramp {
        RampKind::Sequential => "colours: 2-98 % of valid cells".into(),
        RampKind::Diverging => "colours: 2-98 %, symmetric".into(),
        RampKind::Cyclic => "colours: fixed 0 to 360".into(),
    }
}

/// A band's true range as the tile states it ("band min 1.2, max 3.4 metres").
fn range_words(min: Option<f64>, max: Option<f64>, units: &str) -> String {
    match (min, max) {
        (Some(lo), Some(hi)) => {
            let units = if units.is_empty() || units == "unitless" {
                String::new()
            } else {
                format!(" {units}")
            };
            format!("band min {}, max {}{units}", num(lo, 5), num(hi, 5))
        }
        _ => "band has no valid cells".into(),
    }
}

/// `v` with `sig` significant digits, trailing zeros dropped; scientific notation below
/// 0.001 and from 10^6 up.
pub fn num(v: f64, sig: usize) -> String {
    let sig = sig.max(1);
    if !v.is_finite() {
        return format!("{v}");
    }
    if v == 0.0 {
        return "0".into();
    }
    let a = v.abs();
    if !(1e-3..1e6).contains(&a) {
        let s = format!("{:.*e}", sig - 1, v);
        let (mantissa, exp) = s.split_once('e').unwrap_or((&s, "0"));
        return format!("{}e{exp}", trim_zeros(mantissa));
    }
    let mag = a.log10().floor() as i32;
    let decimals = (sig as i32 - 1 - mag).max(0) as usize;
    trim_zeros(&format!("{v:.decimals$}"))
}

fn trim_zeros(s: &str) -> String {
    if s.contains('.') {
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        s.to_string()
    }
}

/// A band name broken into lines of at most `max` characters, each break after a '_',
/// '-', '.', '/' or ':' where one falls in the second half of the line, else after `max`
/// characters. The lines, joined, are the name exactly: nothing is cut or added.
pub fn wrap_name(name: &str, max: usize) -> Vec<String> {
    let max = max.max(1);
    let chars: Vec<char> = name.chars().collect();
    let mut lines = Vec::new();
    let mut start = 0;
    while chars.len() - start > max {
        let end = start + max;
        let cut = (start + max.div_ceil(2)..=end)
            .rev()
            .find(|&i| matches!(chars[i - 1], '_' | '-' | '.' | '/' | ':'))
            .unwrap_or(end);
        lines.push(chars[start..cut].iter().collect());
        start = cut;
    }
    lines.push(chars[start..].iter().collect());
    lines
}

/// `text` broken at spaces into lines of at most `max` characters; a word longer than a
/// line is broken as [`wrap_name`] breaks a name.
pub fn wrap_words(text: &str, max: usize) -> Vec<String> {
    let max = max.max(1);
    let mut lines: Vec<String> = Vec::new();
    let mut line = String::new();
    for word in text.split_whitespace() {
        for piece in wrap_name(word, max) {
            let needed =
                line.chars().count() + usize::from(!line.is_empty()) + piece.chars().count();
            if !line.is_empty() && needed > max {
                lines.push(std::mem::take(&mut line));
            }
            if !line.is_empty() {
                line.push(' ');
            }
            line.push_str(&piece);
        }
    }
    if !line.is_empty() || lines.is_empty() {
        lines.push(line);
    }
    lines
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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::grid::Crs;
    use crate::stack::sidecar::BandStats;
    use ndarray::Array2;

    fn utm_grid(w: usize, h: usize, cell: f64) -> Grid {
        Grid::new(
            w,
            h,
            [478_240.0, cell, 0.0, 5_362_180.0, 0.0, -cell],
            Crs::from_epsg(32633),
        )
        .unwrap()
    }

    fn band(name: &str, min: Option<f64>, max: Option<f64>) -> BandMetadata {
        BandMetadata {
            index: 1,
            name: name.into(),
            feature: "slope".into(),
            method: None,
            scale_m: None,
            window_px: None,
            units: "degrees".into(),
            source: "dsm".into(),
            date: None,
            stats: BandStats {
                min,
                max,
                mean: None,
                std: None,
                valid_fraction: 1.0,
            },
            extra: serde_json::Map::new(),
        }
    }

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
    fn many_bands_get_smaller_thumbnails_and_ten_columns() {
        let bands = |n: usize| {
            (0..n)
                .map(|i| {
                    (
                        format!("b{i}"),
                        "unitless".to_string(),
                        RampKind::Sequential,
                    )
                })
                .collect()
        };
        let p = Preview::new(800, 600, bands(MANY_BANDS));
        assert_eq!((p.tw, p.th), (220, 165)); // 800 x 600 scaled by 220/800
        let p = Preview::new(800, 600, bands(MANY_BANDS + 1));
        assert_eq!((p.tw, p.th), (120, 90));
        assert_eq!(
            (columns(1), columns(5), columns(33), columns(41)),
            (1, 3, 5, 10)
        );
    }

    #[test]
    fn scale_bar_is_the_longest_round_length_that_fits() {
        // 0.1 m cells, 800 cells on 220 px: 0.3636 m per px; 110 px hold 40 m → 20 m, 55 px.
        let (m, px) = scale_bar_length(0.1 * 800.0 / 220.0, 110).unwrap();
        assert_eq!((m, px), (20.0, 55));
        // Exactly a round length fits: 500 m on 110 px at 4.545 m per px.
        assert_eq!(scale_bar_length(500.0 / 110.0, 110), Some((500.0, 110)));
        assert_eq!(scale_bar_length(0.01, 110), Some((1.0, 100)));
        assert_eq!(scale_bar_length(0.001, 110), Some((0.1, 100)));
        assert_eq!(scale_bar_length(7.0, 110), Some((500.0, 71)));
        assert_eq!(scale_bar_length(0.0, 110), None);
        assert_eq!(scale_bar_length(f64::NAN, 110), None);
        for m_per_px in [0.003, 0.07, 0.36, 1.9, 13.0, 260.0] {
            let (m, px) = scale_bar_length(m_per_px, 110).unwrap();
            // Between 1/2.5 and all of the room (steps 1, 2, 5 are at most 2.5 apart).
            assert!(
                m <= m_per_px * 110.0 && m > m_per_px * 110.0 / 2.5,
                "{m_per_px}"
            );
            assert!((44..=110).contains(&px), "{m_per_px}: {px}");
        }
        assert_eq!(format_length(2000.0), "2 km");
        assert_eq!(format_length(500.0), "500 m");
        assert_eq!(format_length(1.0), "1 m");
        assert_eq!(format_length(0.2), "20 cm");
        assert_eq!(format_length(0.005), "5 mm");
    }

    #[test]
    fn names_wrap_without_losing_a_character() {
        assert_eq!(
            wrap_name("tangential_curvature_evans_young", 30),
            vec!["tangential_curvature_evans_", "young"]
        );
        assert_eq!(wrap_name("ndvi", 30), vec!["ndvi"]);
        assert_eq!(wrap_name("", 30), vec![""]);
        let long = "x".repeat(65);
        let lines = wrap_name(&long, 30);
        assert_eq!(
            lines.iter().map(|l| l.len()).collect::<Vec<_>>(),
            [30, 30, 5]
        );
        // A break only in the first half of a line is not taken.
        assert_eq!(wrap_name("a_bcdefghij", 6), vec!["a_bcde", "fghij"]);
        for name in [
            "gaussian_curvature_evans_young_2026-07-08",
            "relative_elevation_r5m_amplitude",
            "ndvi_20260708",
            "my/own:index.v2",
            "élévation_µ",
        ] {
            for max in [1, 5, 12, 30] {
                let lines = wrap_name(name, max);
                assert_eq!(lines.concat(), name);
                assert!(
                    lines.iter().all(|l| l.chars().count() <= max),
                    "{name} {max}"
                );
            }
        }
        assert_eq!(wrap_words("a bb ccc", 4), vec!["a bb", "ccc"]);
        assert_eq!(
            wrap_words("one abcdefghij", 6),
            vec!["one", "abcdef", "ghij"]
        );
        assert_eq!(wrap_words("", 6), vec![""]);
    }

    #[test]
    fn every_line_of_text_fits_its_tile_and_the_sheet() {
        let names = [
            "tangential_curvature_evans_young",
            "relative_elevation_r5m_2026-07-08",
            "slope_horn",
        ];
        let p = Preview::new(
            30,
            20,
            names
                .iter()
                .map(|n| (n.to_string(), "1/m".to_string(), RampKind::Diverging))
                .collect(),
        );
        let bands: Vec<_> = names
            .iter()
            .map(|n| band(n, Some(-0.000123456), Some(1234567.0)))
            .collect();
        let grid = utm_grid(30, 20, 0.1);
        let l = p.layout(
            &grid,
            &SheetHeading::flight(Path::new("x/f1"), None),
            &bands,
        );
        assert_eq!(l.tile_w, MIN_TILE_W);
        for t in &l.tiles {
            for line in t.title.iter().chain(&t.notes) {
                assert!(text_width(line, 1) <= l.tile_w, "{line}");
            }
        }
        assert_eq!(l.tiles[0].title.concat(), names[0]);
        assert_eq!(l.tiles[1].title.concat(), names[1]);
        for line in l.details.iter().chain(&l.notes) {
            assert!(text_width(line, 1) <= l.width - 2 * MARGIN, "{line}");
        }
        // Tiles do not overlap, and the nodata swatch lies within the sheet.
        assert!(l.thumbs[1].0 >= l.thumbs[0].0 + l.tile_w + GAP);
        assert!(l.swatch.0 + SWATCH.0 < l.width);
    }

    #[test]
    fn nodata_colour_is_outside_every_ramp() {
        for ramp in [RampKind::Sequential, RampKind::Diverging, RampKind::Cyclic] {
            for i in 0..=1000 {
                let rgb = colour(i as f32 / 1000.0, 0.0, 1.0, ramp);
                assert_ne!(rgb, NODATA_RGB, "{ramp:?} at {i}");
                // Far from it, not just unequal: at least 90 apart in RGB.
                let d2: i32 = (0..3)
                    .map(|c| (rgb[c] as i32 - NODATA_RGB[c] as i32).pow(2))
                    .sum();
                assert!(d2 >= 90 * 90, "{ramp:?} at {i}: {rgb:?}");
            }
        }
        for other in [BG, INK, SOFT, FRAME] {
            assert_ne!(other, NODATA_RGB);
        }
        assert_eq!(colour(f32::NAN, 0.0, 1.0, RampKind::Sequential), NODATA_RGB);
    }

    #[test]
    fn stretch_and_range_labels() {
        // Nearest-rank percentiles of 1..=101: the 2nd is 3, the 98th is 99.
        let v: Vec<f32> = (1..=101).map(|x| x as f32).collect();
        assert_eq!(stretch(&v, RampKind::Sequential), (3.0, 99.0));
        let (lo, hi) = stretch(&[-1.0, 0.5, 2.0, f32::NAN], RampKind::Diverging);
        assert_eq!((lo, hi), (-2.0, 2.0));
        assert_eq!(stretch(&v, RampKind::Cyclic), (0.0, 360.0));
        assert_eq!(
            stretch_words(RampKind::Sequential, true),
            "colours: 2-98 % of valid cells"
        );
        assert_eq!(
            stretch_words(RampKind::Diverging, true),
            "colours: 2-98 %, symmetric"
        );
        assert_eq!(
            stretch_words(RampKind::Cyclic, true),
            "colours: fixed 0 to 360"
        );
        assert_eq!(
            stretch_words(RampKind::Sequential, false),
            "no valid cell in the thumbnail"
        );
        assert_eq!(
            range_words(Some(210.72030639648438), Some(217.81582641601562), "metres"),
            "band min 210.72, max 217.82 metres"
        );
        assert_eq!(
            range_words(Some(-0.5), Some(0.75), "unitless"),
            "band min -0.5, max 0.75"
        );
        assert_eq!(range_words(None, None, "metres"), "band has no valid cells");
        assert_eq!(num(-0.27312, 4), "-0.2731");
        assert_eq!(num(0.0000123, 3), "1.23e-5");
        assert_eq!(num(1234567.0, 4), "1.235e6");
        assert_eq!(num(100.0, 4), "100");
        assert_eq!(num(9.99996, 4), "10");
        assert_eq!(num(-0.0, 4), "0");
    }

    #[test]
    fn heading_states_cell_size_crs_and_north() {
        let g = utm_grid(800, 600, 0.1);
        assert_eq!(cell_text(&g), "0.1 m");
        assert_eq!(north_label(&g), Some("grid north"));
        let (m, approx) = ground_pixel_m(&g, 220).unwrap();
        assert!((m - 80.0 / 220.0).abs() < 1e-12 && !approx);
        // Geographic, 1 arc-second cells around 36.6° N: the size varies by row.
        let d = 1.0 / 3600.0;
        let geo = Grid::new(
            400,
            400,
            [-5.0, d, 0.0, 36.6 + 200.0 * d, 0.0, -d],
            Crs::from_epsg(4326),
        )
        .unwrap();
        let text = cell_text(&geo);
        assert!(
            text.starts_with("approx. ") && text.ends_with("(varies by row)"),
            "{text}"
        );
        assert_eq!(north_label(&geo), Some("north"));
        assert!(ground_pixel_m(&geo, 220).unwrap().1);
        let plain = Grid::new(10, 10, [0.0, 1.0, 0.0, 10.0, 0.0, -1.0], Crs::none()).unwrap();
        assert_eq!(north_label(&plain), None);
        assert_eq!(cell_text(&plain), "1 x 1 CRS units (no ground size known)");
        assert_eq!(ground_pixel_m(&plain, 10), None);
        assert_eq!(
            SheetHeading::flight(Path::new("out/f07"), Some("2026-07-08")),
            SheetHeading {
                title: "flight f07".into(),
                when: "date 2026-07-08".into()
            }
        );
        let t = SheetHeading::temporal(&["2026-04-23".into(), "2026-07-08".into()]);
        assert_eq!(t.title, "multi-temporal stack of 2 flights");
        assert_eq!(t.when, "dates 2026-04-23, 2026-07-08");
    }

    #[test]
    fn png_decodes_with_nodata_cells_in_the_nodata_colour() {
        let p = Preview::new(
            10,
            8,
            vec![("tpi_r1m".into(), "metres".into(), RampKind::Diverging)],
        );
        let data = Array2::from_shape_fn((8, 10), |(r, c)| {
            if r < 2 && c < 3 {
                f32::NAN
            } else {
                (r as f32 - c as f32) * 0.1
            }
        });
        p.record(0, Window::new(0, 0, 10, 8), data.view());
        let grid = utm_grid(10, 8, 0.5);
        let heading = SheetHeading::flight(Path::new("f1"), None);
        let bands = [band("tpi_r1m", Some(-0.9), Some(0.7))];
        let tmp = tempfile::tempdir().unwrap();
        let path = tmp.path().join("p.png");
        p.write_png(&path, &grid, &heading, &bands).unwrap();
        let l = p.layout(&grid, &heading, &bands);
        let decoder = png::Decoder::new(std::io::BufReader::new(File::open(&path).unwrap()));
        let mut reader = decoder.read_info().unwrap();
        let mut buf = vec![0; reader.output_buffer_size().unwrap()];
        let info = reader.next_frame(&mut buf).unwrap();
        assert_eq!(
            (info.width as usize, info.height as usize),
            (l.width, l.height)
        );
        let at = |x: usize, y: usize| {
            let o = (y * l.width + x) * 3;
            [buf[o], buf[o + 1], buf[o + 2]]
        };
        let (tx, ty) = l.thumbs[0];
        for r in 0..8 {
            for c in 0..10 {
                assert_eq!(at(tx + c, ty + r) == NODATA_RGB, r < 2 && c < 3, "{r} {c}");
            }
        }
        assert_eq!(at(l.swatch.0, l.swatch.1), NODATA_RGB);
        let count = buf.chunks(3).filter(|p| *p == NODATA_RGB).count();
        assert_eq!(count, 6 + SWATCH.0 * SWATCH.1);
    }
}

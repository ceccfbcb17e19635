//! Reading any stored orientation as the north-up, west-to-east grid terrastack works on.
//!
//! Every kernel takes x east and y north with rows running south (`docs/methods.md`, "Axes").
//! A file may store its rows south to north (a positive y cell size in the geotransform,
//! "south-up"), its columns east to west (a negative x cell size), or both, with a
//! transform that describes it exactly. Readers normalise this when a file is opened:
//! their [`Grid`] is always north-up and west-to-east, and a window of that grid is read
//! from the file's cells through an exact index flip (cell (c, r) of the normalised grid is
//! stored cell (W − 1 − c, r) when columns run west, (c, H − 1 − r) when rows run north).
//! No value is resampled, so a flipped file gives bit for bit the layers of the same
//! terrain stored north-up.

use ndarray::Array2;

use crate::grid::{Grid, Window};

/// How a file's columns and rows run, relative to north-up and west-to-east.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub struct Orientation {
    /// Columns run from east to west (negative x cell size).
    pub columns_run_west: bool,
    /// Rows run from south to north (positive y cell size).
    pub rows_run_north: bool,
}

impl Orientation {
    /// The orientation a GDAL-order geotransform describes (its rotation terms must be 0).
    pub fn of(transform: &[f64; 6]) -> Orientation {
        Orientation {
            columns_run_west: transform[1] < 0.0,
            rows_run_north: transform[5] > 0.0,
        }
    }

    /// True when the file is stored north-up and west-to-east (no flip).
    pub fn is_north_up(self) -> bool {
        !self.columns_run_west && !self.rows_run_north
    }

    /// Words for messages and `info`: "north-up", "south-up", "north-up, columns east to
    /// west", "south-up, columns east to west".
    pub fn describe(self) -> &'static str {
        match (self.rows_run_north, self.columns_run_west) {
            (false, false) => "north-up",
            (true, false) => "south-up",
            (false, true) => "north-up, columns east to west",
            (true, true) => "south-up, columns east to west",
        }
    }

    /// The north-up, west-to-east grid covering the same cells as `grid` (stored in this
    /// orientation): the origin moves to the north-west corner, x = t0 + W·t1 when columns
    /// run west and y = t3 + H·t5 when rows run north, and both cell sizes take the signs
    /// of a north-up grid. Cell sizes keep their magnitudes exactly.
    pub fn normalise(self, mut grid: Grid) -> Grid {
        let t = &mut grid.transform;
        if self.columns_run_west {
            t[0] += grid.width as f64 * t[1];
            t[1] = -t[1];
        }
        if self.rows_run_north {
            t[3] += grid.height as f64 * t[5];
            t[5] = -t[5];
        }
        grid
    }

    /// The window of stored cell indices that holds the cells of `window` (in normalised
    /// indices) of a `width` x `height` raster. Windows reaching past the raster map to
    /// windows reaching past it on the mirrored side.
    pub fn stored_window(self, window: Window, width: usize, height: usize) -> Window {
        let mut w = window;
        if self.columns_run_west {
            w.col = width as i64 - (window.col + window.width as i64);
        }
        if self.rows_run_north {
            w.row = height as i64 - (window.row + window.height as i64);
        }
        w
    }

    /// Turn an array read in stored order (the cells of [`Orientation::stored_window`])
    /// into normalised order, in place: rows reversed when rows run north, each row
    /// reversed when columns run west. The array keeps its standard layout.
    pub fn reorient<T>(self, a: &mut Array2<T>) {
        if self.rows_run_north {
            let h = a.nrows();
            for i in 0..h / 2 {
                let (mut top, mut bottom) =
                    a.multi_slice_mut((ndarray::s![i, ..], ndarray::s![h - 1 - i, ..]));
                ndarray::Zip::from(&mut top)
                    .and(&mut bottom)
                    .for_each(std::mem::swap);
            }
        }
        if self.columns_run_west {
            for mut row in a.rows_mut() {
                match row.as_slice_mut() {
                    Some(s) => s.reverse(),
                    None => {
                        let w = row.len();
                        for j in 0..w / 2 {
                            row.swap(j, w - 1 - j);
                        }
                    }
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::grid::Crs;

    fn orientations() -> [Orientation; 4] {
        let o = |w, n| Orientation {
            columns_run_west: w,
            rows_run_north: n,
        };
        [
            o(false, false),
            o(false, true),
            o(true, false),
            o(true, true),
        ]
    }

    /// The stored transform of a 5 x 3 raster whose north-west corner is (100, 50) with
    /// 2 m cells, in orientation `o`.
    fn stored_transform(o: Orientation) -> [f64; 6] {
        let (w, h) = (5.0, 3.0);
        let (x0, sx) = if o.columns_run_west {
            (100.0 + w * 2.0, -2.0)
        } else {
            (100.0, 2.0)
        };
        let (y0, sy) = if o.rows_run_north {
            (50.0 - h * 2.0, 2.0)
        } else {
            (50.0, -2.0)
        };
        [x0, sx, 0.0, y0, 0.0, sy]
    }

    #[test]
    fn normalised_grid_is_the_north_up_grid() {
        // Closed form: every orientation of the same 5 x 3 cells normalises to the
        // north-up transform [100, 2, 0, 50, 0, −2], and a cell centre keeps its place.
        for o in orientations() {
            let t = stored_transform(o);
            assert_eq!(Orientation::of(&t), o);
            let stored = Grid::new(5, 3, t, Crs::from_epsg(32633)).unwrap();
            let g = o.normalise(stored.clone());
            assert_eq!(g.transform, [100.0, 2.0, 0.0, 50.0, 0.0, -2.0], "{o:?}");
            assert!(Orientation::of(&g.transform).is_north_up());
            for (c, r) in [(0usize, 0usize), (4, 2), (1, 2)] {
                let w = o.stored_window(Window::new(c as i64, r as i64, 1, 1), 5, 3);
                assert_eq!(
                    g.cell_centre(c as f64, r as f64),
                    stored.cell_centre(w.col as f64, w.row as f64),
                    "{o:?} cell ({c}, {r})"
                );
            }
        }
    }

    #[test]
    fn window_flip_reads_the_same_cells() {
        // A 5 x 3 raster whose value names its north-up cell (10·row + col), stored in each
        // orientation; windows inside, across and outside the edges read the north-up
        // values (NaN outside).
        let north_up = Array2::from_shape_fn((3, 5), |(r, c)| (10 * r + c) as f32);
        for o in orientations() {
            let stored = Array2::from_shape_fn((3, 5), |(r, c)| {
                let nr = if o.rows_run_north { 2 - r } else { r };
                let nc = if o.columns_run_west { 4 - c } else { c };
                north_up[[nr, nc]]
            });
            for window in [
                Window::new(0, 0, 5, 3),
                Window::new(1, 1, 3, 2),
                Window::new(-2, -1, 4, 3),
                Window::new(3, 2, 4, 4),
            ] {
                let sw = o.stored_window(window, 5, 3);
                let mut a = Array2::from_shape_fn((sw.height, sw.width), |(i, j)| {
                    let (r, c) = (sw.row + i as i64, sw.col + j as i64);
                    if (0..3).contains(&r) && (0..5).contains(&c) {
                        stored[[r as usize, c as usize]]
                    } else {
                        f32::NAN
                    }
                });
                o.reorient(&mut a);
                for ((i, j), v) in a.indexed_iter() {
                    let (r, c) = (window.row + i as i64, window.col + j as i64);
                    if (0..3).contains(&r) && (0..5).contains(&c) {
                        assert_eq!(*v, north_up[[r as usize, c as usize]], "{o:?} {window:?}");
                    } else {
                        assert!(v.is_nan(), "{o:?} {window:?}");
                    }
                }
                assert!(a.is_standard_layout());
            }
        }
    }
}

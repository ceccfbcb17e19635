//! Which cells of the stack a sample covers.
//!
//! A cell belongs to a sample when its *centre* lies inside the sample's circle or polygon;
//! a point without a radius takes the one cell containing it (column `floor((x − x0)/dx)`,
//! row `floor((y − y0)/dy)`, the same rule as GDAL-based tools' coordinate-to-index
//! lookups). Circle membership is measured in metres: `(Δx·mx)² + (Δy·my)² ≤ r²`, with
//! `mx`, `my` the metres per CRS unit east and north at the sample (the linear unit on
//! projected grids; WGS84 metres per degree at the sample's latitude on geographic grids,
//! see docs/methods.md "Metres per degree"), boundary included. Polygon membership is the
//! crossing-number (even-odd) rule with a ray towards +x, so a centre exactly on a left
//! edge is inside and on a right edge outside; holes are rings like any other, and the
//! polygons of a multipolygon are united.
//!
//! Only cells inside the grid are returned, in row-major order; the work per sample is
//! proportional to the rows and cells of its bounding box clipped to the grid.

use crate::error::{Error, Result};
use crate::grid::{metres_per_degree, CrsKind, Grid};

use super::inputs::Shape;

/// Cells of one sample inside the grid, and whether its footprint reaches past the grid.
#[derive(Clone, Debug, PartialEq, Eq, Default)]
pub struct Footprint {
    /// (col, row) of each covered cell inside the grid, row-major.
    pub cells: Vec<(i64, i64)>,
    /// True when the sample's bounding box reaches past the grid's edge.
    pub clipped: bool,
}

/// Metres per CRS unit (east, north) at CRS point (x, y) of `grid`.
pub fn metres_per_unit(grid: &Grid, y: f64) -> Result<(f64, f64)> {
    match grid.crs.kind {
        CrsKind::Projected => match grid.crs.linear_unit_m {
            // Ground metres per unit at the point's row: the unit, corrected by the
            // projection's scale where grid.rs does so (Mercator grids).
            Some(_) => {
                let (_, row) = grid.to_cell(grid.transform[0], y);
                let (hx, hy) = grid.cell_size_m(row - 0.5)?;
                Ok((hx / grid.res_x(), hy / grid.res_y()))
            }
            None => Err(Error::usage(format!(
                "the linear unit of the stack's CRS ({}) is not known, so radii and block sizes in metres cannot be converted",
                grid.crs.label()
            ))
            .with_fix("build terrastack with `--features gdal`, or build the stack in a CRS in metres (e.g. UTM)")),
        },
        CrsKind::Geographic => {
            let (m_lat, m_lon) = metres_per_degree(y);
            Ok((m_lon, m_lat))
        }
        CrsKind::Unknown => Err(Error::usage(
            "the stack has no coordinate reference system, so radii and block sizes in metres cannot be converted",
        )
        .with_fix("rebuild the stack from a DSM with a CRS, or give points without a radius")),
    }
}

/// Range of indices `i` in `0..n` (clipped) for which the fractional index of a coordinate
/// interval [a, b] can contain cell centres, plus whether it had to be clipped.
fn index_range(f0: f64, f1: f64, n: usize) -> (i64, i64, bool) {
    let lo = f0.min(f1).floor() - 1.0;
    let hi = f0.max(f1).ceil() + 1.0;
    let clipped = lo < -1.0 || hi > n as f64 + 1.0;
    let lo = lo.max(0.0).min(n as f64) as i64;
    let hi = hi.max(0.0).min(n as f64) as i64;
    (lo, hi, clipped)
}

/// The cell containing CRS point (x, y), if inside the grid.
pub fn point_cell(grid: &Grid, x: f64, y: f64) -> Option<(i64, i64)> {
    let (fc, fr) = grid.to_cell(x, y);
    let (c, r) = (fc.floor(), fr.floor());
    (c >= 0.0 && r >= 0.0 && c < grid.width as f64 && r < grid.height as f64)
        .then_some((c as i64, r as i64))
}

/// Cells whose centre lies within `radius_m` metres of CRS point (x, y).
pub fn circle_cells(grid: &Grid, x: f64, y: f64, radius_m: f64) -> Result<Footprint> {
    let (mx, my) = metres_per_unit(grid, y)?;
    let (rx, ry) = (radius_m / mx, radius_m / my);
    let (c0, r0) = grid.to_cell(x - rx, y - ry);
    let (c1, r1) = grid.to_cell(x + rx, y + ry);
    let (col_lo, col_hi, clip_c) = index_range(c0, c1, grid.width);
    let (row_lo, row_hi, clip_r) = index_range(r0, r1, grid.height);
    let r2 = radius_m * radius_m;
    let mut cells = Vec::new();
    for row in row_lo..row_hi {
        let (_, yc) = grid.cell_centre(0.0, row as f64);
        let dy = (yc - y) * my;
        if dy * dy > r2 {
            continue;
        }
        for col in col_lo..col_hi {
            let (xc, _) = grid.cell_centre(col as f64, row as f64);
            let dx = (xc - x) * mx;
            if dx * dx + dy * dy <= r2 {
                cells.push((col, row));
            }
        }
    }
    Ok(Footprint {
        cells,
        clipped: clip_c || clip_r,
    })
}

/// Cells whose centre lies inside any of `polygons` (even-odd rule within each polygon).
pub fn polygon_cells(grid: &Grid, polygons: &[Vec<Vec<[f64; 2]>>]) -> Footprint {
    let mut cells = Vec::new();
    let mut clipped = false;
    let mut crossings: Vec<f64> = Vec::new();
    for rings in polygons {
        let (mut xmin, mut ymin) = (f64::INFINITY, f64::INFINITY);
        let (mut xmax, mut ymax) = (f64::NEG_INFINITY, f64::NEG_INFINITY);
        for &[x, y] in rings.iter().flatten() {
            xmin = xmin.min(x);
            xmax = xmax.max(x);
            ymin = ymin.min(y);
            ymax = ymax.max(y);
        }
        if !xmin.is_finite() {
            continue;
        }
        let (c0, r0) = grid.to_cell(xmin, ymin);
        let (c1, r1) = grid.to_cell(xmax, ymax);
        let (col_lo, col_hi, clip_c) = index_range(c0, c1, grid.width);
        let (row_lo, row_hi, clip_r) = index_range(r0, r1, grid.height);
        clipped |= clip_c || clip_r;
        for row in row_lo..row_hi {
            let (_, yc) = grid.cell_centre(0.0, row as f64);
            crossings.clear();
            for ring in rings {
                let n = ring.len();
                for i in 0..n {
                    let [xi, yi] = ring[i];
                    let [xj, yj] = ring[(i + n - 1) % n];
                    if (yi > yc) != (yj > yc) {
                        crossings.push((xj - xi) * (yc - yi) / (yj - yi) + xi);
                    }
                }
            }
            crossings.sort_by(f64::total_cmp);
            for pair in crossings.chunks_exact(2) {
                let (xa, xb) = (pair[0], pair[1]);
                let (fa, _) = grid.to_cell(xa, yc);
                let (fb, _) = grid.to_cell(xb, yc);
                let (lo, hi, _) = index_range(fa, fb, grid.width);
                let (lo, hi) = (lo.max(col_lo), hi.min(col_hi));
                for col in lo..hi {
                    let (xc, _) = grid.cell_centre(col as f64, row as f64);
                    // Crossing-number rule: inside when an odd number of crossings lie
                    // strictly east of the centre, i.e. xa <= xc < xb.
                    if xa <= xc && xc < xb {
                        cells.push((col, row));
                    }
                }
            }
        }
    }
    if polygons.len() > 1 {
        cells.sort_by_key(|&(c, r)| (r, c));
        cells.dedup();
    }
    Footprint { cells, clipped }
}

/// The footprint of any [`Shape`].
pub fn shape_cells(grid: &Grid, shape: &Shape) -> Result<Footprint> {
    match shape {
        Shape::Point {
            x,
            y,
            radius_m: None,
        } => Ok(Footprint {
            cells: point_cell(grid, *x, *y).into_iter().collect(),
            clipped: point_cell(grid, *x, *y).is_none(),
        }),
        Shape::Point {
            x,
            y,
            radius_m: Some(r),
        } => circle_cells(grid, *x, *y, *r),
        Shape::Polygons(p) => Ok(polygon_cells(grid, p)),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::grid::Crs;

    fn grid() -> Grid {
        // 1 m cells, corner at (1000, 2000), 40 x 30 cells.
        Grid::new(
            40,
            30,
            [1000.0, 1.0, 0.0, 2000.0, 0.0, -1.0],
            Crs::from_epsg(32633),
        )
        .unwrap()
    }

    /// PNPOLY crossing test (W. R. Franklin, "PNPOLY - Point Inclusion in Polygon Test",
    /// the same even-odd rule), as a naive reference.
    fn naive_inside(rings: &[Vec<[f64; 2]>], x: f64, y: f64) -> bool {
        let mut inside = false;
        for ring in rings {
            let n = ring.len();
            let mut j = n - 1;
            for i in 0..n {
                let [xi, yi] = ring[i];
                let [xj, yj] = ring[j];
                if (yi > y) != (yj > y) && x < (xj - xi) * (y - yi) / (yj - yi) + xi {
                    inside = !inside;
                }
                j = i;
            }
        }
        inside
    }

    #[test]
    fn point_takes_containing_cell() {
        let g = grid();
        assert_eq!(point_cell(&g, 1000.0, 2000.0), Some((0, 0)));
        assert_eq!(point_cell(&g, 1003.999, 1994.5), Some((3, 5)));
        assert_eq!(point_cell(&g, 1039.99, 1970.01), Some((39, 29)));
        assert_eq!(point_cell(&g, 1040.0, 1990.0), None);
        assert_eq!(point_cell(&g, 999.99, 1990.0), None);
    }

    #[test]
    fn circle_cell_count_matches_lattice_count() {
        // Cell centres at integer offsets from the circle's centre: the count of integer
        // lattice points with i² + j² ≤ r² is Gauss's circle problem N(r): N(1) = 5,
        // N(2) = 13, N(3) = 29, N(5) = 81 (OEIS A000328).
        let g = grid();
        for (r, n) in [(1.0, 5), (2.0, 13), (3.0, 29), (5.0, 81)] {
            let f = circle_cells(&g, 1020.5, 1985.5, r).unwrap();
            assert_eq!(f.cells.len(), n, "radius {r}");
            assert!(!f.clipped);
        }
        // Clipped at the corner: the quarter disc plus its two half-axes (r = 2, centre on
        // cell (0, 0)): lattice points with i, j >= 0 and i² + j² <= 4 = 6 (hand count).
        let f = circle_cells(&g, 1000.5, 1999.5, 2.0).unwrap();
        assert_eq!(f.cells.len(), 6);
        assert!(f.clipped);
    }

    #[test]
    fn circle_on_geographic_grid_is_metric() {
        // 1 arc-second cells at ~36.6°: 30.83 m north-south and 24.85 m east-west per
        // cell (docs/methods.md worked value: 110970.16 and 89475.76 m per degree). A 40 m
        // radius reaches 1 cell north/south (30.8 m) and 1 cell east/west (24.9 m; 2 cells
        // would be 49.7 m), plus the four diagonal cells at 39.6 m: 9 cells.
        let d = 1.0 / 3600.0;
        let g = Grid::new(
            20,
            20,
            [-5.0, d, 0.0, 36.6 + 10.0 * d, 0.0, -d],
            Crs::from_epsg(4326),
        )
        .unwrap();
        let (x, y) = g.cell_centre(10.0, 10.0);
        let f = circle_cells(&g, x, y, 40.0).unwrap();
        assert_eq!(f.cells.len(), 9);
        // 50 m adds the cells 2 east/west (49.7 m): 11.
        assert_eq!(circle_cells(&g, x, y, 50.0).unwrap().cells.len(), 11);
    }

    #[test]
    fn polygon_cells_match_naive_point_in_polygon() {
        let g = grid();
        // A concave polygon with a hole, vertices off the cell-centre lattice.
        let outer = vec![
            [1002.3, 1997.1],
            [1030.7, 1995.2],
            [1018.1, 1985.9],
            [1033.4, 1974.6],
            [1004.9, 1976.3],
        ];
        let hole = vec![
            [1008.2, 1990.4],
            [1012.6, 1990.1],
            [1011.3, 1983.7],
            [1007.9, 1984.2],
        ];
        let rings = vec![outer, hole];
        let got = polygon_cells(&g, std::slice::from_ref(&rings));
        let mut want = Vec::new();
        for row in 0..30 {
            for col in 0..40 {
                let (x, y) = g.cell_centre(col as f64, row as f64);
                if naive_inside(&rings, x, y) {
                    want.push((col, row));
                }
            }
        }
        assert!(want.len() > 100);
        assert_eq!(got.cells, want);
        assert!(!got.clipped);
    }

    #[test]
    fn square_on_cell_edges_and_multipolygon_union() {
        let g = grid();
        // Square with corners on cell corners: exactly the 4 x 3 cells inside (closed form).
        let sq = vec![vec![
            [1002.0, 1990.0],
            [1006.0, 1990.0],
            [1006.0, 1987.0],
            [1002.0, 1987.0],
        ]];
        assert_eq!(polygon_cells(&g, std::slice::from_ref(&sq)).cells.len(), 12);
        // Union of two overlapping squares counts shared cells once: 12 + 12 - 4 = 20.
        let sq2 = vec![vec![
            [1004.0, 1989.0],
            [1008.0, 1989.0],
            [1008.0, 1986.0],
            [1004.0, 1986.0],
        ]];
        let f = polygon_cells(&g, &[sq, sq2]);
        assert_eq!(f.cells.len(), 20);
        // Entirely outside: no cells, clipped.
        let far = vec![vec![[0.0, 0.0], [5.0, 0.0], [5.0, 5.0]]];
        let f = polygon_cells(&g, &[far]);
        assert!(f.cells.is_empty() && f.clipped);
    }

    #[test]
    fn unknown_crs_refuses_radius() {
        let g = Grid::new(4, 4, [0.0, 1.0, 0.0, 4.0, 0.0, -1.0], Crs::none()).unwrap();
        let e = circle_cells(&g, 1.0, 1.0, 1.0).unwrap_err().to_string();
        assert!(e.contains("no coordinate reference system"), "{e}");
    }
}

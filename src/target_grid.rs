//! The target grid: the one grid every layer of a stack is computed on.
//!
//! [`target_grid`] chooses it: the DSM's grid by default, or the DSM's CRS and origin with
//! another cell size, over the DSM's extent or over the intersection of all inputs, always
//! snapped to whole target cells anchored on the DSM's origin.

use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};
use crate::grid::Grid;

/// Which extent the target grid covers.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "lowercase")]
pub enum ExtentRule {
    /// The DSM's extent.
    #[default]
    Dsm,
    /// The area every input covers.
    Intersection,
}

/// Fraction of a cell by which snapped edges may miss a lattice line and still count as on
/// it (absorbs floating-point noise in transforms written with limited digits).
const SNAP_TOL: f64 = 1e-6;

/// The target grid, with inputs labelled "the DSM" and "input N" in errors. See
/// [`target_grid_named`], which names files.
pub fn target_grid(
    dsm: &Grid,
    others: &[&Grid],
    resolution_m: Option<f64>,
    extent: ExtentRule,
) -> Result<Grid> {
    let dsm_label = PathBuf::from("the DSM");
    let labels: Vec<PathBuf> = (1..=others.len())
        .map(|i| PathBuf::from(format!("input {i}")))
        .collect();
    let named: Vec<(&Path, &Grid)> = labels
        .iter()
        .map(|p| p.as_path())
        .zip(others.iter().copied())
        .collect();
    target_grid_named((&dsm_label, dsm), &named, resolution_m, extent)
}

/// The grid every layer is computed on.
///
/// - CRS and origin: the DSM's. The lattice of target cells is anchored on the DSM's
///   corner (x₀, y₀): cell edges lie at x₀ + i·Δx, y₀ + j·Δy.
/// - Cell size: the DSM's, or `resolution_m` metres converted to CRS units. Projected CRSs
///   divide by the linear unit (metres per foot, …); geographic CRSs use the WGS84
///   metres per degree of longitude and of latitude at the DSM's centre latitude, so cells
///   are square in metres there and only there.
/// - Extent: the DSM's or the intersection of all inputs' extents (all in the DSM's CRS),
///   shrunk to whole target cells (a partial cell at an edge is left out).
///
/// With no new resolution and the DSM's extent, the result is the DSM's grid exactly.
/// Errors: an input in the DSM's CRS that does not overlap it (named), the intersection
/// rule with an input in another CRS, a resolution that is not positive or leaves no cell.
pub fn target_grid_named(
    dsm: (&Path, &Grid),
    others: &[(&Path, &Grid)],
    resolution_m: Option<f64>,
    extent: ExtentRule,
) -> Result<Grid> {
    let (dsm_path, dsm_grid) = dsm;
    let (dx0, dy0, dx1, dy1) = dsm_grid.bounds();
    let mut bounds = (dx0, dy0, dx1, dy1);
    for (path, grid) in others {
        if !grid.crs.same_as(&dsm_grid.crs) {
            if extent == ExtentRule::Intersection {
                return Err(Error::file(
                    path,
                    format!(
                        "is in {} but the DSM {} is in {}; the intersection extent needs every input in the DSM's CRS",
                        grid.crs.label(),
                        dsm_path.display(),
                        dsm_grid.crs.label()
                    ),
                )
                .with_fix("use the DSM's extent, or reproject the file to the DSM's CRS first"));
            }
            continue;
        }
        let (x0, y0, x1, y1) = grid.bounds();
        let overlaps_dsm = x0 < dx1 && x1 > dx0 && y0 < dy1 && y1 > dy0;
        if !overlaps_dsm {
            return Err(Error::file(
                path,
                format!(
                    "does not overlap the DSM {}: its extent ({x0}, {y0}) – ({x1}, {y1}) and the DSM's ({dx0}, {dy0}) – ({dx1}, {dy1}) share no area",
                    dsm_path.display()
                ),
            )
            .with_fix("check that the file belongs to the same flight and is georeferenced in the DSM's CRS"));
        }
        if extent == ExtentRule::Intersection {
            bounds = (
                bounds.0.max(x0),
                bounds.1.max(y0),
                bounds.2.min(x1),
                bounds.3.min(y1),
            );
            if bounds.0 >= bounds.2 || bounds.1 >= bounds.3 {
                return Err(Error::file(
                    path,
                    "leaves no area common to every input (each overlaps the DSM, but not all together)",
                )
                .with_fix("drop the input that lies apart, or use the DSM's extent"));
            }
        }
    }
    let t = dsm_grid.transform;
    let (step_x, step_y) = match resolution_m {
        None => (t[1], t[5]),
        Some(res) => {
            if !(res.is_finite() && res > 0.0) {
                return Err(Error::usage(format!(
                    "the target resolution {res} m is not a positive number of metres"
                ))
                .with_fix("give the cell size in metres, e.g. `--resolution 0.25`"));
            }
            let centre_row = dsm_grid.height as f64 / 2.0 - 0.5;
            let (hx, hy) = dsm_grid
                .cell_size_m(centre_row)
                .map_err(|e| e.in_file(dsm_path))?;
            (
                t[1].signum() * res * dsm_grid.res_x() / hx,
                t[5].signum() * res * dsm_grid.res_y() / hy,
            )
        }
    };
    if resolution_m.is_none() && extent == ExtentRule::Dsm {
        return Ok(dsm_grid.clone());
    }
    let span = |a: f64, b: f64, origin: f64, step: f64| -> (i64, i64) {
        let (ia, ib) = ((a - origin) / step, (b - origin) / step);
        let (lo, hi) = (ia.min(ib), ia.max(ib));
        (
            (lo - SNAP_TOL).ceil() as i64,
            (hi + SNAP_TOL).floor() as i64,
        )
    };
    let (c0, c1) = span(bounds.0, bounds.2, t[0], step_x);
    let (r0, r1) = span(bounds.1, bounds.3, t[3], step_y);
    if c1 <= c0 || r1 <= r0 {
        return Err(Error::file(
            dsm_path,
            format!(
                "the target grid would hold no whole cell: the extent is {:.3} x {:.3} CRS units and the cell {:.6} x {:.6}",
                bounds.2 - bounds.0,
                bounds.3 - bounds.1,
                step_x.abs(),
                step_y.abs()
            ),
        )
        .with_fix("choose a smaller --resolution"));
    }
    let transform = [
        t[0] + c0 as f64 * step_x,
        step_x,
        0.0,
        t[3] + r0 as f64 * step_y,
        0.0,
        step_y,
    ];
    Ok(Grid::new(
        (c1 - c0) as usize,
        (r1 - r0) as usize,
        transform,
        dsm_grid.crs.clone(),
    )
    .map_err(|e| e.in_file(dsm_path))?
    .with_nodata(dsm_grid.nodata))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::grid::{metres_per_degree, Crs};

    fn utm_grid(w: usize, h: usize, x0: f64, y0: f64, res: f64) -> Grid {
        Grid::new(w, h, [x0, res, 0.0, y0, 0.0, -res], Crs::from_epsg(32633)).unwrap()
    }

    #[test]
    fn target_grid_defaults_to_dsm() {
        let dsm = utm_grid(100, 80, 500_000.0, 4_000_080.0, 0.05);
        assert_eq!(target_grid(&dsm, &[], None, ExtentRule::Dsm).unwrap(), dsm);
    }

    #[test]
    fn target_grid_new_resolution_snaps_inward() {
        // 100 x 80 cells of 0.05 m = 5 m x 4 m; 0.3 m cells: floor(5/0.3) = 16, floor(4/0.3) = 13.
        let dsm = utm_grid(100, 80, 500_000.0, 4_000_080.0, 0.05);
        let g = target_grid(&dsm, &[], Some(0.3), ExtentRule::Dsm).unwrap();
        assert_eq!((g.width, g.height), (16, 13));
        assert_eq!(g.transform, [500_000.0, 0.3, 0.0, 4_000_080.0, 0.0, -0.3]);
    }

    #[test]
    fn target_grid_intersection_anchored_on_dsm_origin() {
        let dsm = utm_grid(100, 100, 1000.0, 2000.0, 1.0); // x 1000..1100, y 1900..2000
        let ortho = utm_grid(200, 200, 1040.3, 1980.4, 0.5); // x 1040.3..1140.3, y 1880.4..1980.4
        let g = target_grid(&dsm, &[&ortho], Some(2.0), ExtentRule::Intersection).unwrap();
        // Edges on the lattice 1000 + 2i, 2000 − 2j inside [1040.3, 1100] x [1900, 1980.4]:
        // x 1042..1100 (29 cells), y 1900..1980 (40 cells). Worked by hand.
        assert_eq!(g.transform, [1042.0, 2.0, 0.0, 1980.0, 0.0, -2.0]);
        assert_eq!((g.width, g.height), (29, 40));
        let g1 = target_grid(&dsm, &[&ortho], None, ExtentRule::Intersection).unwrap();
        assert_eq!(g1.transform[0], 1041.0);
        assert_eq!((g1.width, g1.height), (59, 80));
    }

    #[test]
    fn target_grid_errors() {
        let dsm = utm_grid(10, 10, 0.0, 10.0, 1.0);
        let far = utm_grid(10, 10, 500.0, 500.0, 1.0);
        let e = target_grid_named(
            (Path::new("dsm.tif"), &dsm),
            &[(Path::new("ortho.tif"), &far)],
            None,
            ExtentRule::Dsm,
        )
        .unwrap_err()
        .to_string();
        assert!(
            e.starts_with("ortho.tif") && e.contains("dsm.tif") && e.contains("does not overlap"),
            "{e}"
        );
        assert!(target_grid(&dsm, &[], Some(0.0), ExtentRule::Dsm).is_err());
        let e = target_grid(&dsm, &[], Some(50.0), ExtentRule::Dsm)
            .unwrap_err()
            .to_string();
        assert!(e.contains("no whole cell"), "{e}");
        let geo = Grid::new(
            10,
            10,
            [15.0, 1e-5, 0.0, 36.0, 0.0, -1e-5],
            Crs::from_epsg(4326),
        )
        .unwrap();
        let e = target_grid(&dsm, &[&geo], None, ExtentRule::Intersection)
            .unwrap_err()
            .to_string();
        assert!(e.contains("EPSG:4326") && e.contains("reproject"), "{e}");
        let nocrs = Grid::new(10, 10, [0.0, 1.0, 0.0, 10.0, 0.0, -1.0], Crs::none()).unwrap();
        assert!(target_grid(&nocrs, &[], Some(2.0), ExtentRule::Dsm).is_err());
    }

    #[test]
    fn target_grid_geographic_resolution_at_centre_latitude() {
        // 1000 x 1000 cells of 1e-6° whose centre latitude is 36.6°: 0.5 m cells become
        // 0.5/89475.76° wide and 0.5/110970.16° tall (docs/methods.md worked metres per degree).
        let d = 1e-6;
        let dsm = Grid::new(
            1000,
            1000,
            [15.0, d, 0.0, 36.6 + 500.0 * d, 0.0, -d],
            Crs::from_epsg(4326),
        )
        .unwrap();
        let g = target_grid(&dsm, &[], Some(0.5), ExtentRule::Dsm).unwrap();
        let (m_lat, m_lon) = metres_per_degree(36.6);
        assert!((g.transform[1] - 0.5 / m_lon).abs() < 1e-13);
        assert!((g.transform[5] + 0.5 / m_lat).abs() < 1e-13);
        assert!((m_lon - 89_475.76).abs() < 0.01);
        // 1e-3° of longitude is 89.47576 m: 178 whole cells of 0.5 m.
        assert_eq!(g.width, 178);
    }
}

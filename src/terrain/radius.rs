//! Window radii: metres to cells ([`radius_cells`]) and the checks every radius goes
//! through ([`check_radius_value`], [`validate_window_radius`]).

use crate::error::{Error, Result};

/// Window radius in cells for radius `r` metres and cell size `h` metres: ⌊r/h⌋, with a
/// relative tolerance of 1e-9 so that r = k·h given in decimal counts k cells.
///
/// ```
/// use terrastack::terrain::radius_cells;
///
/// assert_eq!(radius_cells(0.3, 0.1), 3); // 0.3/0.1 is 2.9999999999999996 in f64
/// assert_eq!(radius_cells(2.5, 1.0), 2);
/// assert_eq!(radius_cells(-1.0, 1.0), 0);
/// ```
pub fn radius_cells(r: f64, h: f64) -> usize {
    if !(r.is_finite() && h.is_finite() && h > 0.0 && r > 0.0) {
        return 0;
    }
    (r / h * (1.0 + 1e-9)).floor() as usize
}

/// Smallest window radius a windowed feature (or the multi-scale fit) accepts, in cells of
/// the grid on each axis: 1.5 cells gives at least the full 3x3 neighbourhood (a disc of
/// radius 1.5·h holds all nine cells, since √2 < 1.5). Below one cell a window is the
/// centre alone, where TPI, DEV, roughness and relief are 0 whatever the terrain.
pub const MIN_RADIUS_CELLS: f64 = 1.5;

/// Checks a window radius as typed (`origin` names where it came from, e.g. `--scales` or
/// `` `tpi@5` in --features ``): it must be a finite number of metres above 0. The one
/// check of radius values; [`validate_window_radius`] adds the grid's checks.
pub fn check_radius_value(r: f64, origin: &str) -> Result<()> {
    if r.is_finite() && r > 0.0 {
        return Ok(());
    }
    Err(Error::usage(format!(
        "window radius {r} ({origin}) is not a positive number of metres"
    ))
    .with_fix("give window radii in metres above 0, e.g. `--scales 0.5,2,10` or `tpi@5`"))
}

/// Checks a window radius of `r` metres against the grid it will be used on: a valid
/// value ([`check_radius_value`]) that spans at least [`MIN_RADIUS_CELLS`] cells along x
/// and along y, for the largest cell sizes of the grid (`hx_max`, `hy_max`, metres; on
/// geographic grids those of the row where cells are widest). `origin` names the flag,
/// word or recipe key the radius came from. Every windowed radius of a plan goes through
/// this one function.
pub fn validate_window_radius(r: f64, origin: &str, hx_max: f64, hy_max: f64) -> Result<()> {
    check_radius_value(r, origin)?;
    let h = hx_max.max(hy_max);
    let cells = r / h;
    // Same decimal tolerance as `radius_cells`: 0.15 m at 0.1 m cells is 1.5 cells.
    if cells * (1.0 + 1e-9) < MIN_RADIUS_CELLS {
        return Err(Error::usage(format!(
            "window radius {r} m ({origin}) spans only {cells:.3} cells of {h} m; windowed \
             features need at least {MIN_RADIUS_CELLS} cells on each axis (smaller windows \
             hold the centre cell and hardly any neighbour)"
        ))
        .with_fix(format!(
            "use radii of at least {} m on this grid, or a finer --resolution",
            MIN_RADIUS_CELLS * h
        )));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn window_radius_must_span_one_and_a_half_cells() {
        // The rule of MIN_RADIUS_CELLS: r/h ≥ 1.5 on the coarser axis, decimal tolerance.
        assert!(validate_window_radius(0.15, "--scales", 0.1, 0.1).is_ok());
        assert!(validate_window_radius(5.0, "--scales", 0.1, 0.1).is_ok());
        let e = validate_window_radius(0.05, "--scales", 0.1, 0.1)
            .unwrap_err()
            .to_string();
        assert!(e.contains("--scales") && e.contains("0.500 cells"), "{e}");
        // Unequal cells: the coarser axis decides (0.2 m / 0.2 m = 1 cell).
        assert!(validate_window_radius(0.2, "`tpi@0.2`", 0.1, 0.2).is_err());
        for bad in [0.0, -5.0, f64::NAN, f64::INFINITY] {
            let e = validate_window_radius(bad, "--scales", 0.1, 0.1)
                .unwrap_err()
                .to_string();
            assert!(e.contains("not a positive number of metres"), "{bad}: {e}");
        }
        assert!(matches!(
            check_radius_value(-1.0, "--scales"),
            Err(Error::Usage { .. })
        ));
    }
}

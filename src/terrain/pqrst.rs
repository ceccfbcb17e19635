//! The partial derivatives p, q, r, s, t of one cell (docs/methods.md axes: x east, y
//! north), which every slope and curvature formula takes.

/// Partial derivatives at one cell (units: p, q unitless; r, s, t in 1/m).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Pqrst {
    pub p: f64,
    pub q: f64,
    pub r: f64,
    pub s: f64,
    pub t: f64,
}

impl Pqrst {
    /// All NaN.
    pub const NAN: Pqrst = Pqrst {
        p: f64::NAN,
        q: f64::NAN,
        r: f64::NAN,
        s: f64::NAN,
        t: f64::NAN,
    };
}

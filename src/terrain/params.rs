//! Parameters of a terrain run: the derivative estimator ([`SlopeMethod`]), the window
//! shape ([`WindowShape`]) and the settings shared by every feature ([`TerrainParams`]).

/// How first and second partial derivatives are estimated.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum SlopeMethod {
    /// Horn 1981 3x3 weighted differences (first derivatives only).
    Horn,
    /// Zevenbergen & Thorne 1987 3x3 partial quartic.
    ZevenbergenThorne,
    /// Evans 1979 / Young 1978 3x3 least-squares quadratic.
    EvansYoung,
    /// Wood 1996 least-squares quadratic over an n x n window (multi-scale).
    Quadratic,
}

impl SlopeMethod {
    /// Stable lower-case name used in band names and metadata.
    pub fn name(self) -> &'static str {
        match self {
            SlopeMethod::Horn => "horn",
            SlopeMethod::ZevenbergenThorne => "zevenbergen_thorne",
            SlopeMethod::EvansYoung => "evans_young",
            SlopeMethod::Quadratic => "quadratic",
        }
    }
}

/// Which cells form a window of radius r metres. The default is the square: its cost per
/// cell does not grow with the radius (integral images, as in Lindsay, Cockburn & Russell
/// 2015, docs/methods.md), so the large radii of multi-scale position cost what the small
/// ones do; the exact disc costs O(r/h) per cell.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Default)]
pub enum WindowShape {
    /// Cells whose centres lie within r of the centre cell's centre (centre included).
    Disc,
    /// The (2kx+1) x (2ky+1) cells with kx = ⌊r/hx⌋, ky = ⌊r/hy⌋ at the centre row.
    #[default]
    Square,
}

impl WindowShape {
    /// Stable lower-case name ("disc", "square").
    pub fn name(self) -> &'static str {
        match self {
            WindowShape::Disc => "disc",
            WindowShape::Square => "square",
        }
    }
}

/// Parameters shared by every terrain feature of a run.
#[derive(Clone, Debug, PartialEq)]
pub struct TerrainParams {
    /// A windowed feature needs at least this fraction of its window's cells valid (cells
    /// beyond the raster count as nodata), else it is NaN. Default 0.75.
    pub min_valid_fraction: f64,
    /// Multiplies every elevation before anything else (e.g. 0.3048 for DSMs in feet).
    pub z_factor: f64,
    /// Window shape of windowed statistics. Default square.
    pub shape: WindowShape,
}

impl Default for TerrainParams {
    fn default() -> Self {
        TerrainParams {
            min_valid_fraction: 0.75,
            z_factor: 1.0,
            shape: WindowShape::default(),
        }
    }
}

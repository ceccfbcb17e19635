//! Where each cell is on the ground, and how large it is in metres.
//!
//! A [`Grid`] is a raster's size, its affine transform (GDAL coefficient order, always in
//! the pixel-is-area convention: the transform maps the *corner* of cell (0, 0)), its
//! [`Crs`] and its nodata value. Rotated or sheared transforms are refused.
//!
//! Cell sizes in metres come from the CRS: projected units are converted (metres, feet);
//! on geographic grids the WGS84 ellipsoid's metres per degree are taken at each row's
//! latitude (see `METHODS.md`, "Metres per degree").

use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};

/// WGS84 semi-major axis in metres (EPSG:7030).
pub const WGS84_A: f64 = 6_378_137.0;
/// WGS84 inverse flattening (EPSG:7030).
pub const WGS84_INV_F: f64 = 298.257_223_563;

/// Largest width or height accepted, in cells. Guards allocations against corrupt headers.
pub const MAX_DIMENSION: usize = 1 << 22;

/// International foot (EPSG:9002) in metres.
pub const FOOT_M: f64 = 0.3048;
/// US survey foot (EPSG:9003) in metres.
pub const US_SURVEY_FOOT_M: f64 = 1200.0 / 3937.0;

/// Metres per degree of latitude and of longitude at geodetic latitude `lat_deg` on the
/// WGS84 ellipsoid: `M·π/180` and `N·cos φ·π/180`, with M and N the meridional and
/// prime-vertical radii of curvature (any geodesy text, e.g. Torge & Müller, Geodesy,
/// 4th ed., 2012, §6.2).
pub fn metres_per_degree(lat_deg: f64) -> (f64, f64) {
    let f = 1.0 / WGS84_INV_F;
    let e2 = f * (2.0 - f);
    let phi = lat_deg.clamp(-90.0, 90.0).to_radians();
    let w2 = 1.0 - e2 * phi.sin().powi(2);
    let m = WGS84_A * (1.0 - e2) / w2.powf(1.5);
    let n = WGS84_A / w2.sqrt();
    let k = std::f64::consts::PI / 180.0;
    (m * k, n * phi.cos() * k)
}

/// What kind of coordinate reference system a grid uses.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum CrsKind {
    /// Easting/northing in a linear unit (metres, feet).
    Projected,
    /// Longitude/latitude in degrees.
    Geographic,
    /// Not georeferenced, or a CRS terrastack cannot classify without GDAL.
    Unknown,
}

/// A coordinate reference system as far as terrastack needs to know it.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Crs {
    /// EPSG code of the horizontal CRS, when known.
    pub epsg: Option<u32>,
    /// OGC WKT, when known (always with the `gdal` feature; otherwise only when a file
    /// carried it).
    pub wkt: Option<String>,
    /// Projected, geographic or unknown.
    pub kind: CrsKind,
    /// Metres per horizontal unit for projected CRSs (1 for metres, 0.3048 for feet).
    pub linear_unit_m: Option<f64>,
    /// EPSG code of the vertical CRS, when the file states one.
    pub vertical_epsg: Option<u32>,
    /// Human-readable name ("WGS 84 / UTM zone 33N"), when known.
    pub name: Option<String>,
}

impl Crs {
    /// No CRS at all.
    pub fn none() -> Crs {
        Crs {
            epsg: None,
            wkt: None,
            kind: CrsKind::Unknown,
            linear_unit_m: None,
            vertical_epsg: None,
            name: None,
        }
    }

    /// A CRS from its EPSG code, classified without GDAL for the families that drone
    /// surveys use: WGS84, ETRS89 and NAD83 geographic; UTM on WGS84 (326xx/327xx),
    /// ETRS89 (25828–25838) and NAD83 (26901–26923); Web Mercator (3857). Other codes in
    /// 4000–4999 are taken as geographic (the EPSG range for geographic 2D CRSs); any other
    /// code is projected with its linear unit unknown until a file or GDAL states it.
    pub fn from_epsg(code: u32) -> Crs {
        let mut crs = Crs::none();
        crs.epsg = Some(code);
        match code {
            4326 => {
                crs.kind = CrsKind::Geographic;
                crs.name = Some("WGS 84".into());
            }
            4258 => {
                crs.kind = CrsKind::Geographic;
                crs.name = Some("ETRS89".into());
            }
            4269 => {
                crs.kind = CrsKind::Geographic;
                crs.name = Some("NAD83".into());
            }
            4000..=4999 if code != 4978 => crs.kind = CrsKind::Geographic,
            32601..=32660 | 32701..=32760 => {
                let zone = code % 100;
                let hemi = if code < 32700 { 'N' } else { 'S' };
                crs.kind = CrsKind::Projected;
                crs.linear_unit_m = Some(1.0);
                crs.name = Some(format!("WGS 84 / UTM zone {zone}{hemi}"));
            }
            25828..=25838 => {
                crs.kind = CrsKind::Projected;
                crs.linear_unit_m = Some(1.0);
                crs.name = Some(format!("ETRS89 / UTM zone {}N", code - 25800));
            }
            26901..=26923 => {
                crs.kind = CrsKind::Projected;
                crs.linear_unit_m = Some(1.0);
                crs.name = Some(format!("NAD83 / UTM zone {}N", code - 26900));
            }
            3857 => {
                crs.kind = CrsKind::Projected;
                crs.linear_unit_m = Some(1.0);
                crs.name = Some("WGS 84 / Pseudo-Mercator".into());
            }
            _ => crs.kind = CrsKind::Projected,
        }
        crs
    }

    /// True when the grid is georeferenced in a CRS terrastack can measure in metres.
    pub fn is_known(&self) -> bool {
        match self.kind {
            CrsKind::Geographic => true,
            CrsKind::Projected => self.linear_unit_m.is_some(),
            CrsKind::Unknown => false,
        }
    }

    /// Short label for messages: "EPSG:32633", the name, or "unknown CRS".
    pub fn label(&self) -> String {
        match (self.epsg, &self.name) {
            (Some(code), Some(name)) => format!("EPSG:{code} ({name})"),
            (Some(code), None) => format!("EPSG:{code}"),
            (None, Some(name)) => name.clone(),
            (None, None) => "unknown CRS".into(),
        }
    }

    /// Whether two CRSs are the same. Equal EPSG codes decide at once; different codes
    /// mean different CRSs. Otherwise (a code missing on either side) the `gdal` feature
    /// compares through GDAL's spatial-reference API (`raster::gdal::same_crs`); without it,
    /// equal WKT texts are the same and unknown CRSs only equal each other.
    pub fn same_as(&self, other: &Crs) -> bool {
        if let (Some(a), Some(b)) = (self.epsg, other.epsg) {
            return a == b;
        }
        #[cfg(feature = "gdal")]
        if self.kind != CrsKind::Unknown && other.kind != CrsKind::Unknown {
            return crate::raster::gdal::same_crs(self, other);
        }
        self.same_as_without_gdal(other)
    }

    /// [`Crs::same_as`] from what the two values hold alone: equal EPSG codes, else equal
    /// WKT texts; unknown CRSs only equal each other.
    pub fn same_as_without_gdal(&self, other: &Crs) -> bool {
        if let (Some(a), Some(b)) = (self.epsg, other.epsg) {
            return a == b;
        }
        match (&self.wkt, &other.wkt) {
            (Some(a), Some(b)) => a == b,
            _ => self.kind == CrsKind::Unknown && other.kind == CrsKind::Unknown,
        }
    }
}

/// Whether a file's raster values describe cell areas or point samples (GeoTIFF
/// GTRasterTypeGeoKey). terrastack keeps [`Grid::transform`] in the area convention and
/// records the file's convention only to report it and to write it back.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "lowercase")]
pub enum RasterSpace {
    #[default]
    Area,
    Point,
}

/// A rectangle of cells, in the cell indices of some grid. Offsets are signed so that a
/// block's halo may reach past the raster's edges; cells out there read as nodata.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub struct Window {
    /// Column of the window's west-most cells.
    pub col: i64,
    /// Row of the window's north-most cells.
    pub row: i64,
    pub width: usize,
    pub height: usize,
}

impl Window {
    pub fn new(col: i64, row: i64, width: usize, height: usize) -> Window {
        Window {
            col,
            row,
            width,
            height,
        }
    }

    /// The whole grid.
    pub fn full(grid: &Grid) -> Window {
        Window::new(0, 0, grid.width, grid.height)
    }

    /// This window grown by `halo` cells on every side.
    pub fn grow(&self, halo: usize) -> Window {
        let h = halo as i64;
        Window::new(
            self.col - h,
            self.row - h,
            self.width + 2 * halo,
            self.height + 2 * halo,
        )
    }

    /// Number of cells.
    pub fn len(&self) -> usize {
        self.width * self.height
    }

    /// True when the window holds no cell.
    pub fn is_empty(&self) -> bool {
        self.width == 0 || self.height == 0
    }

    /// The overlap of two windows, if any.
    pub fn intersect(&self, other: &Window) -> Option<Window> {
        let c0 = self.col.max(other.col);
        let r0 = self.row.max(other.row);
        let c1 = (self.col + self.width as i64).min(other.col + other.width as i64);
        let r1 = (self.row + self.height as i64).min(other.row + other.height as i64);
        (c1 > c0 && r1 > r0).then(|| Window::new(c0, r0, (c1 - c0) as usize, (r1 - r0) as usize))
    }
}

/// Cell sizes in metres, one entry per row of a block (rows may lie outside the grid).
/// On projected grids every entry is the same.
#[derive(Clone, Debug, PartialEq)]
pub struct CellSizes {
    /// East-west cell size in metres, per row.
    pub hx: Vec<f64>,
    /// North-south cell size in metres, per row.
    pub hy: Vec<f64>,
}

impl CellSizes {
    /// The same cell size on `rows` rows (projected grids, tests).
    pub fn uniform(hx: f64, hy: f64, rows: usize) -> CellSizes {
        CellSizes {
            hx: vec![hx; rows],
            hy: vec![hy; rows],
        }
    }
}

/// A raster's geometry: size, transform, CRS and nodata.
#[derive(Clone, Debug, PartialEq)]
pub struct Grid {
    pub width: usize,
    pub height: usize,
    /// GDAL order: x = t0 + col·t1 + row·t2, y = t3 + col·t4 + row·t5, at cell corners.
    pub transform: [f64; 6],
    pub crs: Crs,
    pub nodata: Option<f64>,
}

impl Grid {
    /// A north-up grid. Refuses zero or absurd sizes, non-finite coefficients, zero cell
    /// sizes and rotated or sheared transforms.
    pub fn new(width: usize, height: usize, transform: [f64; 6], crs: Crs) -> Result<Grid> {
        if width == 0 || height == 0 || width > MAX_DIMENSION || height > MAX_DIMENSION {
            return Err(Error::usage(format!(
                "raster size {width} x {height} is outside 1..={MAX_DIMENSION} cells per side"
            )));
        }
        if transform.iter().any(|v| !v.is_finite()) {
            return Err(Error::usage(
                "the geotransform has a non-finite coefficient",
            ));
        }
        if transform[2] != 0.0 || transform[4] != 0.0 {
            return Err(Error::usage(format!(
                "the geotransform is rotated or sheared (row/column terms {} and {}); \
                 terrastack needs a north-up grid",
                transform[2], transform[4]
            ))
            .with_fix("warp the raster to a north-up grid first (e.g. with GDAL's warper)"));
        }
        if transform[1] == 0.0 || transform[5] == 0.0 {
            return Err(Error::usage("the geotransform has a zero cell size"));
        }
        Ok(Grid {
            width,
            height,
            transform,
            crs,
            nodata: None,
        })
    }

    /// The same grid with `nodata` set.
    pub fn with_nodata(mut self, nodata: Option<f64>) -> Grid {
        self.nodata = nodata;
        self
    }

    /// Cell width in CRS units (positive).
    pub fn res_x(&self) -> f64 {
        self.transform[1].abs()
    }

    /// Cell height in CRS units (positive).
    pub fn res_y(&self) -> f64 {
        self.transform[5].abs()
    }

    /// CRS coordinates of the centre of cell (`col`, `row`); fractional indices allowed.
    pub fn cell_centre(&self, col: f64, row: f64) -> (f64, f64) {
        let t = &self.transform;
        (t[0] + (col + 0.5) * t[1], t[3] + (row + 0.5) * t[5])
    }

    /// Fractional (col, row) of CRS point (x, y), measured from the grid's corner: the
    /// cell containing the point is (floor(col), floor(row)).
    pub fn to_cell(&self, x: f64, y: f64) -> (f64, f64) {
        let t = &self.transform;
        ((x - t[0]) / t[1], (y - t[3]) / t[5])
    }

    /// Extent as (xmin, ymin, xmax, ymax) in CRS units.
    pub fn bounds(&self) -> (f64, f64, f64, f64) {
        let t = &self.transform;
        let x0 = t[0];
        let x1 = t[0] + self.width as f64 * t[1];
        let y0 = t[3];
        let y1 = t[3] + self.height as f64 * t[5];
        (x0.min(x1), y0.min(y1), x0.max(x1), y0.max(y1))
    }

    /// Cell size (hx east-west, hy north-south) in metres at fractional row `row`.
    /// Errors when the CRS is unknown or its unit is not known.
    pub fn cell_size_m(&self, row: f64) -> Result<(f64, f64)> {
        match self.crs.kind {
            CrsKind::Projected => match self.crs.linear_unit_m {
                Some(u) => Ok((self.res_x() * u, self.res_y() * u)),
                None => Err(Error::usage(format!(
                    "the linear unit of {} is not known without GDAL",
                    self.crs.label()
                ))
                .with_fix("build terrastack with `--features gdal`, or give the raster a CRS in metres")),
            },
            CrsKind::Geographic => {
                let lat = self.transform[3] + (row + 0.5) * self.transform[5];
                let (m_lat, m_lon) = metres_per_degree(lat);
                Ok((self.res_x() * m_lon, self.res_y() * m_lat))
            }
            CrsKind::Unknown => Err(Error::usage(
                "the raster has no coordinate reference system, so its cell size in metres is unknown",
            )
            .with_fix("assign the CRS the DSM was produced in (photogrammetry software exports it; GDAL can set it with `-a_srs`)")),
        }
    }

    /// Cell sizes in metres for `rows` rows starting at `row0` (which may lie outside the
    /// grid: latitudes are extrapolated along the transform and clamped to ±90°).
    pub fn cell_sizes(&self, row0: i64, rows: usize) -> Result<CellSizes> {
        let mut hx = Vec::with_capacity(rows);
        let mut hy = Vec::with_capacity(rows);
        for i in 0..rows {
            let (x, y) = self.cell_size_m((row0 + i as i64) as f64)?;
            hx.push(x);
            hy.push(y);
        }
        Ok(CellSizes { hx, hy })
    }

    /// True when `other` has the same size and transform (within `tol` CRS units) and the
    /// same CRS.
    pub fn same_geometry(&self, other: &Grid, tol: f64) -> bool {
        self.width == other.width
            && self.height == other.height
            && self
                .transform
                .iter()
                .zip(other.transform.iter())
                .all(|(a, b)| (a - b).abs() <= tol)
            && self.crs.same_as(&other.crs)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    #[test]
    fn metres_per_degree_worked_value() {
        // Worked in METHODS.md ("Metres per degree"): at 36.6° 110970.16 m and 89475.76 m.
        let (lat, lon) = metres_per_degree(36.6);
        assert_relative_eq!(lat, 110_970.16, epsilon = 0.01);
        assert_relative_eq!(lon, 89_475.76, epsilon = 0.01);
    }

    #[test]
    fn metres_per_degree_equator_and_pole() {
        // At the equator a degree of longitude is a·π/180 = 111319.49 m (closed form); a
        // degree of latitude is a(1−e²)·π/180 = 110574.28 m (closed form, M at φ = 0).
        let (lat, lon) = metres_per_degree(0.0);
        assert_relative_eq!(lon, WGS84_A * std::f64::consts::PI / 180.0, epsilon = 1e-6);
        assert_relative_eq!(lat, 110_574.272_7, epsilon = 0.01);
        let (_, lon90) = metres_per_degree(90.0);
        assert!(lon90.abs() < 1e-6);
    }

    #[test]
    fn rotated_transform_refused() {
        let e = Grid::new(
            10,
            10,
            [0.0, 1.0, 0.2, 0.0, 0.0, -1.0],
            Crs::from_epsg(32633),
        );
        assert!(e.unwrap_err().to_string().contains("rotated"));
    }

    #[test]
    fn absurd_size_refused() {
        assert!(Grid::new(0, 10, [0.0, 1.0, 0.0, 0.0, 0.0, -1.0], Crs::none()).is_err());
        assert!(Grid::new(
            MAX_DIMENSION + 1,
            1,
            [0.0, 1.0, 0.0, 0.0, 0.0, -1.0],
            Crs::none()
        )
        .is_err());
    }

    #[test]
    fn projected_feet_converted() {
        let mut crs = Crs::from_epsg(2227);
        crs.linear_unit_m = Some(US_SURVEY_FOOT_M);
        let g = Grid::new(4, 4, [0.0, 2.0, 0.0, 0.0, 0.0, -2.0], crs).unwrap();
        let (hx, hy) = g.cell_size_m(0.0).unwrap();
        assert_relative_eq!(hx, 2.0 * 1200.0 / 3937.0, epsilon = 1e-12);
        assert_relative_eq!(hy, hx, epsilon = 1e-12);
    }

    #[test]
    fn geographic_cell_size_uses_row_latitude() {
        // 1 arc-second grid whose row 0 centre lies at 36.6°.
        let d = 1.0 / 3600.0;
        let g = Grid::new(
            10,
            10,
            [-5.0, d, 0.0, 36.6 + d / 2.0, 0.0, -d],
            Crs::from_epsg(4326),
        )
        .unwrap();
        let (hx, hy) = g.cell_size_m(0.0).unwrap();
        assert_relative_eq!(hx, 89_475.76 * d, epsilon = 1e-4);
        assert_relative_eq!(hy, 110_970.16 * d, epsilon = 1e-4);
        let sizes = g.cell_sizes(-2, 14).unwrap();
        assert_eq!(sizes.hx.len(), 14);
        assert!(sizes.hx[0] < sizes.hx[13]); // further north, narrower cells
    }

    #[test]
    fn unknown_crs_has_no_metres() {
        let g = Grid::new(4, 4, [0.0, 1.0, 0.0, 0.0, 0.0, -1.0], Crs::none()).unwrap();
        let e = g.cell_size_m(0.0).unwrap_err().to_string();
        assert!(e.contains("no coordinate reference system"), "{e}");
    }

    #[test]
    fn window_intersection_and_halo() {
        let a = Window::new(0, 0, 10, 10);
        let b = Window::new(5, -3, 10, 5).grow(1);
        assert_eq!(b, Window::new(4, -4, 12, 7));
        assert_eq!(a.intersect(&b), Some(Window::new(4, 0, 6, 3)));
        assert_eq!(a.intersect(&Window::new(10, 0, 2, 2)), None);
    }

    #[test]
    fn utm_names() {
        assert_eq!(
            Crs::from_epsg(32633).name.as_deref(),
            Some("WGS 84 / UTM zone 33N")
        );
        assert_eq!(
            Crs::from_epsg(32733).name.as_deref(),
            Some("WGS 84 / UTM zone 33S")
        );
        assert_eq!(Crs::from_epsg(4326).kind, CrsKind::Geographic);
    }
}

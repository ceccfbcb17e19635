//! Where each cell is on the ground, and how large it is in metres.
//!
//! A [`Grid`] is a raster's size, its affine transform (GDAL coefficient order, always in
//! the pixel-is-area convention: the transform maps the *corner* of cell (0, 0)), its
//! [`Crs`] and its nodata value. Rotated or sheared transforms are refused.
//!
//! Cell sizes in metres come from the CRS: projected units are converted (metres, feet);
//! on geographic grids the WGS84 ellipsoid's metres per degree are taken at each row's
//! latitude (see `docs/methods.md`, "Metres per degree").

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
    /// How a file defined a CRS that has no EPSG code and no WKT (a user-defined GeoTIFF
    /// CRS): its defining GeoKeys as text, kept so that two such CRSs compare equal only
    /// when they are defined alike and so that a stack written in it carries the same
    /// definition. `None` for every other CRS.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub definition: Option<String>,
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
            definition: None,
        }
    }

    /// A CRS from its EPSG code, classified without GDAL for the families that drone
    /// surveys use: WGS84, ETRS89 and NAD83 geographic; UTM on WGS84 (326xx/327xx),
    /// ETRS89 (25828–25838) and NAD83 (26901–26923); Web Mercator (3857) and World Mercator
    /// (3395). Other codes in
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
            3395 => {
                crs.kind = CrsKind::Projected;
                crs.linear_unit_m = Some(1.0);
                crs.name = Some("WGS 84 / World Mercator".into());
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

    // `Crs::same_as` (GDAL's comparison with the `gdal` feature) is in
    // `raster::crs_equality`: GDAL sits above the grid.

    /// [`Crs::same_as`] from what the two values hold alone: equal EPSG codes, else equal
    /// WKT texts; two CRSs with neither (user-defined GeoTIFF CRSs) when they are equal in
    /// everything, their defining GeoKeys included; unknown CRSs only equal each other.
    pub fn same_as_without_gdal(&self, other: &Crs) -> bool {
        if let (Some(a), Some(b)) = (self.epsg, other.epsg) {
            return a == b;
        }
        match (&self.wkt, &other.wkt) {
            (Some(a), Some(b)) => a == b,
            (None, None)
                if self.epsg.is_none() && other.epsg.is_none() && self.kind != CrsKind::Unknown =>
            {
                self == other
            }
            _ => self.kind == CrsKind::Unknown && other.kind == CrsKind::Unknown,
        }
    }

    /// How grid distances in this CRS relate to ground distances (see [`GroundScale`]).
    pub fn ground_scale(&self) -> GroundScale {
        match self.epsg {
            // EPSG:3857 and the older codes of the same definition (3785, 900913 as
            // written by early web-map tools; ESRI's 102100 and 102113), common practice.
            Some(3857 | 3785 | 900913 | 102100 | 102113) => GroundScale::PseudoMercator,
            // WGS 84 / World Mercator (EPSG:3395), and ESRI's 54004 of the same definition.
            Some(3395 | 54004) => GroundScale::WorldMercator,
            Some(32601..=32660 | 32701..=32760 | 25828..=25838 | 26901..=26923) => GroundScale::Utm,
            None if self.kind == CrsKind::Projected && self.wkt_names_mercator() => {
                GroundScale::OtherMercator
            }
            _ => GroundScale::Grid,
        }
    }

    /// True when the WKT's projection method is a (non-transverse) Mercator.
    fn wkt_names_mercator(&self) -> bool {
        let Some(wkt) = &self.wkt else {
            return false;
        };
        let w = wkt.to_ascii_lowercase();
        ["method[\"", "projection[\""].iter().any(|key| {
            w.match_indices(key).any(|(i, _)| {
                let rest = &w[i + key.len()..];
                let name = &rest[..rest.find('"').unwrap_or(rest.len())];
                name.contains("mercator") && !name.contains("transverse")
            })
        })
    }
}

/// How terrastack turns a projected grid's distances into ground metres. The rule: the
/// scale is corrected where it varies only from row to row (the Mercator family, whose
/// scale factor is about 1/cos φ: 1.15 at 30°, 1.56 at 50°), exactly as for geographic
/// grids; transverse Mercator (UTM) grids are taken at face value where their scale error
/// stays within [`MAX_SCALE_ERROR`] (inside their zone it is at most 0.1 %) and refused
/// beyond; other projected CRSs (national and local survey grids, whose scale error over a
/// site is small by design) are taken at face value; a Mercator CRS known only by a WKT
/// without an EPSG code is refused, since its variant's parameters are not read.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum GroundScale {
    /// Grid distances are ground distances (times the linear unit).
    Grid,
    /// Popular Visualisation Pseudo-Mercator (EPSG:3857): spherical Mercator formulas on
    /// WGS84 geodetic coordinates; ground cell sizes per row from the row's latitude.
    PseudoMercator,
    /// Ellipsoidal Mercator on WGS84 with the equator as standard parallel (EPSG:3395).
    WorldMercator,
    /// UTM (on WGS84, ETRS89 or NAD83): k₀ = 0.9996, false easting 500 km.
    Utm,
    /// A Mercator variant terrastack cannot parameterise: refused.
    OtherMercator,
}

/// Largest relative scale error (|k − 1|) a UTM grid taken at face value may have: 1 %,
/// reached about 920 km from the central meridian, far outside any zone (inside its zone
/// a UTM grid's error is at most about 0.1 %, which terrastack, like common survey
/// practice, accepts; beyond 1 % the site is in the wrong zone).
pub const MAX_SCALE_ERROR: f64 = 0.01;

/// Geodetic latitude (degrees) of Pseudo-Mercator northing `y`: the spherical inverse
/// φ = π/2 − 2·atan(exp(−y/a)) (EPSG Guidance Note 7-2, §1.3.3.2; Snyder 1987, Map
/// Projections – A Working Manual, USGS PP 1395, eq. 7-4).
pub fn pseudo_mercator_latitude(y: f64) -> f64 {
    (std::f64::consts::FRAC_PI_2 - 2.0 * (-y / WGS84_A).exp().atan()).to_degrees()
}

/// Geodetic latitude (degrees) of World Mercator northing `y` on WGS84: the iteration
/// φ ← π/2 − 2·atan(t·((1 − e sin φ)/(1 + e sin φ))^(e/2)), t = exp(−y/a) (Snyder 1987,
/// eq. 7-9), run to convergence (below 1e-15 rad in a handful of steps).
pub fn world_mercator_latitude(y: f64) -> f64 {
    let f = 1.0 / WGS84_INV_F;
    let e = (f * (2.0 - f)).sqrt();
    let t = (-y / WGS84_A).exp();
    let mut phi = std::f64::consts::FRAC_PI_2 - 2.0 * t.atan();
    for _ in 0..20 {
        let es = e * phi.sin();
        let next = std::f64::consts::FRAC_PI_2
            - 2.0 * (t * ((1.0 - es) / (1.0 + es)).powf(e / 2.0)).atan();
        let done = (next - phi).abs() < 1e-15;
        phi = next;
        if done {
            break;
        }
    }
    phi.to_degrees()
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
    /// A grid. Refuses zero or absurd sizes, non-finite coefficients, zero cell sizes and
    /// rotated or sheared transforms. Cell sizes may be negative (columns running west,
    /// rows running north): raster readers normalise such files to north-up grids
    /// (`raster::orientation`), and the target grid is always north-up.
    pub fn new(width: usize, height: usize, transform: [f64; 6], crs: Crs) -> Result<Grid> {
        if width == 0 || height == 0 || width > MAX_DIMENSION || height > MAX_DIMENSION {
            return Err(Error::usage(format!(
                "raster size {width} x {height} is outside 1..={MAX_DIMENSION} cells per side"
            )));
        }
        if transform.iter().any(|v| !v.is_finite()) {
            return Err(Error::usage(format!(
                "the geotransform {transform:?} has a non-finite coefficient, so the grid's cells have no position or size"
            ))
            .with_fix("georeference the raster with its real origin and cell size (GDAL: `gdal_translate -a_ullr XMIN YMAX XMAX YMIN IN OUT.tif`)"));
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
            let axis = if transform[1] == 0.0 { "x" } else { "y" };
            return Err(Error::usage(format!(
                "the geotransform gives a {axis} cell size of 0, so the grid's cells have no size"
            ))
            .with_fix("georeference the raster with its real cell size (GDAL: `gdal_translate -a_ullr XMIN YMAX XMAX YMIN IN OUT.tif`)"));
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
    ///
    /// - Projected CRSs: the cell size times the linear unit, corrected by the
    ///   projection's scale where [`Crs::ground_scale`] says so. Pseudo-Mercator (EPSG:3857):
    ///   x = a·λ and y = a·ln tan(π/4 + φ/2) on WGS84 geodetic coordinates, so a cell of
    ///   Δx, Δy spans Δx·N(φ)·cos φ/a east-west and Δy·M(φ)·cos φ/a north-south, φ the
    ///   row's latitude (M, N the radii of `metres_per_degree`). World Mercator
    ///   (EPSG:3395) is conformal with scale k = √(1 − e² sin²φ)/cos φ (Snyder 1987, eq.
    ///   7-8): both sizes are Δ/k.
    /// - Geographic CRSs: WGS84 metres per degree at the row's latitude.
    ///
    /// Errors when the CRS is unknown, its unit is unknown or not a positive length, a
    /// UTM grid lies so far from its zone's central meridian that its scale error exceeds
    /// [`MAX_SCALE_ERROR`], a Mercator variant cannot be parameterised, or a geographic
    /// grid reaches a pole (a cell centre at or past ±90°, or an extent past it).
    pub fn cell_size_m(&self, row: f64) -> Result<(f64, f64)> {
        let y = self.transform[3] + (row + 0.5) * self.transform[5];
        match self.crs.kind {
            CrsKind::Projected => {
                let u = match self.crs.linear_unit_m {
                    Some(u) if u.is_finite() && u > 0.0 => u,
                    Some(u) => {
                        return Err(Error::usage(format!(
                            "the linear unit of {} is given as {u} m, which is not a length: a unit must be a positive number of metres",
                            self.crs.label()
                        ))
                        .with_fix("correct the CRS's unit definition, or assign the CRS by its EPSG code"))
                    }
                    None if self.crs.epsg.is_none() => {
                        return Err(Error::usage(format!(
                            "the projected CRS {} has no EPSG code and states no linear unit, so its cell size in metres is unknown",
                            self.crs.label()
                        ))
                        .with_fix("assign the CRS by its EPSG code, or give it a linear unit (metres, feet)"))
                    }
                    None => {
                        return Err(Error::usage(format!(
                            "the linear unit of {} is not known without GDAL",
                            self.crs.label()
                        ))
                        .with_fix("build terrastack with `--features gdal`, or give the raster a CRS in metres"))
                    }
                };
                let (gx, gy) = (self.res_x() * u, self.res_y() * u);
                match self.crs.ground_scale() {
                    GroundScale::Grid => Ok((gx, gy)),
                    GroundScale::Utm => {
                        self.check_utm_scale(u)?;
                        Ok((gx, gy))
                    }
                    GroundScale::PseudoMercator => {
                        let phi = pseudo_mercator_latitude(y * u).clamp(-90.0, 90.0);
                        let (m_lat, m_lon) = metres_per_degree(phi);
                        // metres per degree = radius·π/180, so radius·cos φ/a follows.
                        let k = std::f64::consts::PI / 180.0 * WGS84_A;
                        Ok((gx * m_lon / k, gy * m_lat * phi.to_radians().cos() / k))
                    }
                    GroundScale::WorldMercator => {
                        let phi = world_mercator_latitude(y * u).to_radians();
                        let f = 1.0 / WGS84_INV_F;
                        let e2 = f * (2.0 - f);
                        let scale = (1.0 - e2 * phi.sin().powi(2)).sqrt() / phi.cos();
                        Ok((gx / scale, gy / scale))
                    }
                    GroundScale::OtherMercator => Err(Error::usage(format!(
                        "{} is a Mercator projection whose parameters terrastack does not read, and Mercator cells are not ground metres (the scale factor is about 1/cos(latitude))",
                        self.crs.label()
                    ))
                    .with_fix("reproject the raster to the local UTM zone or national grid (e.g. `gdalwarp -t_srs EPSG:326NN IN OUT.tif`), or assign EPSG:3857 / EPSG:3395 if it is one of them")),
                }
            }
            CrsKind::Geographic => {
                self.check_pole()?;
                let (m_lat, m_lon) = metres_per_degree(y);
                Ok((self.res_x() * m_lon, self.res_y() * m_lat))
            }
            CrsKind::Unknown => Err(Error::usage(
                "the raster has no coordinate reference system, so its cell size in metres is unknown",
            )
            .with_fix("assign the CRS the DSM was produced in (photogrammetry software exports it; GDAL can set it with `-a_srs`)")),
        }
    }

    /// Refuse a geographic grid that reaches a pole: a cell centre at or past ±90°, or an
    /// edge past it (east-west cell sizes shrink to nothing there).
    fn check_pole(&self) -> Result<()> {
        let (_, y0, _, y1) = self.bounds();
        let half = self.res_y() / 2.0;
        let (c0, c1) = (y0 + half, y1 - half);
        if y0 < -90.0 || y1 > 90.0 || c0 <= -90.0 || c1 >= 90.0 {
            return Err(Error::usage(format!(
                "the geographic grid spans latitudes {y0}° to {y1}° (cell centres {c0}° to {c1}°), which reaches or passes a pole: there a degree of longitude is no distance, so cell sizes in metres are undefined",
            ))
            .with_fix("check the geotransform (latitude and longitude may be swapped, or the file is not geographic), or reproject the raster to a polar or local projected CRS"));
        }
        Ok(())
    }

    /// Refuse a UTM grid whose scale error exceeds [`MAX_SCALE_ERROR`] somewhere: the
    /// transverse Mercator scale at easting E is k₀·cosh((E − E₀)/(k₀·a)) with k₀ = 0.9996
    /// and E₀ = 500 km (spherical form, Snyder 1987, eqs. 8-1 and 8-2; the ellipsoid
    /// changes k − k₀ by well under 1 %, far below the threshold's margin).
    fn check_utm_scale(&self, unit_m: f64) -> Result<()> {
        const K0: f64 = 0.9996;
        let (x0, _, x1, _) = self.bounds();
        let (e0, e1) = (
            (x0 * unit_m - 500_000.0).abs(),
            (x1 * unit_m - 500_000.0).abs(),
        );
        let far = e0.max(e1);
        let near = if x0 * unit_m <= 500_000.0 && x1 * unit_m >= 500_000.0 {
            0.0
        } else {
            e0.min(e1)
        };
        let k = |d: f64| K0 * (d / (K0 * WGS84_A)).cosh();
        let worst = (k(far) - 1.0).abs().max((k(near) - 1.0).abs());
        if worst > MAX_SCALE_ERROR {
            return Err(Error::usage(format!(
                "the grid lies up to {:.0} km from the central meridian of {}, where the projection's scale factor reaches {:.4}: its cells are {:.2} % off ground metres, more than terrastack takes at face value ({} %)",
                far / 1000.0,
                self.crs.label(),
                k(far),
                worst * 100.0,
                MAX_SCALE_ERROR * 100.0
            ))
            .with_fix("reproject the raster to the UTM zone that contains the site (or a national grid), e.g. `gdalwarp -t_srs EPSG:326NN IN OUT.tif`"));
        }
        Ok(())
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
        // Worked in docs/methods.md ("Metres per degree"): at 36.6° 110970.16 m and 89475.76 m.
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
    fn pseudo_mercator_cells_are_corrected_to_ground_metres() {
        // EPSG Guidance Note 7-2, §1.3.3.2 worked example (from memory, checked against
        // the forward formula y = a·ln tan(π/4 + φ/2)): northing 2 800 000.00 m is
        // latitude 24°22'54.433" N.
        let lat = 24.0 + 22.0 / 60.0 + 54.433 / 3600.0;
        assert_relative_eq!(pseudo_mercator_latitude(2_800_000.0), lat, epsilon = 1e-7);
        // A 1 m cell centred there: east-west N(φ)·cos φ/a, north-south M(φ)·dφ with dφ
        // the latitude change across the cell (finite difference of the inverse).
        let g = Grid::new(
            10,
            10,
            [-11_169_055.58, 1.0, 0.0, 2_800_000.5, 0.0, -1.0],
            Crs::from_epsg(3857),
        )
        .unwrap();
        let (hx, hy) = g.cell_size_m(0.0).unwrap();
        let (m_lat, m_lon) = metres_per_degree(lat);
        let a_deg = WGS84_A * std::f64::consts::PI / 180.0;
        assert_relative_eq!(hx, m_lon / a_deg, epsilon = 1e-9);
        let dphi = pseudo_mercator_latitude(2_800_000.5) - pseudo_mercator_latitude(2_799_999.5);
        assert_relative_eq!(hy, m_lat * dphi, epsilon = 1e-9);
        // About cos φ = 0.911 of the grid metre: the 1/cos(lat) error the issue names.
        assert!((hx - 0.9108).abs() < 1e-3, "{hx}");
        // The equator is true scale east-west (N(0) = a).
        let eq = Grid::new(4, 4, [0.0, 1.0, 0.0, 2.0, 0.0, -1.0], Crs::from_epsg(3857)).unwrap();
        assert_relative_eq!(eq.cell_size_m(1.5).unwrap().0, 1.0, epsilon = 1e-12);
    }

    #[test]
    fn world_mercator_cells_use_the_conformal_scale() {
        // Forward ellipsoidal Mercator (Snyder 1987, eq. 7-7) at 50°, then the inverse
        // must return 50°, and a cell's size is Δ·cos φ/√(1 − e² sin²φ) (eq. 7-8).
        let f = 1.0 / WGS84_INV_F;
        let e = (f * (2.0 - f)).sqrt();
        let phi = 50f64.to_radians();
        let es = e * phi.sin();
        let y = WGS84_A
            * ((std::f64::consts::FRAC_PI_4 + phi / 2.0).tan()
                * ((1.0 - es) / (1.0 + es)).powf(e / 2.0))
            .ln();
        assert_relative_eq!(world_mercator_latitude(y), 50.0, epsilon = 1e-10);
        let g = Grid::new(
            4,
            4,
            [0.0, 2.0, 0.0, y + 1.0, 0.0, -2.0],
            Crs::from_epsg(3395),
        )
        .unwrap();
        let (hx, hy) = g.cell_size_m(0.0).unwrap();
        let k = (1.0 - es * es).sqrt() / phi.cos();
        assert_relative_eq!(hx, 2.0 / k, epsilon = 1e-9);
        assert_relative_eq!(hy, hx, epsilon = 1e-15);
        // An unparameterised Mercator (a WKT without EPSG code) is refused with the fix.
        let mut crs = Crs::none();
        crs.kind = CrsKind::Projected;
        crs.linear_unit_m = Some(1.0);
        crs.wkt = Some(r#"PROJCRS["x",CONVERSION["m",METHOD["Mercator (variant B)"]]]"#.into());
        let g = Grid::new(4, 4, [0.0, 1.0, 0.0, 0.0, 0.0, -1.0], crs).unwrap();
        let e = g.cell_size_m(0.0).unwrap_err().to_string();
        assert!(e.contains("Mercator") && e.contains("UTM"), "{e}");
        let mut tm = g.crs.clone();
        tm.wkt = Some(r#"PROJCRS["x",CONVERSION["t",METHOD["Transverse Mercator"]]]"#.into());
        assert_eq!(tm.ground_scale(), GroundScale::Grid);
    }

    #[test]
    fn utm_far_outside_its_zone_refused() {
        // Inside the zone (200 km from the central meridian) the grid is taken as is.
        let inside = Grid::new(
            10,
            10,
            [300_000.0, 1.0, 0.0, 5e6, 0.0, -1.0],
            Crs::from_epsg(32633),
        );
        assert_eq!(inside.unwrap().cell_size_m(0.0).unwrap(), (1.0, 1.0));
        // 500 km off (x = 0, as many invented test grids lie): k = 1.0027, accepted.
        let edge = Grid::new(
            10,
            10,
            [0.0, 1.0, 0.0, 5e6, 0.0, -1.0],
            Crs::from_epsg(32633),
        );
        assert!(edge.unwrap().cell_size_m(0.0).is_ok());
        // 1000 km east: k = 0.9996·cosh(1000/(0.9996·6378.137)) = 1.0119 (Snyder eq. 8-1,
        // spherical form), 1.2 % off: refused with the fix.
        let far = Grid::new(
            10,
            10,
            [1_500_000.0, 1.0, 0.0, 5e6, 0.0, -1.0],
            Crs::from_epsg(32633),
        );
        let e = far.unwrap().cell_size_m(0.0).unwrap_err().to_string();
        assert!(
            e.contains("central meridian") && e.contains("1.0119"),
            "{e}"
        );
    }

    #[test]
    fn geographic_grid_at_or_past_a_pole_refused() {
        // Cell centres at exactly 90° (a pixel-is-point global grid) and an extent past it.
        let d = 0.5;
        for t in [
            [-180.0, d, 0.0, 90.0 + d / 2.0, 0.0, -d],
            [-180.0, d, 0.0, 95.0, 0.0, -d],
            [-180.0, d, 0.0, -85.0, 0.0, -d],
        ] {
            let g = Grid::new(20, 20, t, Crs::from_epsg(4326)).unwrap();
            let e = g.cell_size_m(3.0).unwrap_err().to_string();
            assert!(e.contains("pole") && e.contains("geographic grid"), "{e}");
        }
        // Up to the pole's edge is fine.
        let g = Grid::new(
            20,
            20,
            [-180.0, d, 0.0, 90.0, 0.0, -d],
            Crs::from_epsg(4326),
        )
        .unwrap();
        assert!(g.cell_size_m(0.0).is_ok());
    }

    #[test]
    fn invalid_linear_units_have_their_own_message() {
        for u in [0.0, -1.0, f64::NAN] {
            let mut crs = Crs::from_epsg(2227);
            crs.linear_unit_m = Some(u);
            let g = Grid::new(4, 4, [0.0, 1.0, 0.0, 0.0, 0.0, -1.0], crs).unwrap();
            let e = g.cell_size_m(0.0).unwrap_err().to_string();
            assert!(e.contains("not a length"), "{e}");
        }
        let mut crs = Crs::none();
        crs.kind = CrsKind::Projected;
        let g = Grid::new(4, 4, [0.0, 1.0, 0.0, 0.0, 0.0, -1.0], crs).unwrap();
        let e = g.cell_size_m(0.0).unwrap_err().to_string();
        assert!(
            e.contains("no EPSG code") && !e.contains("without GDAL"),
            "{e}"
        );
    }

    #[test]
    fn zero_and_nan_cell_sizes_named() {
        let e = Grid::new(4, 4, [0.0, 1.0, 0.0, 0.0, 0.0, 0.0], Crs::none()).unwrap_err();
        assert!(e.to_string().contains("y cell size of 0"), "{e}");
        let e = Grid::new(4, 4, [0.0, f64::NAN, 0.0, 0.0, 0.0, -1.0], Crs::none()).unwrap_err();
        assert!(e.to_string().contains("non-finite"), "{e}");
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

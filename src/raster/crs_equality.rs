//! Whether two CRSs are the same: [`Crs::same_as`]. With the `gdal` feature the
//! comparison goes through GDAL's spatial-reference API (`raster::gdal::same_crs`), which
//! is why it lives here, above the grid, and not beside [`Crs`] in `grid.rs`.

use crate::grid::Crs;
#[cfg(feature = "gdal")]
use crate::grid::CrsKind;

impl Crs {
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
}

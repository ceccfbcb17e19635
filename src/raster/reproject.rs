//! Reading a source in another CRS onto a window of the target grid: through GDAL's
//! warper with the `gdal` feature, refused without it (naming both CRSs).

use ndarray::Array2;

use super::{RasterSource, Resampling};
#[cfg(not(feature = "gdal"))]
use crate::error::Error;
use crate::error::Result;
use crate::grid::{Grid, Window};

/// Band `band` of `source` (in another CRS than `target`) warped onto `window` of
/// `target` by `method`, as f32 (NaN = nodata).
#[cfg(feature = "gdal")]
pub fn read_reprojected(
    source: &dyn RasterSource,
    band: usize,
    target: &Grid,
    window: Window,
    method: Resampling,
) -> Result<Array2<f32>> {
    crate::raster::gdal::warp_window(source.path(), band, target, window, method)
}

/// Band `band` of `source` (in another CRS than `target`): refused, as this build
/// cannot reproject.
#[cfg(not(feature = "gdal"))]
pub fn read_reprojected(
    source: &dyn RasterSource,
    _band: usize,
    target: &Grid,
    _window: Window,
    _method: Resampling,
) -> Result<Array2<f32>> {
    Err(Error::file(
        source.path(),
        format!(
            "is in {} but the target grid is in {}, and this build cannot reproject",
            source.grid().crs.label(),
            target.crs.label()
        ),
    )
    .with_fix(format!(
        "build terrastack with `--features gdal`, or reproject the file to {} first",
        target.crs.label()
    )))
}

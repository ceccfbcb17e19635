//! Reprojection of one band onto a window of a target grid through GDAL's warper
//! (`GDALReprojectImage` with an exact transformation: error threshold 0, so every
//! target cell centre is transformed by PROJ rather than interpolated along a line).

use std::path::Path;
use std::ptr;

use gdal::raster::GdalDataType;
use gdal::DriverManager;
use ndarray::Array2;

use super::crs::srs_of;
use super::{gdal_message, open_raster};
use crate::align::Resampling;
use crate::error::{Error, Result};
use crate::grid::{Grid, Window};

/// Band `band` (1-based) of the raster at `path`, warped onto `window` of `target` by
/// GDAL's warper with an exact transformation (error threshold 0).
///
/// The window may reach past the target grid (for a block's halo); those cells are warped
/// like any other, along the target grid's transform. The source band's nodata value
/// (and NaN, for float bands without one) marks cells that take no part in resampling;
/// target cells with no valid source data are NaN. `method` maps to GDAL's nearest,
/// bilinear, cubic (Keys, a = −0.5) and average kernels. Only the source cells the
/// window needs are read.
pub fn warp_window(
    path: &Path,
    band: usize,
    target: &Grid,
    window: Window,
    method: Resampling,
) -> Result<Array2<f32>> {
    if window.is_empty() {
        return Ok(Array2::from_elem((window.height, window.width), f32::NAN));
    }
    let src = open_raster(path)?;
    if band == 0 || band > src.raster_count() {
        return Err(Error::file(
            path,
            format!(
                "band {band} does not exist: the file has {} band(s), numbered from 1",
                src.raster_count()
            ),
        )
        .with_fix("pick a band between 1 and the file's band count"));
    }
    if src.spatial_ref().is_err() {
        return Err(Error::file(
            path,
            "the raster has no coordinate reference system, so it cannot be reprojected",
        )
        .with_fix("assign the CRS the raster was produced in"));
    }
    if src.geo_transform().is_err() {
        return Err(Error::file(
            path,
            "the raster has no geotransform, so it cannot be reprojected",
        )
        .with_fix("georeference the raster first"));
    }
    let dst_wkt = srs_of(&target.crs)?.to_wkt().map_err(|e| {
        Error::usage(format!(
            "GDAL cannot write the target CRS {} as WKT: {}",
            target.crs.label(),
            gdal_message(&e)
        ))
        .with_fix("give the target CRS as an EPSG code")
    })?;
    let src_band = src
        .rasterband(band)
        .map_err(|e| super::gdal_file_error(path, &e))?;
    let src_nodata = src_band.no_data_value().or(match src_band.band_type() {
        GdalDataType::Float32 | GdalDataType::Float64 => Some(f64::NAN),
        _ => None,
    });

    let mem_error = |what: &str, e: &gdal::errors::GdalError| {
        Error::usage(format!(
            "GDAL could not prepare the in-memory target window ({what}): {}",
            gdal_message(e)
        ))
        .with_fix("reduce the block size or memory budget")
    };
    let driver = DriverManager::get_driver_by_name("MEM").map_err(|e| mem_error("driver", &e))?;
    let mut dst = driver
        .create_with_band_type::<f32, _>("", window.width, window.height, 1)
        .map_err(|e| mem_error("create", &e))?;
    let t = target.transform;
    let dst_transform = [
        t[0] + window.col as f64 * t[1] + window.row as f64 * t[2],
        t[1],
        t[2],
        t[3] + window.col as f64 * t[4] + window.row as f64 * t[5],
        t[4],
        t[5],
    ];
    dst.set_geo_transform(&dst_transform)
        .map_err(|e| mem_error("transform", &e))?;
    dst.set_projection(&dst_wkt)
        .map_err(|e| mem_error("CRS", &e))?;
    {
        let mut b = dst.rasterband(1).map_err(|e| mem_error("band", &e))?;
        b.set_no_data_value(Some(f64::NAN))
            .map_err(|e| mem_error("nodata", &e))?;
        b.fill(f64::NAN, None).map_err(|e| mem_error("fill", &e))?;
    }

    let alg = match method {
        Resampling::Nearest => gdal_sys::GDALResampleAlg::GRA_NearestNeighbour,
        Resampling::Bilinear => gdal_sys::GDALResampleAlg::GRA_Bilinear,
        Resampling::Cubic => gdal_sys::GDALResampleAlg::GRA_Cubic,
        Resampling::Average => gdal_sys::GDALResampleAlg::GRA_Average,
    };
    // SAFETY: the options are created, filled and destroyed here; band lists are
    // allocated with CPLMalloc because GDALDestroyWarpOptions frees them with CPLFree;
    // both datasets outlive the call.
    let rv = unsafe {
        gdal_sys::CPLErrorReset();
        let opts = gdal_sys::GDALCreateWarpOptions();
        (*opts).nBandCount = 1;
        let src_bands =
            gdal_sys::CPLMalloc(std::mem::size_of::<std::ffi::c_int>()).cast::<std::ffi::c_int>();
        *src_bands = band as std::ffi::c_int;
        let dst_bands =
            gdal_sys::CPLMalloc(std::mem::size_of::<std::ffi::c_int>()).cast::<std::ffi::c_int>();
        *dst_bands = 1;
        (*opts).panSrcBands = src_bands;
        (*opts).panDstBands = dst_bands;
        if let Some(nd) = src_nodata {
            gdal_sys::GDALWarpInitSrcNoDataReal(opts, nd);
        }
        gdal_sys::GDALWarpInitDstNoDataReal(opts, f64::NAN);
        (*opts).papszWarpOptions = gdal_sys::CSLSetNameValue(
            (*opts).papszWarpOptions,
            c"INIT_DEST".as_ptr(),
            c"NO_DATA".as_ptr(),
        );
        let rv = gdal_sys::GDALReprojectImage(
            src.c_dataset(),
            ptr::null(),
            dst.c_dataset(),
            ptr::null(),
            alg,
            0.0,
            0.0,
            None,
            ptr::null_mut(),
            opts,
        );
        gdal_sys::GDALDestroyWarpOptions(opts);
        rv
    };
    if rv != gdal_sys::CPLErr::CE_None {
        // SAFETY: the message belongs to GDAL's thread-local error state; copied at once.
        let msg = unsafe {
            let p = gdal_sys::CPLGetLastErrorMsg();
            if p.is_null() {
                String::new()
            } else {
                std::ffi::CStr::from_ptr(p).to_string_lossy().into_owned()
            }
        };
        return Err(Error::file(
            path,
            format!(
                "GDAL's warper failed to reproject band {band} onto {}: {}",
                target.crs.label(),
                msg.trim()
            ),
        )
        .with_fix(
            "check that the raster and the target grid overlap and that both CRSs are valid",
        ));
    }
    let out_band = dst.rasterband(1).map_err(|e| mem_error("read back", &e))?;
    let mut buf = vec![0.0f32; window.len()];
    out_band
        .read_into_slice::<f32>(
            (0, 0),
            (window.width, window.height),
            (window.width, window.height),
            &mut buf,
            None,
        )
        .map_err(|e| mem_error("read back", &e))?;
    Array2::from_shape_vec((window.height, window.width), buf)
        .map_err(|e| Error::usage(format!("warped window has the wrong shape: {e}")))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::grid::Crs;
    use gdal::spatial_ref::SpatialRef;

    /// A 20 x 20 Float32 UTM 33N raster whose value is its column index, cells of 10 m.
    fn write_ramp(dir: &Path) -> std::path::PathBuf {
        let path = dir.join("ramp.tif");
        let drv = DriverManager::get_driver_by_name("GTiff").unwrap();
        let mut ds = drv
            .create_with_band_type::<f32, _>(&path, 20, 20, 1)
            .unwrap();
        ds.set_geo_transform(&[500_000.0, 10.0, 0.0, 100_000.0, 0.0, -10.0])
            .unwrap();
        ds.set_spatial_ref(&SpatialRef::from_epsg(32633).unwrap())
            .unwrap();
        let data: Vec<f32> = (0..400).map(|i| (i % 20) as f32).collect();
        let mut buf = gdal::raster::Buffer::new((20, 20), data);
        ds.rasterband(1)
            .unwrap()
            .write((0, 0), (20, 20), &mut buf)
            .unwrap();
        path
    }

    #[test]
    fn same_crs_shift_is_exact() {
        // Same CRS, target shifted by whole cells: nearest and bilinear both return the
        // source cells unchanged (the interpolation weights are 0/1 at cell centres).
        let dir = tempfile::tempdir().unwrap();
        let path = write_ramp(dir.path());
        let target = Grid::new(
            10,
            10,
            [500_050.0, 10.0, 0.0, 99_950.0, 0.0, -10.0],
            Crs::from_epsg(32633),
        )
        .unwrap();
        for m in [Resampling::Nearest, Resampling::Bilinear] {
            let w = warp_window(&path, 1, &target, Window::new(0, 0, 10, 10), m).unwrap();
            for c in 0..10 {
                assert_eq!(w[[3, c]], (c + 5) as f32, "{m:?} col {c}");
            }
        }
        // A window partly beyond the source: the part off the source is NaN.
        let w = warp_window(
            &path,
            1,
            &target,
            Window::new(12, 0, 5, 2),
            Resampling::Nearest,
        )
        .unwrap();
        assert_eq!(w[[0, 0]], 17.0);
        assert_eq!(w[[0, 2]], 19.0);
        assert!(w[[0, 3]].is_nan() && w[[1, 4]].is_nan());
    }

    #[test]
    fn target_without_crs_refused() {
        let dir = tempfile::tempdir().unwrap();
        let path = write_ramp(dir.path());
        let target = Grid::new(2, 2, [0.0, 1.0, 0.0, 0.0, 0.0, -1.0], Crs::none()).unwrap();
        let e = warp_window(
            &path,
            1,
            &target,
            Window::new(0, 0, 2, 2),
            Resampling::Nearest,
        )
        .unwrap_err()
        .to_string();
        assert!(e.contains("neither an EPSG code nor a WKT"), "{e}");
        let t2 = Grid::new(2, 2, [0.0, 1.0, 0.0, 0.0, 0.0, -1.0], Crs::from_epsg(32633)).unwrap();
        let e = warp_window(&path, 2, &t2, Window::new(0, 0, 2, 2), Resampling::Nearest)
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("band 2 does not exist") && e.contains("ramp.tif"),
            "{e}"
        );
    }
}

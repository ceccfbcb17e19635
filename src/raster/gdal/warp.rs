//! Reprojection of one band onto a window of a target grid through GDAL's warper
//! (a `GDALWarpOperation` driven by the exact general image-to-image transformer: error
//! threshold 0, so every target cell centre is transformed by PROJ rather than
//! interpolated along a line).
//!
//! GDAL widens the bilinear and cubic kernels when going coarser, by a scale it derives
//! for each processing chunk from the chunk's source bounding box, so the same cell could
//! come out differently depending on the block it was warped in. Here the scale is fixed
//! once per target grid (from the local Jacobian at the grid's centre) and handed to the
//! warper as its `XSCALE`/`YSCALE` options: a cell's value does not depend on the window.

use std::ffi::CString;
use std::path::Path;
use std::ptr;

use gdal::raster::GdalDataType;
use gdal::DriverManager;
use ndarray::Array2;

use super::crs::srs_of;
use super::{gdal_message, open_raster};
use crate::error::{Error, Result};
use crate::grid::{Grid, Window};
use crate::raster::Resampling;

/// Band `band` (1-based) of the raster at `path`, warped onto `window` of `target` by
/// GDAL's warper with an exact transformation (error threshold 0).
///
/// The window may reach past the target grid (for a block's halo); those cells are warped
/// like any other, along the target grid's transform. The source band's nodata value
/// (and NaN, for float bands without one) marks cells that take no part in resampling;
/// target cells with no valid source data are NaN. `method` maps to GDAL's nearest,
/// bilinear, cubic (Keys, a = −0.5) and average kernels. Only the source cells the
/// window needs are read. The kernel scale is fixed per target grid (see the module
/// documentation), so any split into windows gives bit-identical cells.
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
    let dst_srs = srs_of(&target.crs)?;
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
    dst.set_spatial_ref(&dst_srs)
        .map_err(|e| mem_error("CRS", &e))?;
    {
        let mut b = dst.rasterband(1).map_err(|e| mem_error("band", &e))?;
        b.set_no_data_value(Some(f64::NAN))
            .map_err(|e| mem_error("nodata", &e))?;
        b.fill(f64::NAN, None).map_err(|e| mem_error("fill", &e))?;
    }

    let frame = SourceFrame::of(path, &src)?;
    let (x_scale, y_scale) = kernel_scales(path, &frame, target)?;
    // An alpha band (the last band, as orthomosaics carry it) marks empty cells.
    let count = src.raster_count();
    let alpha_band = src
        .rasterband(count)
        .ok()
        .filter(|b| b.color_interpretation() == gdal::raster::ColorInterpretation::AlphaBand)
        .map(|_| count)
        .filter(|&a| a != band);
    let alg = match method {
        Resampling::Nearest => gdal_sys::GDALResampleAlg::GRA_NearestNeighbour,
        Resampling::Bilinear => gdal_sys::GDALResampleAlg::GRA_Bilinear,
        Resampling::Cubic => gdal_sys::GDALResampleAlg::GRA_Cubic,
        Resampling::Average => gdal_sys::GDALResampleAlg::GRA_Average,
    };
    let xs = CString::new(format!("{x_scale:.17e}")).unwrap_or_default();
    let ys = CString::new(format!("{y_scale:.17e}")).unwrap_or_default();
    // SAFETY: the transformer, options and operation are created, used and destroyed
    // here; band lists are allocated with CPLMalloc because GDALDestroyWarpOptions frees
    // them with CPLFree; both datasets and the option strings outlive every call. The
    // warp operation is driven directly (not through GDALReprojectImage, which would take
    // source nodata from band 1 whatever band is warped).
    let rv = unsafe {
        gdal_sys::CPLErrorReset();
        let transformer = gdal_sys::GDALCreateGenImgProjTransformer2(
            src.c_dataset(),
            dst.c_dataset(),
            ptr::null_mut(),
        );
        if transformer.is_null() {
            gdal_sys::CPLErr::CE_Failure
        } else {
            let opts = gdal_sys::GDALCreateWarpOptions();
            (*opts).hSrcDS = src.c_dataset();
            (*opts).hDstDS = dst.c_dataset();
            (*opts).eResampleAlg = alg;
            (*opts).nBandCount = 1;
            let src_bands = gdal_sys::CPLMalloc(std::mem::size_of::<std::ffi::c_int>())
                .cast::<std::ffi::c_int>();
            *src_bands = band as std::ffi::c_int;
            let dst_bands = gdal_sys::CPLMalloc(std::mem::size_of::<std::ffi::c_int>())
                .cast::<std::ffi::c_int>();
            *dst_bands = 1;
            (*opts).panSrcBands = src_bands;
            (*opts).panDstBands = dst_bands;
            if let Some(a) = alpha_band {
                (*opts).nSrcAlphaBand = a as std::ffi::c_int;
            }
            if let Some(nd) = src_nodata {
                gdal_sys::GDALWarpInitSrcNoDataReal(opts, nd);
            }
            gdal_sys::GDALWarpInitDstNoDataReal(opts, f64::NAN);
            let mut wo = (*opts).papszWarpOptions;
            wo = gdal_sys::CSLSetNameValue(wo, c"INIT_DEST".as_ptr(), c"NO_DATA".as_ptr());
            wo = gdal_sys::CSLSetNameValue(wo, c"XSCALE".as_ptr(), xs.as_ptr());
            wo = gdal_sys::CSLSetNameValue(wo, c"YSCALE".as_ptr(), ys.as_ptr());
            (*opts).papszWarpOptions = wo;
            (*opts).pfnTransformer = Some(gdal_sys::GDALGenImgProjTransform);
            (*opts).pTransformerArg = transformer;
            let op = gdal_sys::GDALCreateWarpOperation(opts);
            let rv = if op.is_null() {
                gdal_sys::CPLErr::CE_Failure
            } else {
                let rv = gdal_sys::GDALChunkAndWarpImage(
                    op,
                    0,
                    0,
                    window.width as std::ffi::c_int,
                    window.height as std::ffi::c_int,
                );
                gdal_sys::GDALDestroyWarpOperation(op);
                rv
            };
            gdal_sys::GDALDestroyWarpOptions(opts);
            gdal_sys::GDALDestroyGenImgProjTransformer(transformer);
            rv
        }
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
    let mut out = Array2::from_shape_vec((window.height, window.width), buf)
        .map_err(|e| Error::usage(format!("warped window has the wrong shape: {e}")))?;
    if method == Resampling::Average {
        clear_outside_footprints(&mut out, &frame, target, window);
    }
    Ok(out)
}

/// Where the source raster lies: its geotransform, inverted, and its CRS.
struct SourceFrame {
    transform: [f64; 6],
    det: f64,
    crs: crate::grid::Crs,
    width: f64,
    height: f64,
}

impl SourceFrame {
    fn of(path: &Path, src: &gdal::Dataset) -> Result<SourceFrame> {
        let st = src
            .geo_transform()
            .map_err(|e| super::gdal_file_error(path, &e))?;
        let crs = match src.spatial_ref() {
            Ok(srs) => super::crs_from_srs(&srs).map_err(|e| e.in_file(path))?,
            Err(e) => return Err(super::gdal_file_error(path, &e)),
        };
        let det = st[1] * st[5] - st[2] * st[4];
        if det == 0.0 || !det.is_finite() {
            return Err(
                Error::file(path, "the raster's geotransform cannot be inverted")
                    .with_fix("georeference the raster with a non-degenerate transform"),
            );
        }
        let (w, h) = src.raster_size();
        Ok(SourceFrame {
            transform: st,
            det,
            crs,
            width: w as f64,
            height: h as f64,
        })
    }

    /// Fractional source (col, row) of a point in the source CRS.
    fn to_px(&self, (x, y): (f64, f64)) -> (f64, f64) {
        let st = &self.transform;
        let (dx, dy) = (x - st[0], y - st[3]);
        (
            (st[5] * dx - st[2] * dy) / self.det,
            (st[1] * dy - st[4] * dx) / self.det,
        )
    }
}

/// Destination pixels per source pixel along the target grid's x and y axes, at the
/// target grid's centre, capped at 1 (going finer never narrows a kernel): the reciprocal
/// of the length, in source pixels, of one target cell's side after the exact
/// transformation. This is the ratio GDAL's warper calls XSCALE/YSCALE.
fn kernel_scales(path: &Path, frame: &SourceFrame, target: &Grid) -> Result<(f64, f64)> {
    let (cc, cr) = (target.width as f64 / 2.0, target.height as f64 / 2.0);
    let mut pts = [
        target.cell_centre(cc, cr),
        target.cell_centre(cc + 1.0, cr),
        target.cell_centre(cc, cr + 1.0),
    ];
    super::transform_points(&target.crs, &frame.crs, &mut pts).map_err(|e| e.in_file(path))?;
    let p0 = frame.to_px(pts[0]);
    let px = frame.to_px(pts[1]);
    let py = frame.to_px(pts[2]);
    let lx = (px.0 - p0.0).hypot(px.1 - p0.1);
    let ly = (py.0 - p0.0).hypot(py.1 - p0.1);
    if !(lx > 0.0 && ly > 0.0 && lx.is_finite() && ly.is_finite()) {
        return Err(Error::file(
            path,
            format!(
                "the centre of the target grid has no usable position in the raster's CRS {}",
                frame.crs.label()
            ),
        )
        .with_fix("check that the target grid lies where the raster's CRS is defined"));
    }
    Ok(((1.0 / lx).min(1.0), (1.0 / ly).min(1.0)))
}

/// Set to NaN the cells of `out` (covering `window` of `target`) whose footprint lies
/// wholly outside the source raster. GDAL 3.6's average kernel rounds a footprint out to
/// whole source cells and so gives values to target cells up to one source cell beyond
/// the raster's edge; a cell's footprint is the bounding box of its four corners' exact
/// positions in source pixels. Left as GDAL made it when a corner cannot be transformed.
fn clear_outside_footprints(
    out: &mut Array2<f32>,
    frame: &SourceFrame,
    target: &Grid,
    window: Window,
) {
    let t = &target.transform;
    let (w, h) = (window.width, window.height);
    let mut corners = Vec::with_capacity((w + 1) * (h + 1));
    for j in 0..=h {
        for i in 0..=w {
            let (c, r) = (
                (window.col + i as i64) as f64,
                (window.row + j as i64) as f64,
            );
            corners.push((t[0] + c * t[1] + r * t[2], t[3] + c * t[4] + r * t[5]));
        }
    }
    if super::transform_points(&target.crs, &frame.crs, &mut corners).is_err() {
        return;
    }
    let px: Vec<(f64, f64)> = corners.into_iter().map(|p| frame.to_px(p)).collect();
    for ((r, c), v) in out.indexed_iter_mut() {
        let quad = [
            px[r * (w + 1) + c],
            px[r * (w + 1) + c + 1],
            px[(r + 1) * (w + 1) + c],
            px[(r + 1) * (w + 1) + c + 1],
        ];
        let xmin = quad.iter().map(|p| p.0).fold(f64::INFINITY, f64::min);
        let xmax = quad.iter().map(|p| p.0).fold(f64::NEG_INFINITY, f64::max);
        let ymin = quad.iter().map(|p| p.1).fold(f64::INFINITY, f64::min);
        let ymax = quad.iter().map(|p| p.1).fold(f64::NEG_INFINITY, f64::max);
        if xmax <= 0.0 || ymax <= 0.0 || xmin >= frame.width || ymin >= frame.height {
            *v = f32::NAN;
        }
    }
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
    fn per_band_nodata_of_the_warped_band() {
        // Erdas Imagine files keep a nodata value per band: band 1 says 1, band 2 says 2.
        // Warping band 2 must take band 2's value (cells holding 1 stay valid).
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("bands.img");
        let drv = DriverManager::get_driver_by_name("HFA").unwrap();
        let mut ds = drv.create_with_band_type::<u8, _>(&path, 4, 1, 2).unwrap();
        ds.set_geo_transform(&[500_000.0, 10.0, 0.0, 100_000.0, 0.0, -10.0])
            .unwrap();
        ds.set_spatial_ref(&SpatialRef::from_epsg(32633).unwrap())
            .unwrap();
        for (b, nd) in [(1usize, 1.0), (2, 2.0)] {
            let mut band = ds.rasterband(b).unwrap();
            band.set_no_data_value(Some(nd)).unwrap();
            let mut buf = gdal::raster::Buffer::new((4, 1), vec![1u8, 2, 3, 1]);
            band.write((0, 0), (4, 1), &mut buf).unwrap();
        }
        drop(ds);
        use crate::raster::RasterSource;
        let src = super::super::GdalSource::open(&path).unwrap();
        let w = warp_window(
            &path,
            2,
            src.grid(),
            Window::full(src.grid()),
            Resampling::Nearest,
        )
        .unwrap();
        assert_eq!(w[[0, 0]], 1.0);
        assert!(w[[0, 1]].is_nan());
        assert_eq!(w[[0, 2]], 3.0);
        assert_eq!(w[[0, 3]], 1.0);
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
